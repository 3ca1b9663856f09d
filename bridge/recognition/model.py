"""Model files: arrays in .npz plus JSON metadata, never pickle, checked on load."""

from __future__ import annotations

import json
import math
import tokenize
import zipfile
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numpy.lib import format as npformat

from ..signal import BandPass
from .features import FEATURES_PER_CHANNEL
from .minirocket import EDGE_MODES, KERNEL_LENGTH, MAX_DILATIONS, N_KERNELS, MiniRocketParams
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


def _require(cond: bool, path, what: str) -> None:
    if not cond:
        raise ModelError(f"{path}: {what}")


# What reading a foreign zip or .npy header can raise besides ValueError/OSError: a bad
# compression method (NotImplementedError), corrupt deflate data (zlib.error), a header the
# literal parser chokes on (SyntaxError, tokenize.TokenError, RecursionError), a count that
# does not fit (OverflowError), an encrypted member (RuntimeError). Every one means "not a
# model file".
_UNREADABLE = (ValueError, OSError, EOFError, zipfile.BadZipFile, SyntaxError, tokenize.TokenError,
               NotImplementedError, RecursionError, OverflowError, zlib.error, TypeError, KeyError, RuntimeError)


class _Archive:
    """An .npz opened as a zip whose members are read only after their header is checked."""

    def __init__(self, path: Path):
        self.path = path
        try:
            self.zip = zipfile.ZipFile(path)
            self.names = {n[:-4]: n for n in self.zip.namelist() if n.endswith(".npy")}
        except _UNREADABLE as exc:
            raise ModelError(f"{path}: not a drape model file ({exc})") from None

    def header(self, name: str) -> tuple[tuple[int, ...], np.dtype]:
        _require(name in self.names, self.path, f"array {name} missing")
        try:
            with self.zip.open(self.names[name]) as fh:
                version = npformat.read_magic(fh)
                if version == (1, 0):
                    shape, fortran, dtype = npformat.read_array_header_1_0(fh, max_header_size=10_000)
                elif version == (2, 0):
                    shape, fortran, dtype = npformat.read_array_header_2_0(fh, max_header_size=10_000)
                else:
                    raise ValueError(f".npy version {version} not read")
        except _UNREADABLE as exc:
            raise ModelError(f"{self.path}: not a drape model file (array {name}: {exc})") from None
        _require(not dtype.hasobject, self.path, f"not a drape model file (array {name} holds Python objects)")
        return tuple(int(n) for n in shape), dtype

    def read(self, name: str, shape: tuple[int, ...], kind: str, finite: bool = True) -> np.ndarray:
        """The array, after checking its header against the expected shape and dtype kind
        (float arrays: no NaN, and no inf unless ``finite`` is False)."""
        got, dtype = self.header(name)
        _require(got == tuple(shape), self.path, f"array {name} has shape {got}, expected {tuple(shape)}")
        _require(dtype.kind in kind and dtype.itemsize <= 8, self.path, f"array {name} has dtype {dtype}, expected kind {kind!r}")
        _require(int(np.prod(shape, dtype=np.int64)) <= MAX_ARRAY_VALUES, self.path, f"array {name} is too large")
        try:
            with self.zip.open(self.names[name]) as fh:
                a = npformat.read_array(fh, allow_pickle=False)
        except _UNREADABLE as exc:
            raise ModelError(f"{self.path}: array {name} unreadable ({exc})") from None
        _require(a.shape == tuple(shape), self.path, f"array {name} is truncated")
        if kind == "f":
            _require(bool(np.isfinite(a).all() if finite else not np.isnan(a).any()), self.path,
                     f"array {name} holds NaN or inf")
            # Finite but enormous values would overflow to inf/NaN scores at run time.
            big = np.abs(a[np.isfinite(a)].astype(np.float64)) > MAX_MAGNITUDE  # float16 would overflow 1e12
            _require(not bool(big.any()), self.path, f"array {name} holds values beyond ±{MAX_MAGNITUDE:g}")
        return a


def load_model(path: str | Path):
    """Read and check a model file; any problem raises ModelError naming the file.

    Returns a Model (linear), MiniRocketModel or DtwModel as the ``classifier`` field says.
    Every array's shape and dtype is checked from its header, against the metadata and the
    size limits, before its data is read.
    """
    path = Path(path)
    if not path.is_file():
        raise ModelError(f"{path}: no such model file (train one with `drape fit RECORDINGS -o {path.name}`)")
    ar = _Archive(path)
    with ar.zip:
        _require("meta_json" in ar.names, path, "no metadata: not a drape model file")
        shape, dtype = ar.header("meta_json")
        _require(dtype == np.uint8 and len(shape) == 1 and shape[0] <= MAX_META_BYTES, path, "metadata malformed")
        raw = ar.read("meta_json", shape, "u")
        try:
            meta = json.loads(raw.tobytes().decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError, RecursionError) as exc:  # RecursionError: nested too deep
            raise ModelError(f"{path}: metadata is not JSON ({exc})") from None
        _require(isinstance(meta, dict) and meta.get("format") == FORMAT, path, "not a drape model file")
        _require(type(meta.get("version")) is int and meta["version"] == FORMAT_VERSION, path,
                 f"model format version {meta.get('version')!r}; this drape reads version {FORMAT_VERSION}: retrain with `drape fit`")
        common = _common_fields(meta, path)
        classifier = common.pop("classifier")
        loader = _LOADERS.get(classifier)
        _require(loader is not None, path, f"unknown classifier {classifier!r}; this drape knows {', '.join(_LOADERS)}")
        return loader(ar, meta, common, path)


