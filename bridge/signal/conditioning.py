"""Frequency to capacitance change, drift tracking and a causal band-pass, all streaming."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal as sps


def relative_capacitance(freq_hz: np.ndarray, centre_hz: np.ndarray) -> np.ndarray:
    """Relative capacitance change of an LC oscillator from its frequency.

    With f = 1/(2π√(LC)) and L fixed, C/C0 = (f0/f)², so ΔC/C0 = (f0/f)² − 1
    (dimensionless; positive when the body comes closer and the frequency falls).

    freq_hz: (n, channels) counted frequencies, Hz. centre_hz: (channels,) resting
    frequencies f0, Hz.
    """
    f = np.asarray(freq_hz, dtype=float)
    f0 = np.asarray(centre_hz, dtype=float)
    return (f0 / f) ** 2 - 1.0


PLAUSIBLE_FACTOR = 2.0  # counted frequency within f0 / 2 .. 2 f0 of rest (see plausible_rows)


def plausible_rows(freq_hz: np.ndarray, centre_hz: np.ndarray | None = None,
                   factor: float = PLAUSIBLE_FACTOR) -> np.ndarray:
    """Which rows of (n, channels) frequencies in Hz a conditioner may use: (n,) bool.

    A row is usable when every value is finite, positive and within ``factor`` of the
    channel's resting frequency f0 (Hz; when not known yet, the block's median of finite
    positive rows stands in). Why: ΔC/C0 = (f0/f)² − 1 has no upper bound as f falls, so
    one counter glitch of a few Hz would push the band-pass state and the tracked drift to
    1e9 and more, and the garment would recognise nothing for the rest of the session.
    f0 / 2 means the capacitance quadrupled; a body near a cable changes it by a few per
    cent, temperature drift by less, so anything beyond that is a glitch, not a person.
    """
    f = np.asarray(freq_hz, dtype=float)
    if centre_hz is not None:
        ref = np.asarray(centre_hz, dtype=float)
        if ((ref > 0) & (ref < np.inf)).all():  # then the ratio test alone also refuses NaN, inf and <= 0
            ratio = f / ref
            return ((ratio >= 1.0 / factor) & (ratio <= factor)).all(axis=1)
    ok = np.isfinite(f).all(axis=1) & (f > 0).all(axis=1)
    ref = centre_hz
    if ref is None:
        if not ok.any():
            return ok
        ref = np.median(f[ok], axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = f / np.asarray(ref, dtype=float)
        return ok & ((ratio >= 1.0 / factor) & (ratio <= factor)).all(axis=1)


def design_bandpass(rate_hz: float, low_hz: float = 1.0, high_hz: float = 10.0, order: int = 2) -> np.ndarray:
    """Butterworth band-pass as second-order sections.

    ``order`` is the order of the low-pass prototype, so the band-pass has 2·order poles.
    The gain is −3.01 dB (1/√2) at both cut-offs, by the Butterworth definition.
    """
    nyq = rate_hz / 2.0
    if not 0 < low_hz < high_hz < nyq:
        raise ValueError(f"band-pass needs 0 < low_hz < high_hz < rate_hz/2; got {low_hz}, {high_hz} at {rate_hz} Hz")
    return sps.butter(order, [low_hz, high_hz], btype="bandpass", fs=rate_hz, output="sos")


def bandpass_init(sos: np.ndarray, n_channels: int, first: np.ndarray | None = None) -> np.ndarray:
    """Filter state for ``bandpass_block``, shape (sections, 2, channels).

    Zero by default; with ``first`` (channels,) the state of a filter that has seen that
    value for ever, so a stream starting away from zero gives no start-up transient.
    """
    if first is None:
        return np.zeros((sos.shape[0], 2, n_channels))
    return sps.sosfilt_zi(sos)[:, :, None] * np.asarray(first, dtype=float)[None, None, :]


FEW_ROWS = 8  # blocks up to this many samples: a loop over samples costs less than scipy's per-call set-up


def bandpass_block(sos: np.ndarray, x: np.ndarray, zi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Filter one block (n, channels) along time; returns (y, zf) to pass into the next call.

    A live block holds one or a few samples; for those (up to ``FEW_ROWS``) the recursion
    of ``scipy.signal.sosfilt`` (transposed direct form II) is written out sample by sample,
    the same operations in the same order, so output and state are bit for bit sosfilt's
    and a stream gives the same numbers however it is blocked."""
    n = x.shape[0]
    if n == 0:
        return x.astype(float, copy=True), zi
    if n > FEW_ROWS or x.dtype != np.float64 or zi.dtype != np.float64:
        return sps.sosfilt(sos, x, axis=0, zi=zi)
    z = [[row[0].copy(), row[1].copy()] for row in zi]
    y = np.empty_like(x)
    coeffs = sos.tolist()
    for i in range(n):
        v = x[i]
        for zs, (b0, b1, b2, _, a1, a2) in zip(z, coeffs):
            out = b0 * v + zs[0]
            zs[0] = b1 * v - a1 * out + zs[1]
            zs[1] = b2 * v - a2 * out
            v = out
        y[i] = v
    return y, np.array(z)


