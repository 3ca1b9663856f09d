"""One garment's processing chain. Live daemon, demo and offline replay all run this class."""

from __future__ import annotations

import numpy as np

from ..decisions import Event, Gate, gate_settings_for
from ..mapping import Dispatch, Mapping
from ..recognition import Model, make_recogniser
from ..signal import Conditioner


class Pipeline:
    """conditioning → recognition → decisions → mapping for one garment.

    ``feed`` takes a block of frequencies (n, channels) in Hz and returns the events it
    completes. Rows with non-finite or non-positive values are counted and skipped.
    """

    def __init__(self, model: Model, mapping: Mapping | None = None, garment: str = ""):
        self.model = model
        self.mapping = mapping
        self.garment = garment
        self.conditioner = Conditioner(model.conditioning)
        self.recogniser = make_recogniser(model)
        self.gate = Gate(model.classes, model.kinds, gate_settings_for(model.classes[1:], model.decision), garment)
        self.samples = 0
        self.skipped = 0
        self.last_probabilities = np.zeros(len(model.classes))

    def feed(self, freq_hz: np.ndarray) -> list[Event]:
        f = np.asarray(freq_hz, dtype=float)
        if f.ndim != 2 or f.shape[1] != self.model.n_channels:
            raise ValueError(f"block has shape {f.shape}; expected (n, {self.model.n_channels})")
        ok = np.isfinite(f).all(axis=1) & (f > 0).all(axis=1)
        if not ok.all():
            self.skipped += int((~ok).sum())
            f = f[ok]
        if f.shape[0] == 0:
            return []
        level, motion = self.conditioner.process(f)
        ends, probs = self.recogniser.push(level, motion)
        events: list[Event] = []
        rate = self.model.rate_hz
        events += self.gate.step_many(np.asarray(ends, dtype=float) / rate, probs)
        if len(probs):
            self.last_probabilities = probs[-1]
        self.samples += f.shape[0]
        return events

    def dispatches(self, events: list[Event]) -> list[Dispatch]:
        if self.mapping is None:
            return []
        return [d for e in events for d in self.mapping.dispatches(e)]

    def stop(self) -> list[Event]:
        """Release held postures: the "left" events to send before shutting down."""
        return self.gate.release_all(self.samples / self.model.rate_hz)
