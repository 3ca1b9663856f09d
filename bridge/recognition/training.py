"""Training the linear recogniser from labelled continuous recordings."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..signal import BandPass, Conditioner
from .features import window_features
from .linear import expected_calibration_error, fit_lda, fit_ridge, fit_temperature, probabilities
from .model import NULL, Model, fourier_map
from .windows import WindowSpec, all_windows

IGNORE = -1


@dataclass(frozen=True)
class TrainingSettings:
    window_s: float | None = None  # None: long enough for the longest gesture (``window_length_s``)
    hop_s: float = 0.1
    low_hz: float = 1.0
    high_hz: float | None = None   # None: 10 Hz, or 0.4 × the sample rate where that is lower
    order: int = 2
    baseline_tau_s: float = 30.0
    fourier_features: int = 2000   # size of the random Fourier map; 0 for a plain linear model
    fourier_scale: float = 1.0     # projection scale (inverse kernel width) on standardised features
    ridge: tuple = (1e-3, 1e-2, 1e-1, 1.0)  # penalties tried; the best held-out one is kept
    shrinkage: float = 0.2         # covariance shrinkage of the plain model
    seed: int = 0

    def band(self, rate_hz: float) -> BandPass:
        """The conditioning for a source at ``rate_hz``: this band-pass, its upper edge below
        the Nyquist frequency (``band_edges``)."""
        low, high = band_edges(rate_hz, self.low_hz, self.high_hz)
        return BandPass(rate_hz, low, high, self.order, self.baseline_tau_s)


MIN_WINDOW_S = 2.0   # shortest automatic window, s
WINDOW_ROOM = 1.25   # automatic window / the 90th percentile of labelled gesture lengths
WINDOW_SPARE_HOPS = 2  # and at least the longest gesture plus this many hops


def window_length_s(recordings, kinds: dict[str, str], settings: TrainingSettings) -> float:
    """The classifier's window length, s: ``settings.window_s`` when given, else the
    largest of MIN_WINDOW_S, WINDOW_ROOM × the 90th percentile of the labelled gestures'
    lengths and the longest gesture plus WINDOW_SPARE_HOPS hops, rounded up to the hop.

    A gesture trains only the windows that hold all of it, and fires only when several
    hops in a row agree: a window barely longer than a slow wearer's gestures holds each
    at one hop or none, so they are learnt from few windows and missed live. A window
    longer than needed costs false firings (measured on the demo's linear model: 22
    against 10 over 41 min of simulated takes at 2.2 s against 2 s), so the room is
    taken over typical gestures, not the single longest one.
    """
    if settings.window_s is not None:
        return float(settings.window_s)
    lengths = [iv.end_s - iv.start_s for r in recordings for iv in r.intervals if kinds.get(iv.label) == "gesture"]
    want = MIN_WINDOW_S
    if lengths:
        want = max(want, WINDOW_ROOM * float(np.percentile(lengths, 90)),
                   max(lengths) + WINDOW_SPARE_HOPS * settings.hop_s)
    hops = np.ceil(round(want / settings.hop_s, 6))
    return round(float(hops * settings.hop_s), 6)


def band_edges(rate_hz: float, low_hz: float = 1.0, high_hz: float | None = None) -> tuple[float, float]:
    """Band-pass edges (low, high) in Hz for a source at ``rate_hz``.

    Without ``high_hz`` the upper edge is 10 Hz, lowered to 0.4 × rate_hz (80 % of the
    Nyquist frequency) for slow sources: a 10 Hz source gets 1–4 Hz. Edges that were given
    are kept and checked. ValueError, saying what to pass, when no band fits.
    """
    nyquist = rate_hz / 2.0
    high = min(10.0, 0.4 * rate_hz) if high_hz is None else float(high_hz)
    if not 0 < low_hz < high < nyquist:
        hint = ("give edges with --band-hz LOW HIGH, 0 < LOW < HIGH < " f"{nyquist:g} Hz (half the rate)")
        if high_hz is not None and low_hz >= high:
            raise ValueError(f"band-pass {low_hz:g}–{high:g} Hz: LOW must be below HIGH; {hint}")
        if high_hz is None:
            raise ValueError(f"a {rate_hz:g} Hz source leaves no band-pass above {low_hz:g} Hz below "
                             f"{0.4 * rate_hz:g} Hz; {hint}")
        raise ValueError(f"band-pass {low_hz:g}–{high:g} Hz does not fit a {rate_hz:g} Hz source; {hint}")
    return float(low_hz), high


def condition_recording(rec, conditioning: BandPass) -> np.ndarray:
    """Run a whole recording through a fresh Conditioner: (2, n, channels) level and motion."""
    level, motion = Conditioner(conditioning).process(rec.freq_hz)
    return np.stack([level, motion])


def label_windows(ends: np.ndarray, length: int, rate_hz: float, intervals, classes: tuple[str, ...],
                  kinds: dict[str, str]) -> np.ndarray:
    """Class index per window, or IGNORE where the window is ambiguous.

    A gesture labels the windows that hold all of it; a posture the windows whose last
    sample is inside it and that are at least 60 % inside it. A window touching a
    labelled interval in any other way is left out of training; the rest are null.
    """
    starts = ends - length
    y = np.zeros(len(ends), dtype=int)
    index = {c: i for i, c in enumerate(classes)}
    tol = 2
    for iv in intervals:
        if iv.label not in index:
            continue
        a = int(round(iv.start_s * rate_hz))
        b = int(round(iv.end_s * rate_hz))
        overlap = np.clip(np.minimum(ends, b) - np.maximum(starts, a), 0, None)
        touched = overlap > 0
        if kinds[iv.label] == "gesture":
            inside = (starts <= a + tol) & (ends >= b - tol)
        else:
            inside = (ends <= b) & (ends > a) & (overlap >= 0.6 * length)
        y[touched & (y == 0)] = IGNORE
        y[inside] = index[iv.label]
    return y


def recording_features(rec, model_like: tuple[BandPass, WindowSpec]) -> tuple[np.ndarray, np.ndarray]:
    """Features (m, d) and window end indices (m,) of one recording."""
    conditioning, spec = model_like
    streams = condition_recording(rec, conditioning)
    windows, ends = all_windows(spec, streams[0], streams[1])
    return window_features(windows), ends


def fit_feature_model(x: np.ndarray, y: np.ndarray, folds: np.ndarray, n_classes: int,
                      settings: TrainingSettings = TrainingSettings()) -> dict:
    """The linear recogniser's arithmetic on window features, shared by every way of training it.

    x: (m, d) window features; y: (m,) class indices; folds: (m,) group per window for
    held-out scores. Standardises, applies the random Fourier map when
    ``settings.fourier_features`` (ridge, penalty chosen on held-out scores) or else a
    shrinkage discriminant, and fits the temperature on held-out scores. Returns the
    Model's array fields, ``temperature``, ``held_prob`` (m, classes) and ``note``.
    """
    k = n_classes
    mean = x.mean(axis=0)
    scale = x.std(axis=0)
    scale[scale < 1e-12] = 1.0
    z = (x - mean) / scale
    projection = phase = None
    if settings.fourier_features:
        rng = np.random.default_rng(settings.seed)
        projection = rng.normal(0.0, settings.fourier_scale / np.sqrt(z.shape[1]), (z.shape[1], settings.fourier_features))
        phase = rng.uniform(0.0, 2 * np.pi, settings.fourier_features)
        z = fourier_map(z, projection, phase)
        weights, bias, best, held_scores = fit_ridge(z, y, k, list(settings.ridge), folds)
        note = {"fourier_features": settings.fourier_features, "ridge": best}
    else:
        held_scores = np.zeros((len(y), k))
        for f in np.unique(folds):
            tr = folds != f
            w, b = fit_lda(z[tr], y[tr], k, settings.shrinkage)
            held_scores[~tr] = z[~tr] @ w + b
        weights, bias = fit_lda(z, y, k, settings.shrinkage)
        note = {"shrinkage": settings.shrinkage}
    temperature = fit_temperature(held_scores, y)
    held_prob = probabilities(held_scores, temperature)
    note["calibration_error"] = round(expected_calibration_error(held_prob, y), 4)
    return dict(feature_mean=mean, feature_scale=scale, weights=weights, bias=bias, temperature=temperature,
                projection=projection, phase=phase, held_prob=held_prob, note=note)


def fit_linear(recordings, kinds: dict[str, str], settings: TrainingSettings = TrainingSettings(),
               progress=None) -> Model:
    """Train a linear recogniser on continuous recordings with labelled intervals.

    recordings: objects with ``rate_hz``, ``channel_names``, ``freq_hz`` (n, channels) and
    ``intervals`` (each with ``start_s``, ``end_s``, ``label``). kinds: label → "gesture" or
    "posture". Time outside intervals is the null class.
    """
    recordings = list(recordings)
    if not recordings:
        raise ValueError("no recordings to train on")
    rate = recordings[0].rate_hz
    channels = tuple(recordings[0].channel_names)
    for r in recordings:
        if tuple(r.channel_names) != channels or abs(r.rate_hz - rate) > 1e-6 * rate:
            raise ValueError("all recordings must share channels and rate; "
                             f"got {tuple(r.channel_names)} at {r.rate_hz} Hz and {channels} at {rate} Hz")
    labels = sorted({iv.label for r in recordings for iv in r.intervals})
    unknown = [l for l in labels if l not in kinds]
    if unknown:
        raise ValueError(f"labels without a kind (gesture or posture): {', '.join(unknown)}")
    if not labels:
        raise ValueError("the recordings hold no labelled gestures")
    classes = (NULL, *labels)
    conditioning = settings.band(rate)
    spec = WindowSpec(rate, window_length_s(recordings, kinds, settings), settings.hop_s)
    xs, ys, groups = [], [], []
    for i, r in enumerate(recordings):
        f, ends = recording_features(r, (conditioning, spec))
        y = label_windows(ends, spec.length, rate, r.intervals, classes, kinds)
        keep = y != IGNORE
        xs.append(f[keep]); ys.append(y[keep]); groups.append(np.full(keep.sum(), i))
        if progress:
            progress(i + 1, len(recordings))
    x = np.concatenate(xs); y = np.concatenate(ys); g = np.concatenate(groups)
    missing = [c for k, c in enumerate(classes) if not (y == k).any()]
    if missing:
        raise ValueError(f"no usable windows for: {', '.join(missing)} (recordings too short or gestures longer than the window)")
    # Held-out scores choose the penalty, fit the temperature and give the estimate: by
    # recording where there are several, else by contiguous fifths of the one recording.
    folds = g if len(recordings) > 1 else np.minimum((np.arange(len(y)) * 5) // len(y), 4)
    fit = fit_feature_model(x, y, folds, len(classes), settings)
    held_prob = fit.pop("held_prob")
    model_note = fit.pop("note")
    cv_accuracy = float((held_prob.argmax(axis=1) == y).mean())
    counts = {c: int((y == k).sum()) for k, c in enumerate(classes)}
    return Model(
        classes=classes,
        kinds={c: kinds[c] for c in labels},
        channel_names=channels,
        conditioning=conditioning,
        windows=spec,
        **fit,
        summary={
            "recordings": len(recordings),
            "windows_per_class": counts,
            "cross_validated_window_accuracy": round(cv_accuracy, 4),
            **model_note,
        },
    )