def baseline_init(first_level: np.ndarray) -> np.ndarray:
    """Baseline state starting at the first sample's level, (channels,)."""
    return np.array(first_level, dtype=float, copy=True)


def track_baseline(
    x: np.ndarray, baseline: np.ndarray, rate_hz: float, tau_s: float, frozen: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """Slow drift estimate by a first-order low-pass with time constant ``tau_s``.

    Returns (baseline per sample (n, channels), last baseline). With ``frozen`` the
    baseline holds its value (used while a posture is held so it is not learnt away).
    """
    n = x.shape[0]
    if n == 0:
        return np.empty_like(x), baseline
    if frozen:
        out = np.broadcast_to(baseline, x.shape).copy()
        return out, baseline
    a = float(np.exp(-1.0 / (tau_s * rate_hz)))
    if n <= FEW_ROWS and x.dtype == np.float64:  # lfilter's recursion written out, as in bandpass_block
        b0, y, z = 1.0 - a, np.empty_like(x), a * baseline
        for i in range(n):
            y[i] = yi = b0 * x[i] + z
            z = 0.0 * x[i] - (-a) * yi
        return y, y[-1].copy()
    y, zf = sps.lfilter([1.0 - a], [1.0, -a], x, axis=0, zi=(a * baseline)[None, :])
    return y, y[-1].copy()


@dataclass(frozen=True)
class BandPass:
    """Conditioning settings, stored in every model so live and offline use one chain."""

    rate_hz: float
    low_hz: float = 1.0
    high_hz: float = 10.0
    order: int = 2
    baseline_tau_s: float = 30.0

    def to_dict(self) -> dict:
        return {
            "rate_hz": self.rate_hz,
            "low_hz": self.low_hz,
            "high_hz": self.high_hz,
            "order": self.order,
            "baseline_tau_s": self.baseline_tau_s,
        }

    @classmethod
    def from_dict(cls, d: dict) -> "BandPass":
        return cls(
            rate_hz=float(d["rate_hz"]),
            low_hz=float(d["low_hz"]),
            high_hz=float(d["high_hz"]),
            order=int(d["order"]),
            baseline_tau_s=float(d["baseline_tau_s"]),
        )


@dataclass
class ConditionerState:
    """Everything a Conditioner carries from one block to the next."""

    centre_hz: np.ndarray | None = None   # resting frequency f0 per channel, Hz
    filter_zi: np.ndarray | None = None   # band-pass state, (sections, 2, channels)
    baseline: np.ndarray | None = None    # tracked drift, ΔC/C0 per channel


class Conditioner:
    """Frequencies in, two conditioned streams out, one block at a time.

    Output per sample and channel (both ΔC/C0, dimensionless):
    ``level``: capacitance change above the slowly tracked baseline (postures show here);
    ``motion``: the band-passed capacitance change (movement shows here).
    The resting frequency f0 is the first sample's unless given: a wearer standing
    still at start is the calibration, and the baseline then follows slow drift.
    """

    def __init__(self, settings: BandPass, centre_hz: np.ndarray | None = None):
        self.settings = settings
        self.sos = design_bandpass(settings.rate_hz, settings.low_hz, settings.high_hz, settings.order)
        self.state = ConditionerState(None if centre_hz is None else np.asarray(centre_hz, dtype=float))

    def process(self, freq_hz: np.ndarray, hold_baseline: bool = False) -> tuple[np.ndarray, np.ndarray]:
        """Condition a block (n, channels) of frequencies in Hz; returns (level, motion)."""
        freq_hz = np.asarray(freq_hz, dtype=float)
        st = self.state
        if freq_hz.shape[0] == 0:
            empty = np.empty((0, freq_hz.shape[1]))
            return empty, empty.copy()
        if st.centre_hz is None:
            st.centre_hz = freq_hz[0].copy()
        dc = relative_capacitance(freq_hz, st.centre_hz)
        if st.filter_zi is None:
            st.filter_zi = bandpass_init(self.sos, dc.shape[1], dc[0])
        if st.baseline is None:
            st.baseline = baseline_init(dc[0])
        s = self.settings
        base, st.baseline = track_baseline(dc, st.baseline, s.rate_hz, s.baseline_tau_s, hold_baseline)
        motion, st.filter_zi = bandpass_block(self.sos, dc, st.filter_zi)
        return dc - base, motion

    def rebaseline(self) -> None:
        """Take the next sample as the new rest: forget f0, drift and filter state."""
        self.state = ConditionerState()