def _common_fields(meta: dict, path) -> dict:
    try:
        classes = tuple(str(c) for c in meta["classes"])
        channels = tuple(str(c) for c in meta["channels"])
        kinds = {str(k): str(v) for k, v in dict(meta["kinds"]).items()}
        conditioning = BandPass.from_dict(meta["conditioning"])
        windows = WindowSpec.from_dict(meta["windows"])
        temperature = float(meta["temperature"])
        decision = dict(meta.get("decision", {}))
        summary = dict(meta.get("summary", {}))
        classifier = str(meta.get("classifier", "linear"))
    except (KeyError, TypeError, ValueError, AttributeError, OverflowError) as exc:
        raise ModelError(f"{path}: metadata incomplete or wrong type ({exc})") from None
    _require(2 <= len(classes) <= MAX_CLASSES and classes[0] == NULL and len(set(classes)) == len(classes), path,
             "classes must be unique, start with 'null' and number 2 to 256")
    _require(1 <= len(channels) <= MAX_CHANNELS, path, "channel count must be 1 to 64")
    _require(set(kinds) == set(classes[1:]) and set(kinds.values()) <= {"gesture", "posture"}, path,
             "every class but null needs a kind, 'gesture' or 'posture'")
    _require(np.isfinite(temperature) and temperature > 0, path, "temperature must be a positive number")
    _require(conditioning.rate_hz == windows.rate_hz and 1 <= conditioning.rate_hz <= 10_000, path,
             "sample rate missing or inconsistent")
    _require(all(np.isfinite(v) and v > 0 for v in (windows.window_s, windows.hop_s, conditioning.low_hz,
                                                    conditioning.high_hz, conditioning.baseline_tau_s)), path,
             "window, hop, band edges and baseline time must be positive numbers")
    _require(windows.window_s <= 3600 and windows.hop_s <= 3600, path, "window and hop must be at most an hour")
    _require(conditioning.low_hz < conditioning.high_hz < conditioning.rate_hz / 2 and 1 <= conditioning.order <= 8,
             path, "band-pass edges must satisfy low_hz < high_hz < rate_hz/2, order 1 to 8")
    _require(windows.length <= MAX_WINDOW_SAMPLES and windows.hop <= windows.length, path,
             f"window must be at most {MAX_WINDOW_SAMPLES} samples and the hop no longer than the window")
    return dict(classes=classes, kinds=kinds, channel_names=channels, conditioning=conditioning, windows=windows,
                temperature=temperature, decision=decision, summary=summary, classifier=classifier)


def _int_meta(meta: dict, key: str, lo: int, hi: int, path) -> int:
    v = meta.get(key)
    _require(isinstance(v, int) and not isinstance(v, bool) and lo <= v <= hi, path,
             f"metadata {key} must be a whole number {lo} to {hi}, got {v!r}")
    return v


def _stream_channels(meta: dict, common: dict, path) -> tuple[str, int]:
    stream = meta.get("stream")
    _require(stream in STREAMS, path, f"metadata stream must be one of {', '.join(STREAMS)}")
    n_in = len(common["channel_names"]) * (2 if stream == "both" else 1)
    _require(meta.get("input_channels") == n_in, path,
             f"metadata input_channels must be {n_in} for {len(common['channel_names'])} channels and stream {stream}")
    return stream, n_in


def _load_linear(ar: _Archive, meta: dict, common: dict, path) -> Model:
    d = len(common["channel_names"]) * FEATURES_PER_CHANNEL
    k = len(common["classes"])
    shapes = [("feature_mean", (d,)), ("feature_scale", (d,))]
    if "projection" in ar.names:
        shape, _ = ar.header("phase")
        _require(len(shape) == 1 and 1 <= shape[0] <= MAX_FOURIER, path, f"array phase must hold 1 to {MAX_FOURIER} values")
        shapes += [("projection", (d, shape[0])), ("phase", shape), ("weights", (shape[0], k))]
    else:
        shapes += [("weights", (d, k))]
    arrays = {name: ar.read(name, shape, "f").astype(float) for name, shape in shapes}
    shape, dtype = ar.header("bias")
    _require(shape == (k,) and dtype.kind == "f", path, f"array bias has shape {shape}, expected {(k,)}")
    bias = ar.read("bias", (k,), "f", finite=False).astype(float)
    _require(not np.isposinf(bias).any(), path, "array bias holds +inf (a class that always wins)")
    _require(bool((arrays["feature_scale"] > 0).all()), path, "feature_scale must be positive")
    return Model(**{k_: v for k_, v in common.items()}, **arrays, bias=bias)


