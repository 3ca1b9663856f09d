"""Reading model files: arrays in .npz plus JSON metadata, never pickle, every array's
shape derived from bounded metadata and its .npy header checked before any data is read."""

from __future__ import annotations

import json
import math
import tokenize
import zipfile
import zlib
from pathlib import Path

import numpy as np
from numpy.lib import format as npformat

from ..signal import BandPass
from .features import FEATURES_PER_CHANNEL
from .minirocket import EDGE_MODES, KERNEL_LENGTH, MAX_DILATIONS, N_KERNELS, MiniRocketParams
from .model import (FORMAT, FORMAT_VERSION, MAX_ARRAY_VALUES, MAX_CHANNELS, MAX_CLASSES, MAX_FEATURES, MAX_FOURIER,
                    MAX_MAGNITUDE, MAX_META_BYTES, MAX_TEMPLATES, MAX_WINDOW_SAMPLES, NULL, STREAMS, DtwModel,
                    MiniRocketModel, Model, ModelError)
from .windows import WindowSpec


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
            try:
                with open(path, "rb") as f:
                    take = f.read(11) == b"#drape-take"
            except OSError:
                take = False
            if take:   # the commonest mix-up: a take where its model belongs
                raise ModelError(f"{path}: a take, not a model: give the .npz that drape fit wrote") from None
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
        raise ModelError(f"{path}: no such model file (train one with `drape fit TAKE... -o {path.name}`)")
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
    for key in ("fitted_on", "tuned_on"):   # fingerprints of the takes it learnt from; absent in older models
        _require(isinstance(summary.get(key, []), list) and all(isinstance(f, str) for f in summary.get(key, [])),
                 path, f"summary {key} must be a list of take fingerprints")
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
