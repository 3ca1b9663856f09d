"""The model classes and what they write: arrays in .npz plus JSON metadata, never pickle.

Reading a model file back, every array and value checked, is ``model_files.load_model``."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..signal import BandPass
from ..sources.base import channels_differ
from .minirocket import MiniRocketParams
from .windows import WindowSpec

FORMAT = "drape-model"
FORMAT_VERSION = 1
NULL = "null"
MAX_CLASSES = 256
MAX_CHANNELS = 64
MAX_META_BYTES = 1_000_000


class ModelError(ValueError):
    """A model file that cannot be used, with what to do about it."""


STREAMS = ("level", "motion", "both")
MAX_FEATURES = 50_000
MAX_WINDOW_SAMPLES = 100_000
MAX_TEMPLATES = 10_000
MAX_ARRAY_VALUES = 20_000_000
MAX_FOURIER = 20_000
MAX_MAGNITUDE = 1e12  # no stored weight, template or bias comes near this


def fourier_map(z: np.ndarray, projection: np.ndarray, phase: np.ndarray) -> np.ndarray:
    """Random Fourier features: a linear model over them approximates a Gaussian-kernel one
    (Rahimi & Recht, "Random features for large-scale kernel machines", NIPS 2007).

    The projection and the cosine are taken in float32: several times faster than float64
    (the product moves half the bytes; numpy's cosine has SIMD loops for float32), and the
    1e-7 relative error is far below what the features can tell apart. Pass float32
    ``projection`` and ``phase`` (``Model`` keeps converted copies) to skip the conversion.
    Rows are independent: a window gets the same value whatever batch it is scored in.
    """
    z32 = np.asarray(z, dtype=np.float32)
    arg = rows_matmul(z32, np.asarray(projection, dtype=np.float32))
    arg += np.asarray(phase, dtype=np.float32)
    np.cos(arg, out=arg)
    arg *= np.float32(np.sqrt(2.0 / phase.size))
    return arg


def rows_matmul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """a (m, k) @ b (k, n), each row's result the same whatever m.

    BLAS sums a product in an order that depends on the number of rows: a single row goes
    to a matrix-vector routine, and with some OpenBLAS kernels (seen with the Haswell
    kernels of numpy 2.4's OpenBLAS) 3, 7 or 16 rows give other roundings than 2. So rows
    are always multiplied two at a time (a stack of (2, k) products; a lone row is paired
    with a copy of itself): a live hop and the same window in any batch agree to the bit.
    """
    m = a.shape[0]
    if m % 2:
        a = np.concatenate([a, a[-1:]])
    return (a.reshape(-1, 2, a.shape[1]) @ b).reshape(-1, b.shape[1])[:m]


class LiveModel:
    """What every classifier's model offers the pipeline: rate, channels, the source check.

    Subclasses are dataclasses with ``classes``, ``kinds``, ``channel_names``,
    ``conditioning``, ``windows``, ``temperature``, ``classifier``, ``decision`` and ``summary``.
    """

    @property
    def rate_hz(self) -> float:
        return self.conditioning.rate_hz

    @property
    def n_channels(self) -> int:
        return len(self.channel_names)

    def check_source(self, n_channels: int, rate_hz: float, rate_tolerance: float = 0.02) -> None:
        """Raise ModelError unless a source with this channel count and rate fits the model."""
        if n_channels != self.n_channels:
            raise ModelError(
                f"the model was trained on {self.n_channels} channels ({', '.join(self.channel_names)}) "
                f"but the source gives {n_channels}: use a model trained on this garment, or fix the source's channel count"
            )
        if abs(rate_hz - self.rate_hz) > rate_tolerance * self.rate_hz:
            raise ModelError(
                f"the model expects {self.rate_hz:g} Hz samples but the source runs at {rate_hz:g} Hz: "
                f"set the garment's rate to {self.rate_hz:g} Hz or train a model at {rate_hz:g} Hz"
            )

    def check_channel_names(self, names, source: str = "the source") -> None:
        """Raise ModelError unless ``names`` are the model's channels in the model's order.

        A model reads channels by position: a take with other names, or the same in another
        order, would be scored on the wrong antennas without a word. Names a source makes up
        when it knows none (c0, c1, ... of a .ts fit; ch1, ch2, ... of a garment without a
        header line) say nothing either way, so only the count (``check_source``) is checked.
        """
        names, ours = tuple(names), tuple(self.channel_names)
        if not channels_differ(names, ours):
            return
        order = (" (the same names in another order: a model reads channels by position)"
                 if sorted(names) == sorted(ours) else "")
        raise ModelError(
            f"the model was trained on channels {', '.join(ours)} but {source} has {', '.join(names)}{order}: "
            "use a model trained on this garment's channels, or record with the model's"
        )

    def check_takes(self, recs, names=None) -> None:
        """Raise ModelError unless every take (a ``Recording``) fits the model: channel count
        and rate (``check_source``), channel names in the model's order (``check_channel_names``).
        ``names``: what to call each take in the message (its file); by default its place in
        the list, with its wearer and session when it has them."""
        recs = list(recs)
        for i, rec in enumerate(recs):
            if names is not None:
                name = str(names[i])
            else:
                who = ", ".join(f"{k} {v}" for k, v in (("wearer", getattr(rec, "wearer", "")),
                                                         ("session", getattr(rec, "session", ""))) if v)
                name = f"take {i + 1} of {len(recs)}" + (f" ({who})" if who else "")
            self.check_source(len(rec.channel_names), rec.rate_hz)
            self.check_channel_names(rec.channel_names, name)

    def common_metadata(self) -> dict:
        return {
            "format": FORMAT,
            "version": FORMAT_VERSION,
            "classifier": self.classifier,
            "classes": list(self.classes),
            "kinds": self.kinds,
            "channels": list(self.channel_names),
            "conditioning": self.conditioning.to_dict(),
            "windows": self.windows.to_dict(),
            "temperature": self.temperature,
            "decision": self.decision,
            "summary": self.summary,
        }

    def metadata(self) -> dict:
        return self.common_metadata()

    def arrays(self) -> dict[str, np.ndarray]:
        raise NotImplementedError

    def save(self, path: str | Path) -> Path:
        """Write the model as one .npz holding arrays and a JSON metadata string."""
        path = Path(path)
        meta = json.dumps(self.metadata(), indent=1, sort_keys=True).encode("utf-8")
        with open(path, "wb") as fh:
            np.savez(fh, meta_json=np.frombuffer(meta, dtype=np.uint8), **self.arrays())
        return path


@dataclass
class Model(LiveModel):
    """A trained recogniser: conditioning, windowing, feature scaling and a linear classifier.

    ``classes[0]`` is always the null class. ``kinds`` maps each non-null class to
    "gesture" (short, fires once) or "posture" (held: entered, then left).
    ``decision`` holds per-class decision settings (see ``bridge.decisions``).
    """

    classes: tuple[str, ...]
    kinds: dict[str, str]
    channel_names: tuple[str, ...]
    conditioning: BandPass
    windows: WindowSpec
    feature_mean: np.ndarray
    feature_scale: np.ndarray
    weights: np.ndarray
    bias: np.ndarray
    temperature: float = 1.0
    projection: np.ndarray | None = None   # random Fourier map (d, D), or None for plain features
    phase: np.ndarray | None = None        # (D,)
    classifier: str = "linear"
    decision: dict = field(default_factory=dict)
    summary: dict = field(default_factory=dict)

    def __post_init__(self):
        self._map32 = None

    def _fourier32(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """float32 copies of the Fourier map and the weights over it, made once (the file
        keeps the float64 values)."""
        m = self._map32
        if m is None or m[0] is not self.projection or m[1] is not self.phase or m[2] is not self.weights:
            m = self._map32 = (self.projection, self.phase, self.weights,
                               np.ascontiguousarray(self.projection, dtype=np.float32),
                               np.asarray(self.phase, dtype=np.float32), np.ascontiguousarray(self.weights, dtype=np.float32))
        return m[3], m[4], m[5]

    def scores(self, features: np.ndarray) -> np.ndarray:
        """Class scores (m, classes) for raw features (m, d).

        Over the Fourier map the weights are taken in float32 as well: the product stays in
        one precision (no float64 copy of the map's output), about 3× faster per block.
        """
        z = (features - self.feature_mean) / self.feature_scale
        if self.projection is None:
            return rows_matmul(z, self.weights) + self.bias
        projection, phase, weights = self._fourier32()
        return rows_matmul(fourier_map(z, projection, phase), weights) + self.bias

    def arrays(self) -> dict[str, np.ndarray]:
        out = {"feature_mean": self.feature_mean, "feature_scale": self.feature_scale,
               "weights": self.weights, "bias": self.bias}
        if self.projection is not None:
            out.update(projection=self.projection, phase=self.phase)
        return out


@dataclass
class MiniRocketModel(LiveModel):
    """Fixed-kernel convolution features (see ``minirocket``) and a ridge classifier.

    ``stream`` says which conditioned stream(s) the transform reads: "level", "motion" or
    "both" (level channels then motion channels). Scores are ``z @ weights + bias`` of the
    standardised features z; probabilities are softmax(scores / temperature).
    """

    classes: tuple[str, ...]
    kinds: dict[str, str]
    channel_names: tuple[str, ...]
    conditioning: BandPass
    windows: WindowSpec
    stream: str
    params: MiniRocketParams
    feature_mean: np.ndarray
    feature_scale: np.ndarray
    weights: np.ndarray
    bias: np.ndarray
    temperature: float = 1.0
    classifier: str = "minirocket"
    decision: dict = field(default_factory=dict)
    summary: dict = field(default_factory=dict)

    def scores(self, features: np.ndarray) -> np.ndarray:
        """Ridge scores (m, classes) of transform features (m, n_features); each row's the
        same whatever m (``rows_matmul``), so live hops and replayed blocks agree to the bit."""
        return rows_matmul((features - self.feature_mean) / self.feature_scale, self.weights) + self.bias

    def metadata(self) -> dict:
        meta = self.common_metadata()
        meta.update(stream=self.stream, length=self.params.length, input_channels=self.params.n_channels,
                    n_dilations=len(self.params.dilations), n_features=self.params.n_features,
                    edges=self.params.edges)
        return meta

    def arrays(self) -> dict[str, np.ndarray]:
        p = self.params
        return {"dilations": p.dilations.astype(np.int64), "features_per_kernel": p.features_per_kernel.astype(np.int64),
                "channel_mask": p.channel_mask, "biases": p.biases, "feature_mean": self.feature_mean,
                "feature_scale": self.feature_scale, "weights": self.weights, "bias": self.bias}


@dataclass
class DtwModel(LiveModel):
    """Templates matched by DTW (see ``dtw``) with rejection thresholds.

    templates: (n, input channels, length) in the unit of the stream; template_class: (n,)
    index into ``classes[1:]``; radius: Sakoe–Chiba band, samples; thresholds: (classes − 1,)
    distance beyond which a class's templates stop matching; null_templates: (p, input
    channels, length) windows of null (p may be 0) and null_scale their distance unit;
    reject: False when nothing is null for lack of a near template.
    """

    classes: tuple[str, ...]
    kinds: dict[str, str]
    channel_names: tuple[str, ...]
    conditioning: BandPass
    windows: WindowSpec
    stream: str
    templates: np.ndarray
    template_class: np.ndarray
    radius: int
    thresholds: np.ndarray
    null_templates: np.ndarray | None = None
    null_scale: float = 1.0
    reject: bool = True
    temperature: float = 1.0
    classifier: str = "dtw"
    decision: dict = field(default_factory=dict)
    summary: dict = field(default_factory=dict)

    def __post_init__(self):
        if self.null_templates is None:
            self.null_templates = np.empty((0,) + self.templates.shape[1:])
        self.thresholds = np.broadcast_to(np.asarray(self.thresholds, dtype=float), (len(self.classes) - 1,)).copy()

    def metadata(self) -> dict:
        meta = self.common_metadata()
        meta.update(stream=self.stream, length=int(self.templates.shape[2]),
                    input_channels=int(self.templates.shape[1]), n_templates=int(self.templates.shape[0]),
                    n_null_templates=int(self.null_templates.shape[0]), radius=int(self.radius),
                    null_scale=float(self.null_scale), reject=bool(self.reject))
        return meta

    def arrays(self) -> dict[str, np.ndarray]:
        return {"templates": self.templates, "template_class": self.template_class.astype(np.int64),
                "thresholds": self.thresholds, "null_templates": self.null_templates}