def _load_minirocket(ar: _Archive, meta: dict, common: dict, path) -> MiniRocketModel:
    stream, n_in = _stream_channels(meta, common, path)
    length = _int_meta(meta, "length", KERNEL_LENGTH, MAX_WINDOW_SAMPLES, path)
    n_dil = _int_meta(meta, "n_dilations", 1, MAX_DILATIONS, path)
    n_feat = _int_meta(meta, "n_features", N_KERNELS, MAX_FEATURES, path)
    _require(length == common["windows"].length, path, f"length {length} differs from the window's {common['windows'].length} samples")
    edges = meta.get("edges", "alternate")  # files from before the edge modes: the paper's padding
    _require(isinstance(edges, str) and edges in EDGE_MODES, path,
             f"metadata edges must be one of {', '.join(EDGE_MODES)}, not {repr(edges)[:40]} (a newer drape's model?)")
    dil = ar.read("dilations", (n_dil,), "iu")
    fpk = ar.read("features_per_kernel", (n_dil,), "iu")
    _require(bool((dil >= 1).all() and (np.diff(dil) > 0).all() and 8 * dil.max() <= length - 1), path,
             "dilations must rise from 1 and fit the window")
    _require(bool((fpk >= 1).all()) and N_KERNELS * int(fpk.sum()) == n_feat, path, "features_per_kernel do not add up to n_features")
    mask = ar.read("channel_mask", (n_dil, N_KERNELS, n_in), "f")
    _require(bool(np.isin(mask, (0.0, 1.0)).all() and (mask.sum(axis=2) >= 1).all()), path,
             "channel_mask must be 0/1 with at least one channel per kernel")
    k = len(common["classes"])
    arrays = {name: ar.read(name, shape, "f").astype(float) for name, shape in (
        ("biases", (n_feat,)), ("feature_mean", (n_feat,)), ("feature_scale", (n_feat,)),
        ("weights", (n_feat, k)), ("bias", (k,)))}
    _require(bool((arrays["feature_scale"] > 0).all()), path, "feature_scale must be positive")
    params = MiniRocketParams(length, n_in, dil.astype(np.int64), fpk.astype(np.int64), mask.astype(float), arrays.pop("biases"),
                              edges)
    return MiniRocketModel(**common, stream=stream, params=params, **arrays)


def _load_dtw(ar: _Archive, meta: dict, common: dict, path) -> DtwModel:
    stream, n_in = _stream_channels(meta, common, path)
    length = _int_meta(meta, "length", 2, MAX_WINDOW_SAMPLES, path)
    n_t = _int_meta(meta, "n_templates", 1, MAX_TEMPLATES, path)
    radius = _int_meta(meta, "radius", 0, length - 1, path)
    _require(length == common["windows"].length, path, f"length {length} differs from the window's {common['windows'].length} samples")
    _require(n_t * n_in * length <= MAX_ARRAY_VALUES, path, "templates too large")
    templates = ar.read("templates", (n_t, n_in, length), "f").astype(float)
    template_class = ar.read("template_class", (n_t,), "iu").astype(np.int64)
    n_cls = len(common["classes"]) - 1
    _require(bool(((template_class >= 0) & (template_class < n_cls)).all()), path, "template_class out of range")
    extra = {}
    if "thresholds" in ar.names:
        n_null = _int_meta(meta, "n_null_templates", 0, MAX_TEMPLATES, path)
        _require((n_t + n_null) * n_in * length <= MAX_ARRAY_VALUES, path, "templates too large")
        thresholds = ar.read("thresholds", (n_cls,), "f").astype(float)
        _require(bool((np.isfinite(thresholds) & (thresholds > 0)).all()), path, "thresholds must be positive numbers")
        extra["null_templates"] = ar.read("null_templates", (n_null, n_in, length), "f").astype(float)
        scale = meta.get("null_scale")
        try:  # a JSON integer may be too large for a float (OverflowError), or for np.isfinite
            scale_ok = isinstance(scale, (int, float)) and not isinstance(scale, bool) and math.isfinite(float(scale)) \
                and scale > 0
        except OverflowError:
            scale_ok = False
        _require(scale_ok, path, "metadata null_scale must be a positive number")
        _require(isinstance(meta.get("reject"), bool), path, "metadata reject must be true or false")
        extra.update(null_scale=float(scale), reject=meta["reject"])
    else:
        # A file from before per-class thresholds: one threshold, scores in distance units.
        # Dividing every score and the temperature by it gives the same probabilities.
        try:
            threshold = float(meta["threshold"])
        except (KeyError, TypeError, ValueError, OverflowError):
            raise ModelError(f"{path}: metadata thresholds missing") from None
        _require(np.isfinite(threshold) and threshold > 0, path, "threshold must be a positive number")
        thresholds = np.full(n_cls, threshold)
        common = {**common, "temperature": common["temperature"] / threshold}
        _require(np.isfinite(common["temperature"]) and common["temperature"] > 0, path, "temperature out of range")
    return DtwModel(**common, stream=stream, templates=templates, template_class=template_class, radius=radius,
                    thresholds=thresholds, **extra)


_LOADERS = {"linear": _load_linear, "minirocket": _load_minirocket, "dtw": _load_dtw}
