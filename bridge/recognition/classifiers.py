"""Classifiers selectable by name, fitted on cases and run live on conditioned streams.

A *case* is one window of a multichannel series, (channels, length). Offline, cases come
from `.ts` files or from windows of labelled recordings; live, the recogniser of each
classifier turns conditioned blocks into class probabilities every hop.

- ``linear``: the window features of ``features`` and a shrinkage linear discriminant.
- ``minirocket``: fixed-kernel convolution features and ridge regression, with a rolling
  transform for live use (per-hop work proportional to the hop).
- ``dtw``: few-shot templates matched by dynamic time warping, with rejection to null.

All give probabilities calibrated by a temperature fitted to held-out scores, over
``model.classes``, whose first entry is always the null class ("none of these"). Null
cases may be given for training (label ``"null"``); without them null is never predicted
by ``linear`` and ``minirocket``, and by ``dtw`` only through its rejection thresholds
(with them, ``dtw`` also keeps null templates and caps each class's threshold).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..signal import BandPass
from .dtw import (
    StreamCosts,
    class_distances_pruned,
    distance_matrix,
    envelope,
    fit_templates,
    per_class_min,
    scores_from_distances,
    spread,
)
from .features import window_features
from .linear import expected_calibration_error, fit_temperature, probabilities
from .minirocket import fit_minirocket, minirocket_transform, rolling_transform
from .model import NULL, STREAMS, DtwModel, MiniRocketModel, Model
from .recogniser import Recogniser
from .ridge import fit_ridge_heldout
from .windows import Windower, WindowSpec

# --- shared helpers -----------------------------------------------------------------------

def select_stream(level: np.ndarray, motion: np.ndarray, stream: str) -> np.ndarray:
    """Samples (n, input channels) of the stream a model reads: level, motion or both (level first)."""
    if stream == "level":
        return np.asarray(level, dtype=float)
    if stream == "motion":
        return np.asarray(motion, dtype=float)
    if stream == "both":
        return np.concatenate([level, motion], axis=1).astype(float)
    raise ValueError(f"stream must be one of {', '.join(STREAMS)}, not {stream!r}")


def windows_to_cases(windows: np.ndarray, stream: str) -> np.ndarray:
    """Windows (m, 2, length, channels) of (level, motion) as cases (m, input channels, length)."""
    level = windows[:, 0].transpose(0, 2, 1)
    motion = windows[:, 1].transpose(0, 2, 1)
    if stream == "level":
        return np.ascontiguousarray(level)
    if stream == "motion":
        return np.ascontiguousarray(motion)
    return np.concatenate([level, motion], axis=1)


def case_windows(X: np.ndarray) -> np.ndarray:
    """Cases (m, channels, length) as (level, motion) windows (m, 2, length, channels) for ``linear``.

    A case is taken as the level stream and, since it is not a frequency stream to
    band-pass, its motion stream is the case minus its own mean (the minimal conditioning).
    """
    level = np.asarray(X, dtype=float).transpose(0, 2, 1)
    motion = level - level.mean(axis=1, keepdims=True)
    return np.stack([level, motion], axis=1)


def _class_indices(y, classes) -> tuple[tuple[str, ...], np.ndarray]:
    names = [str(c) for c in classes if str(c) != NULL]
    if len(set(names)) != len(names) or not names:
        raise ValueError("classes must be distinct names, at least one besides null")
    full = (NULL, *names)
    index = {c: i for i, c in enumerate(full)}
    y = np.asarray(y).astype(str)
    unknown = sorted(set(y) - set(index))
    if unknown:
        raise ValueError(f"labels not among the classes: {', '.join(unknown)}")
    return full, np.array([index[v] for v in y], dtype=int)


def _folds(y: np.ndarray, n_folds: int = 5) -> np.ndarray:
    """Stratified fold number per case: within each class, cases dealt round-robin in order."""
    fold = np.zeros(len(y), dtype=int)
    for c in np.unique(y):
        idx = np.flatnonzero(y == c)
        fold[idx] = np.arange(len(idx)) % n_folds
    return fold


def _common(X: np.ndarray, full: tuple[str, ...], options: dict) -> dict:
    """Fields every model carries; cases without a sample rate are taken at ``rate_hz`` (default 1 Hz)."""
    n_in, length = X.shape[1], X.shape[2]
    stream = options.get("stream", "level")
    n_ch = n_in // 2 if stream == "both" else n_in
    rate = float(options.get("rate_hz", 1.0))
    conditioning = options.get("conditioning") or BandPass(rate, 0.01 * rate, 0.1 * rate)
    windows = options.get("windows") or WindowSpec(rate, length / rate, max(1, length // 10) / rate)
    if windows.length != length:
        raise ValueError(f"cases have {length} samples but the window holds {windows.length}")
    kinds = dict(options.get("kinds") or {})
    return dict(
        classes=full, kinds={c: kinds.get(c, "gesture") for c in full[1:]},
        channel_names=tuple(options.get("channel_names") or (f"c{i}" for i in range(n_ch))),
        conditioning=conditioning, windows=windows,
    )


# --- linear -------------------------------------------------------------------------------

def fit_linear_cases(X: np.ndarray, y: np.ndarray, full: tuple[str, ...], shrinkage: float = 0.2,
                     fourier_features: int = 0, **options) -> Model:
    """The window-feature linear model on cases (``training.fit_feature_model``), stratified 5-fold.

    Plain shrinkage discriminant by default (few cases); ``fourier_features`` > 0 uses the
    random Fourier map and ridge as training on recordings does.
    """
    from .training import TrainingSettings, fit_feature_model
    if options.get("stream", "level") != "level":
        raise ValueError("the linear classifier reads level and motion itself; stream must be 'level'")
    settings = TrainingSettings(shrinkage=shrinkage, fourier_features=fourier_features)
    fit = fit_feature_model(window_features(case_windows(X)), y, _folds(y), len(full), settings)
    prob = fit.pop("held_prob")
    note = fit.pop("note")
    return Model(**_common(X, full, options), **fit,
                 summary={"cases": int(len(y)), "held_out_accuracy": round(float((prob.argmax(1) == y).mean()), 4),
                          **note})


def _linear_scores(model: Model, X: np.ndarray) -> np.ndarray:
    return model.scores(window_features(case_windows(X)))


def class_figures(prob: np.ndarray, y: np.ndarray, full: tuple[str, ...]) -> dict:
    """Per class of held-out windows (prob (n, classes), labels y (n,) indexing ``full``, 0 the
    null class): ``recall``, the share of its windows taken for it, and ``from_null``, the
    share of null windows taken for it. A class the garment hardly sees has a low recall
    or takes many null windows."""
    guess = prob.argmax(axis=1)
    null = y == 0
    out = {}
    for j, name in enumerate(full[1:], start=1):
        own = y == j
        out[name] = {"recall": round(float((guess[own] == j).mean()), 4) if own.any() else None,
                     "from_null": round(float((guess[null] == j).mean()), 5) if null.any() else None}
    return out


# --- minirocket ---------------------------------------------------------------------------

def fit_minirocket_cases(X: np.ndarray, y: np.ndarray, full: tuple[str, ...], n_features: int = 10_000,
                         seed: int = 0, edges: str = "alternate", splits=None, held_out_by: str = "",
                         **options) -> MiniRocketModel:
    """Convolution features and ridge; temperature from the ridge's held-out scores.

    ``edges``: "alternate" (the paper's padding, for ready-cut cases) or "valid" (no
    padding: what a stream's arbitrary window edges call for; see ``minirocket``).
    ``splits``: None when the cases are independent (held out one at a time), or
    (held, dropped) masks of grouped folds (``ridge.fit_ridge_heldout``) when they are
    overlapping windows of recordings; ``held_out_by`` names the grouping in the summary.
    Features are computed once: the held-out scores of every penalty come from the one
    ridge decomposition. The transform's biases and the feature scaling are taken from
    all cases (they never see a label).
    """
    params = fit_minirocket(X, n_features, seed, edges)
    f = minirocket_transform(params, X)
    mean = f.mean(axis=0)
    scale = f.std(axis=0)
    scale[scale < 1e-12] = 1.0
    f -= mean      # standardised in place, and centred in place by the ridge: the raw
    f /= scale     # features are not needed again, and each copy is m × d (the fit's peak)
    w, b, alpha, held = fit_ridge_heldout(f, y, len(full), splits, overwrite_z=True)
    temperature = fit_temperature(held, y, bounds=(-9.0, 5.0))
    prob = probabilities(held, temperature)
    accuracy = round(float((prob.argmax(1) == y).mean()), 4)
    summary = {"cases": int(len(y)), "ridge_alpha": alpha}
    if splits is None:
        summary["leave_one_out_accuracy"] = accuracy
    else:
        summary.update(cross_validated_window_accuracy=accuracy, held_out_by=held_out_by or "groups",
                       folds=len(splits), held_out_by_class=class_figures(prob, y, full))
    summary["calibration_error"] = round(expected_calibration_error(prob, y), 4)
    return MiniRocketModel(**_common(X, full, options), stream=options.get("stream", "level"), params=params,
                           feature_mean=mean, feature_scale=scale, weights=w, bias=b, temperature=temperature,
                           summary=summary)


def _minirocket_scores(model: MiniRocketModel, X: np.ndarray) -> np.ndarray:
    return model.scores(minirocket_transform(model.params, X))


# --- dtw ----------------------------------------------------------------------------------

def fit_dtw_cases(X: np.ndarray, y: np.ndarray, full: tuple[str, ...], band: float = 0.1, reject: bool = True,
                  margin: float = 0.25, templates_per_class: int | None = None, null_templates: int = 30,
                  null_quantile: float = 0.005, null_reach: float = 0.8, **options) -> DtwModel:
    """Templates: the non-null cases (or ``templates_per_class`` of each, spread evenly
    over its cases, so that they come from as many recordings as the cases do).

    Null cases give null templates and the per-class thresholds. See ``dtw.fit_templates``.
    """
    keep = y != 0
    if templates_per_class:
        keep = np.zeros(len(y), dtype=bool)
        for c in np.unique(y[y != 0]):
            idx = np.flatnonzero(y == c)
            keep[idx[spread(len(idx), templates_per_class)]] = True
    null_X = X[y == 0] if (y == 0).any() else None
    fit = fit_templates(X[keep], y[keep], len(full), band, reject, margin, null_X, null_templates, null_quantile,
                        null_reach)
    return DtwModel(**_common(X, full, options), stream=options.get("stream", "level"), templates=fit["templates"],
                    template_class=fit["template_class"].astype(np.int64), radius=fit["radius"],
                    thresholds=fit["thresholds"], null_templates=fit["null_templates"], null_scale=fit["null_scale"],
                    reject=bool(reject), temperature=fit["temperature"], summary=fit["summary"])


def _dtw_scores(model: DtwModel, X: np.ndarray) -> np.ndarray:
    k = len(model.classes) - 1
    d = distance_matrix(np.asarray(X, float), model.templates, model.radius)
    per = per_class_min(d, model.template_class, k)
    null = None
    if len(model.null_templates):
        null = distance_matrix(np.asarray(X, float), model.null_templates, model.radius).min(axis=1)
    return scores_from_distances(per, model.thresholds, null, model.null_scale, model.reject)


# --- live recognisers ---------------------------------------------------------------------

class MiniRocketRecogniser:
    """Rolling transform over the model's stream; probabilities every hop."""

    def __init__(self, model: MiniRocketModel):
        self.model = model
        self.rolling = rolling_transform(model.params, model.windows.hop)

    def push(self, level: np.ndarray, motion: np.ndarray) -> tuple[list[int], np.ndarray]:
        """Add a conditioned block; returns (end sample index per hop, probabilities (hops, classes))."""
        feats, ends = self.rolling.push(select_stream(level, motion, self.model.stream))
        if not ends:
            return [], np.empty((0, len(self.model.classes)))
        return ends, probabilities(self.model.scores(feats), self.model.temperature)


class DtwRecogniser:
    """Window ring, template envelopes and the stream's costs against the templates
    (``StreamCosts``); exact nearest-template distances, pruned by lower bounds, every hop.

    Null templates are matched as one more class. ``computed`` counts the template
    comparisons actually run, ``offered`` those possible.
    """

    def __init__(self, model: DtwModel):
        self.model = model
        self.windower = Windower(model.windows, model.n_channels)
        self.k = len(model.classes) - 1
        self.templates = np.concatenate([model.templates, model.null_templates])
        self.template_class = np.concatenate([model.template_class, np.full(len(model.null_templates), self.k)])
        self.upper, self.lower = envelope(self.templates, model.radius)
        self.costs = StreamCosts(self.templates, model.radius)
        self.computed = 0
        self.offered = 0

    def push(self, level: np.ndarray, motion: np.ndarray) -> tuple[list[int], np.ndarray]:
        """Add a conditioned block; returns (end sample index per hop, probabilities (hops, classes))."""
        windows, ends = self.windower.push(level, motion)
        m = self.model
        if not ends:
            return [], np.empty((0, len(m.classes)))
        cases = windows_to_cases(windows, m.stream)
        dist = np.empty((len(cases), self.k + 1))
        length = m.windows.length
        for i, q in enumerate(cases):
            costs = self.costs.band(ends[i] - length, q)
            dist[i], n = class_distances_pruned(q, self.templates, self.template_class, self.k + 1, m.radius,
                                                self.upper, self.lower, costs)
            self.computed += n
            self.offered += len(self.templates)
        null = dist[:, self.k] if len(m.null_templates) else None
        scores = scores_from_distances(dist[:, :self.k], m.thresholds, null, m.null_scale, m.reject)
        return ends, probabilities(scores, m.temperature)


# --- the registry -------------------------------------------------------------------------

DEFAULT_CLASSIFIER = "minirocket"
"""What ``drape fit`` trains unless told otherwise: on the spotting protocol it recognised the
most with the fewest false firings (docs/benchmarks.md, "Spotting")."""

CLASSIFIERS = {
    "linear": {"fit": fit_linear_cases, "scores": _linear_scores, "recogniser": Recogniser, "model": Model},
    "minirocket": {"fit": fit_minirocket_cases, "scores": _minirocket_scores, "recogniser": MiniRocketRecogniser,
                   "model": MiniRocketModel},
    "dtw": {"fit": fit_dtw_cases, "scores": _dtw_scores, "recogniser": DtwRecogniser, "model": DtwModel},
}


def _entry(name: str) -> dict:
    if name not in CLASSIFIERS:
        raise ValueError(f"unknown classifier {name!r}; choose one of {', '.join(CLASSIFIERS)}")
    return CLASSIFIERS[name]


def fit_cases(name: str, X: np.ndarray, y, classes, **options):
    """Fit classifier ``name`` to cases X (m, channels, length) labelled y (names from ``classes``).

    The model's classes are ("null", *classes without null). Options by classifier:
    ``linear``: shrinkage; ``minirocket``: n_features, seed, edges; ``dtw``: band (fraction of the
    length), reject, margin, templates_per_class. All: rate_hz, channel_names, kinds,
    stream, conditioning, windows (set when the cases are windows of recordings).
    """
    X = np.asarray(X, dtype=float)
    if X.ndim != 3 or len(X) != len(y):
        raise ValueError("X must be (cases, channels, length) with one label per case")
    full, yi = _class_indices(y, classes)
    return _entry(name)["fit"](X, yi, full, **options)


def scores(model, X: np.ndarray) -> np.ndarray:
    """Uncalibrated scores (m, classes) of cases X (m, input channels, length)."""
    return _entry(model.classifier)["scores"](model, np.asarray(X, dtype=float))


def predict_proba(model, X: np.ndarray) -> np.ndarray:
    """Calibrated probabilities (m, len(model.classes)) of cases X (m, input channels, length)."""
    return probabilities(scores(model, X), model.temperature)


def make_recogniser(model):
    """The live recogniser for a model: ``push(level, motion) -> (ends, probabilities)``."""
    return _entry(model.classifier)["recogniser"](model)


# Settings for recordings, chosen for live use on a laptop or small board. Both read the
# level stream: the motion stream's band (1–10 Hz) keeps little of a gesture's shape.
# minirocket: fewer convolution features, convolutions without padding ("valid" edges: a
# stream's window edges are arbitrary, and the live transform then costs only the hop's
# new positions). At most ``cases_per_class`` windows per class, evenly spread, so fits
# stay in seconds; more of null (``null_cases``, and as many of other people's ordinary
# movement), the class live use sees most (4000 rather than 1500 halved the false firings
# on development sessions at the same recall), and one
# round of out-of-fold hard-negative mining (``mine_rounds``: the ordinary movement a
# model fitted without a take mistakes for a gesture joins the null class). For dtw the
# null windows give the null templates and thresholds. Figures: docs/benchmarks.md.
RECORDING_DEFAULTS = {
    "minirocket": {"stream": "level", "n_features": 2_000, "cases_per_class": 300, "null_cases": 4000,
                   "edges": "valid", "mine_rounds": 1},
    "dtw": {"stream": "level", "cases_per_class": 60, "null_cases": 300, "templates_per_class": 5, "band": 0.1},
}


def _thin(y: np.ndarray, per_class: int, per_null: int | None = None) -> np.ndarray:
    """Indices keeping at most ``per_class`` cases of each class (``per_null`` of null, class
    0, when given), evenly spread in order."""
    keep = []
    for c in np.unique(y):
        idx = np.flatnonzero(y == c)
        most = per_null if c == 0 and per_null else per_class
        if len(idx) > most:
            idx = idx[np.linspace(0, len(idx) - 1, most).astype(int)]
        keep.append(idx)
    return np.sort(np.concatenate(keep))


def recording_windows(recordings, kinds: dict[str, str], settings=None, progress=None, with_ends: bool = False,
                      select=None):
    """Labelled windows of recordings, the way every classifier is trained on them.

    Returns (windows (m, 2, length, channels), labels (m,) class indices, recording index
    (m,), classes, conditioning, spec), and with ``with_ends`` also each window's end
    (m,), in samples from its recording's start. Windows are labelled by
    ``training.label_windows``; ambiguous ones are left out. progress(done, total) is
    called after each recording. ``select(labels, recording index)``, when given, returns
    the indices of the windows to keep; only those are cut out (an hour of takes holds
    36,000 windows: about 1 GB at 4 channels and 2.5 s, where a fit keeps a few thousand).
    """
    from .training import (
        TrainingSettings,
        condition_recording,
        label_windows,
        window_length_s,
    )
    from .windows import window_ends
    settings = settings or TrainingSettings()
    recordings = list(recordings)
    if not recordings:
        raise ValueError("no recordings to train on")
    rate = recordings[0].rate_hz
    channels = tuple(recordings[0].channel_names)
    labels = sorted({iv.label for r in recordings for iv in r.intervals})
    if not labels:
        raise ValueError("the recordings hold no labelled gestures")
    unknown = [l for l in labels if l not in kinds]
    if unknown:
        raise ValueError(f"labels without a kind (gesture or posture): {', '.join(unknown)}")
    classes = (NULL, *labels)
    conditioning = settings.band(rate)
    spec = WindowSpec(rate, window_length_s(recordings, kinds, settings), settings.hop_s)
    conditioned, ys, gs, es = [], [], [], []
    for i, r in enumerate(recordings):
        if tuple(r.channel_names) != channels or abs(r.rate_hz - rate) > 1e-6 * rate:
            raise ValueError("all recordings must share channels and rate; "
                             f"got {tuple(r.channel_names)} at {r.rate_hz} Hz and {channels} at {rate} Hz")
        streams = condition_recording(r, conditioning)
        ends = window_ends(spec, streams.shape[1])
        y = label_windows(ends, spec.length, rate, r.intervals, classes, kinds)
        keep = y >= 0
        conditioned.append(streams)
        ys.append(y[keep]); gs.append(np.full(int(keep.sum()), i)); es.append(ends[keep])
        if progress:
            progress(i + 1, len(recordings))
    y, g, e = np.concatenate(ys), np.concatenate(gs), np.concatenate(es)
    if select is not None:
        pick = np.sort(np.asarray(select(y, g), dtype=np.int64))
        y, g, e = y[pick], g[pick], e[pick]
    w = np.empty((len(y), 2, spec.length, len(channels)))
    offsets = np.arange(spec.length) - spec.length
    for i, streams in enumerate(conditioned):   # the windows of all_windows, cut one recording at a time
        at = np.flatnonzero(g == i)
        if len(at):
            w[at] = streams[:, e[at][:, None] + offsets[None, :]].transpose(1, 0, 2, 3)
    out = w, y, g, classes, conditioning, spec
    return (*out, e) if with_ends else out


def window_splits(groups: np.ndarray, ends: np.ndarray, length: int, n_folds: int = 5, labels=None):
    """Grouped folds for windows of recordings, so that no window overlaps both sides.

    groups: recording index per window; ends: end sample per window (within its
    recording); length: window length in samples; labels: class per window (optional).
    Several recordings, each class in two or more: whole recordings per fold (recording i
    in fold i mod k, k = min(n_folds, recordings)). One recording, or a class that only
    one recording holds (one take of the wearer's cues beside takes of ordinary movement):
    k contiguous stretches of each recording's windows in time, fold f taking stretch f of
    every recording and also dropping from its fit the windows that share samples with a
    held one (same recording, ends less than ``length`` apart); otherwise a fold without
    that recording would learn nothing of the class. Returns (list of (held, dropped)
    masks, how they are grouped), or (None, reason) when no fold would leave windows to fit on.
    """
    groups = np.asarray(groups)
    ends = np.asarray(ends, dtype=np.int64)
    takes = np.unique(groups)
    alone = False
    if labels is not None and len(takes) > 1:
        labels = np.asarray(labels)
        alone = any(len(np.unique(groups[labels == c])) < 2 for c in np.unique(labels) if c != 0)
    if len(takes) > 1 and not alone:
        k = min(n_folds, len(takes))
        fold = np.searchsorted(takes, groups) % k
        return [(fold == f, fold == f) for f in range(k)], "recording"
    for k in range(min(n_folds, len(ends) // 2), 1, -1):
        splits = [(np.zeros(len(ends), bool), np.zeros(len(ends), bool)) for _ in range(k)]
        for t in takes:
            mine = np.flatnonzero(groups == t)
            order = mine[np.argsort(ends[mine], kind="stable")]
            for (held, dropped), block in zip(splits, np.array_split(order, k)):
                if not len(block):
                    continue
                held[block] = True
                lo, hi = ends[block].min(), ends[block].max()
                dropped[mine[(ends[mine] > lo - length) & (ends[mine] < hi + length)]] = True
                dropped |= held
        if all((~d).any() for _, d in splits) and all(h.any() for h, _ in splits):
            return splits, "stretches of one recording" if len(takes) == 1 else "stretches of each recording"
    return None, "one recording too short for folds" if len(takes) == 1 else "recordings too short for folds"


def fit_recordings(name: str, recordings, kinds: dict[str, str], settings=None, progress=None, **options):
    """Fit classifier ``name`` on labelled recordings: the one way ``drape fit`` trains each.

    ``linear`` is ``training.fit_linear`` (window features, random Fourier map, ridge; held
    out by recording). The others fit on the windows of ``recording_windows`` with
    ``RECORDING_DEFAULTS`` (overridable through options); their summary carries a
    held-out window accuracy estimated by recording (2 to 5 folds) when there are several.
    ``minirocket`` estimates it without refitting, from folds of ``window_splits`` (by
    recording, or by stretches of a single one), and fits its temperature on those
    held-out scores. Options ``ordinary`` (unlabelled takes of ordinary movement, null
    windows of their own quota) and ``others`` (other people's labelled takes of the same
    gestures, joined to the wearer's; the window stays the wearer's) add other people.
    """
    from .training import TrainingSettings, fit_linear, window_length_s
    settings = settings or TrainingSettings()
    if name == "linear":
        return fit_linear(recordings, kinds, settings, progress=progress)
    _entry(name)
    opts = {**RECORDING_DEFAULTS.get(name, {}), **options}
    per_class = opts.pop("cases_per_class", None)
    per_null = opts.pop("null_cases", None)
    stream = opts.pop("stream", "both")
    estimate = opts.pop("estimate", True)
    mine_rounds = int(opts.pop("mine_rounds", 0))
    mine_level = float(opts.pop("mine_level", 0.3))
    mine_most = int(opts.pop("mine_most", 2000))
    mine_folds = int(opts.pop("mine_folds", 3))
    ordinary = list(opts.pop("ordinary", None) or ())
    ordinary_cases = int(opts.pop("ordinary_cases", per_null or 1500))
    cue_takes = list(opts.pop("others", None) or ())   # other people's cues
    recordings = list(recordings)
    if cue_takes:
        # Other people's cues: the same gestures as others perform them, so the model is
        # not the wearer's two sessions alone. The window stays the one the wearer's own
        # gestures call for; others' cases join theirs (quota, folds and mining alike).
        own_labels = {iv.label for r in recordings for iv in r.intervals}
        extra = sorted({iv.label for r in cue_takes for iv in r.intervals} - own_labels)
        if extra:
            raise ValueError(f"other people's takes hold labels the wearer's do not: {', '.join(extra)}")
        settings = replace(settings, window_s=window_length_s(recordings, kinds, settings))
        recordings = recordings + cue_takes
    for r in ordinary:
        if r.intervals:
            raise ValueError("ordinary-movement takes must hold no labelled gestures; "
                             f"one holds {len(r.intervals)} (of {', '.join(sorted({iv.label for iv in r.intervals}))})")
    def thin(y, g):
        own = g < len(recordings)
        if not per_class:
            return np.arange(len(y))
        keep = np.flatnonzero(own)[_thin(y[own], per_class, per_null)]
        if ordinary:   # ordinary movement of others: null windows of their own quota
            keep = np.concatenate([keep, np.flatnonzero(~own)[_thin(y[~own], ordinary_cases)]])
        return keep

    w, y, g, classes, conditioning, spec, e = recording_windows(recordings + ordinary, kinds, settings, progress,
                                                                with_ends=True, select=thin)
    missing = [c for k, c in enumerate(classes) if not (y == k).any()]
    if missing:
        raise ValueError(f"no usable windows for: {', '.join(missing)} (recordings too short or gestures longer than the window)")
    labels = list(classes[1:])
    channels = tuple(recordings[0].channel_names)

    def fit(sel):
        extra = {}
        if name == "minirocket":  # held-out figures and temperature from grouped folds, in closed form
            extra["splits"], extra["held_out_by"] = window_splits(g[sel], e[sel], spec.length, labels=y[sel])
        return fit_cases(name, windows_to_cases(w[sel], stream), np.array(classes)[y[sel]], labels,
                         kinds={c: kinds[c] for c in labels}, channel_names=channels, conditioning=conditioning,
                         windows=spec, stream=stream, **opts, **extra)

    mining = bool(mine_rounds) and len(recordings) > 1
    model = None if mining else fit(np.ones(len(y), bool))   # with mining, the one fit comes after it
    if mining:
        # Out-of-fold mining: a model fitted without a recording finds the ordinary
        # movement in it that looks like a gesture (in-sample, the model knows its own
        # null windows' neighbours and finds almost none). At most ``mine_folds`` fits:
        # recording i is mined by the model of fold i mod k.
        k = min(mine_folds, len(recordings))
        found = []
        for f in range(k):
            mined = [i for i in range(len(recordings)) if i % k == f]
            others = ~np.isin(g, mined)
            if len(np.unique(y[others])) < len(classes):
                continue
            mw, origin, ends = hard_negatives(fit(others), [recordings[i] for i in mined], kinds, settings,
                                              level=mine_level, most=max(1, mine_most * len(mined) // len(recordings)))
            found.append((mw, np.asarray(mined, dtype=int)[origin], ends))
        n_found = sum(len(x[0]) for x in found)
        if n_found:
            w = np.concatenate([w, *(x[0] for x in found)])
            y = np.concatenate([y, np.zeros(n_found, dtype=y.dtype)])
            g = np.concatenate([g, *(x[1] for x in found)])
            e = np.concatenate([e, *(x[2] for x in found)])
        model = fit(np.ones(len(y), bool))
        model.summary["hard_negatives"] = int(n_found)
    model.summary["recordings"] = len(set(g[g < len(recordings) - len(cue_takes)].tolist()))
    if cue_takes:
        model.summary["others_takes"] = len(cue_takes)
    if ordinary:
        model.summary["ordinary_takes"] = len(ordinary)
    if name == "minirocket":
        splits, why = window_splits(g, e, spec.length, labels=y)
        if splits is None:
            model.summary["held_out_note"] = why + ": the leave-one-out figures overlap"
    groups = np.unique(g)
    if estimate and len(groups) > 1 and name != "minirocket":
        folds = groups % min(5, len(groups))
        fold_of = folds[np.searchsorted(groups, g)]
        correct = 0
        for f in np.unique(fold_of):
            held = fold_of == f
            if len(np.unique(y[~held])) < len(classes):
                continue
            m = fit(~held)
            correct += int((window_scores(m, w[held]).argmax(axis=1) == y[held]).sum())
            total = model.summary.setdefault("_held", 0)
            model.summary["_held"] = total + int(held.sum())
        n = model.summary.pop("_held", 0)
        if n:
            model.summary["cross_validated_window_accuracy"] = round(correct / n, 4)
    return model


def hard_negatives(model, recordings, kinds: dict[str, str], settings=None, level: float = 0.3,
                   most: int = 2000) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Null windows of the training recordings that the model takes for a gesture: the
    windows outside every labelled gesture (``training.label_windows`` null) whose highest
    non-null probability, from the live recogniser run over the whole recording, is at
    least ``level``. Returns (windows (m, 2, length, channels), recording index (m,), end
    sample (m,)), the ``most`` most confident, for training them as null (hard-negative mining).
    """
    from .training import TrainingSettings, condition_recording, label_windows
    settings = settings or TrainingSettings()
    found, conf, origin, at = [], [], [], []
    length = model.windows.length
    for i, r in enumerate(recordings):
        streams = condition_recording(r, model.conditioning)
        ends, prob = make_recogniser(model).push(streams[0], streams[1])
        if not len(ends):
            continue
        ends = np.asarray(ends)
        y = label_windows(ends, length, model.rate_hz, r.intervals, model.classes,
                          {c: kinds.get(c, "gesture") for c in model.classes[1:]})
        top = prob[:, 1:].max(axis=1)
        pick = np.flatnonzero((y == 0) & (top >= level))
        if not len(pick):
            continue
        idx = ends[pick][:, None] - length + np.arange(length)[None, :]
        found.append(streams[:, idx].transpose(1, 0, 2, 3))      # (m, 2, length, channels)
        conf.append(top[pick])
        origin.append(np.full(len(pick), i))
        at.append(ends[pick])
    if not found:
        return np.empty((0, 2, length, model.n_channels)), np.empty(0, dtype=int), np.empty(0, dtype=int)
    wins, conf, origin, at = np.concatenate(found), np.concatenate(conf), np.concatenate(origin), np.concatenate(at)
    keep = np.sort(np.argsort(-conf, kind="stable")[:most])
    return wins[keep], origin[keep], at[keep]


def window_scores(model, windows: np.ndarray) -> np.ndarray:
    """Uncalibrated scores (m, classes) of conditioned (level, motion) windows (m, 2, length, channels).

    The batch form of what each live recogniser computes per hop.
    """
    windows = np.asarray(windows, dtype=float)
    if model.classifier == "linear":
        return model.scores(window_features(windows))
    return scores(model, windows_to_cases(windows, model.stream))
