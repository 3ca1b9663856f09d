"""Model files: arrays in .npz plus JSON metadata, never pickle, checked on load."""

from __future__ import annotations

import json
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..signal import BandPass
from .features import FEATURES_PER_CHANNEL
from .windows import WindowSpec

FORMAT = "drape-model"
FORMAT_VERSION = 1
NULL = "null"
MAX_CLASSES = 256
MAX_CHANNELS = 64
MAX_META_BYTES = 1_000_000
MAX_FILE_BYTES = 256 * 2**20
ARRAYS = ("meta_json", "feature_mean", "feature_scale", "weights", "bias", "projection", "phase")


MAX_FOURIER = 20_000


def fourier_map(z: np.ndarray, projection: np.ndarray, phase: np.ndarray) -> np.ndarray:
    """Random Fourier features: a linear model over them approximates a Gaussian-kernel one
    (Rahimi & Recht, "Random features for large-scale kernel machines", NIPS 2007)."""
    return np.cos(z @ projection + phase) * np.sqrt(2.0 / phase.size)


class ModelError(ValueError):
    """A model file that cannot be used, with what to do about it."""


@dataclass
class Model:
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

    @property
    def rate_hz(self) -> float:
        return self.conditioning.rate_hz

    @property
    def n_channels(self) -> int:
        return len(self.channel_names)

    def scores(self, features: np.ndarray) -> np.ndarray:
        """Discriminant scores (m, classes) for raw features (m, d)."""
        z = (features - self.feature_mean) / self.feature_scale
        if self.projection is not None:
            z = fourier_map(z, self.projection, self.phase)
        return z @ self.weights + self.bias

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

    def metadata(self) -> dict:
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

    def save(self, path: str | Path) -> Path:
        """Write the model as one .npz holding arrays and a JSON metadata string."""
        path = Path(path)
        meta = json.dumps(self.metadata(), indent=1, sort_keys=True).encode("utf-8")
        arrays = dict(meta_json=np.frombuffer(meta, dtype=np.uint8), feature_mean=self.feature_mean,
                      feature_scale=self.feature_scale, weights=self.weights, bias=self.bias)
        if self.projection is not None:
            arrays.update(projection=self.projection, phase=self.phase)
        with open(path, "wb") as fh:
            np.savez(fh, **arrays)
        return path


def _require(cond: bool, path, what: str) -> None:
    if not cond:
        raise ModelError(f"{path}: {what}")


def load_model(path: str | Path) -> Model:
    """Read and check a model file; any problem raises ModelError naming the file."""
    path = Path(path)
    if not path.is_file():
        raise ModelError(f"{path}: no such model file (train one with `drape fit RECORDINGS -o {path.name}`)")
    try:
        with np.load(path, allow_pickle=False) as z:
            for k in z.files:  # names and sizes from the zip directory, before any array is read
                if k not in ARRAYS:
                    raise ModelError(f"{path}: unexpected array {k!r}: not a drape model file")
            if sum(i.file_size for i in z.zip.infolist()) > MAX_FILE_BYTES:
                raise ModelError(f"{path}: arrays larger than {MAX_FILE_BYTES // 2**20} MiB: not a drape model file")
            arrays = {k: z[k] for k in ARRAYS if k in z.files}
    except ModelError:
        raise
    except (ValueError, OSError, EOFError, zipfile.BadZipFile) as exc:  # not a zip, pickled object, truncated
        raise ModelError(f"{path}: not a drape model file ({exc})") from None
    _require("meta_json" in arrays, path, "no metadata: not a drape model file")
    raw = arrays["meta_json"]
    _require(raw.dtype == np.uint8 and raw.ndim == 1 and raw.size <= MAX_META_BYTES, path, "metadata malformed")
    try:
        meta = json.loads(raw.tobytes().decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ModelError(f"{path}: metadata is not JSON ({exc})") from None
    _require(isinstance(meta, dict) and meta.get("format") == FORMAT, path, "not a drape model file")
    _require(meta.get("version") == FORMAT_VERSION, path,
             f"model format version {meta.get('version')!r}; this drape reads version {FORMAT_VERSION}: retrain with `drape fit`")
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
    except (KeyError, TypeError, ValueError) as exc:
        raise ModelError(f"{path}: metadata incomplete or wrong type ({exc})") from None
    _require(2 <= len(classes) <= MAX_CLASSES and classes[0] == NULL and len(set(classes)) == len(classes), path,
             "classes must be unique, start with 'null' and number 2 to 256")
    _require(1 <= len(channels) <= MAX_CHANNELS, path, "channel count must be 1 to 64")
    _require(set(kinds) == set(classes[1:]) and set(kinds.values()) <= {"gesture", "posture"}, path,
             "every class but null needs a kind, 'gesture' or 'posture'")
    _require(np.isfinite(temperature) and temperature > 0, path, "temperature must be a positive number")
    _require(conditioning.rate_hz == windows.rate_hz and 1 <= conditioning.rate_hz <= 10_000, path,
             "sample rate missing or inconsistent")
    d = len(channels) * FEATURES_PER_CHANNEL
    k = len(classes)
    shapes = [("feature_mean", (d,)), ("feature_scale", (d,)), ("bias", (k,))]
    if "projection" in arrays:
        n_map = arrays["phase"].shape[0] if "phase" in arrays and arrays["phase"].ndim == 1 else -1
        _require(0 < n_map <= MAX_FOURIER, path, "array phase missing or too large")
        shapes += [("projection", (d, n_map)), ("phase", (n_map,)), ("weights", (n_map, k))]
    else:
        shapes += [("weights", (d, k))]
    for name, shape in shapes:
        _require(name in arrays, path, f"array {name} missing")
        a = arrays[name]
        _require(a.shape == shape and a.dtype.kind == "f", path, f"array {name} has shape {a.shape}, expected {shape}")
        _require(bool(np.isfinite(a).all() if name != "bias" else not np.isnan(a).any()), path, f"array {name} holds NaN or inf")
    _require(bool((arrays["feature_scale"] > 0).all()), path, "feature_scale must be positive")
    return Model(
        classes=classes, kinds=kinds, channel_names=channels, conditioning=conditioning, windows=windows,
        feature_mean=arrays["feature_mean"].astype(float), feature_scale=arrays["feature_scale"].astype(float),
        weights=arrays["weights"].astype(float), bias=arrays["bias"].astype(float), temperature=temperature,
        projection=arrays["projection"].astype(float) if "projection" in arrays else None,
        phase=arrays["phase"].astype(float) if "phase" in arrays else None,
        classifier=classifier, decision=decision, summary=summary,
    )
