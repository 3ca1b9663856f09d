"""How well a classifier will do on new sessions and on wearers it has never seen.

Schemes over take files, grouped by the wearer and session their metadata name:

- ``leave-session-out``: each distinct session label in turn is held out (all wearers'
  takes of it), the model is trained on the rest: new recordings of known wearers.
- ``leave-wearer-out``: each wearer in turn is held out: people the model never saw.

Held-out takes are scored per window (accuracy, macro F1, per-class scores, confusion)
and per event: each take is replayed through the live pipeline (``bridge.service``) so
its decisions are the ones the daemon would make, and scored by ``events``.
"""

from __future__ import annotations

import numpy as np

from ..recognition.classifiers import window_scores
from ..recognition.linear import confidence_gap, expected_calibration_error, probabilities
from ..recognition.training import condition_recording, label_windows
from ..recognition.windows import all_windows
from ..service import replay_take
from .events import Span, score_take, summarise

SCHEMES = {"leave-session-out": "session", "leave-wearer-out": "wearer"}


def classification_scores(y_true, y_pred, classes) -> dict:
    """accuracy, macro_f1, per_class {precision, recall, f1, support}, confusion (rows true, columns predicted)."""
    k = len(classes)
    y_true = np.asarray(y_true, dtype=int)
    y_pred = np.asarray(y_pred, dtype=int)
    conf = np.zeros((k, k), dtype=int)
    np.add.at(conf, (y_true, y_pred), 1)
    per_class, f1s = {}, []
    for i, c in enumerate(classes):
        tp = conf[i, i]
        p = tp / conf[:, i].sum() if conf[:, i].sum() else 0.0
        r = tp / conf[i].sum() if conf[i].sum() else 0.0
        f = 2 * p * r / (p + r) if p + r else 0.0
        per_class[c] = {"precision": round(float(p), 4), "recall": round(float(r), 4), "f1": round(float(f), 4),
                        "support": int(conf[i].sum())}
        if conf[i].sum():
            f1s.append(f)
    return {"accuracy": round(float(np.trace(conf) / max(1, conf.sum())), 4),
            "macro_f1": round(float(np.mean(f1s)) if f1s else 0.0, 4),
            "per_class": per_class, "classes": list(classes), "confusion": conf.tolist(), "windows": int(conf.sum())}


def _window_truth(rec, model, ends: np.ndarray) -> np.ndarray:
    """True class index of the windows ending at ``ends``; ambiguous ones get a negative index."""
    kinds = {**model.kinds, **{iv.label: model.kinds.get(iv.label, "gesture") for iv in rec.intervals}}
    known = [iv for iv in rec.intervals if iv.label in model.kinds]
    return label_windows(ends, model.windows.length, model.rate_hz, known, model.classes, kinds)


def take_windows(rec, model) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Labelled windows of one take as the model sees them: (true class index, predicted
    index, confidence: the predicted class's calibrated probability).

    Ambiguous windows are left out; labels the model does not know count as null.
    """
    streams = condition_recording(rec, model.conditioning)
    w, ends = all_windows(model.windows, streams[0], streams[1])
    y = _window_truth(rec, model, ends)
    keep = y >= 0
    if not keep.any():
        return y[keep], y[keep], np.empty(0)
    prob = probabilities(window_scores(model, w[keep]), model.temperature)
    return y[keep], prob.argmax(axis=1), prob.max(axis=1)


def hop_windows(rec, model, hops) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``take_windows`` from the hops a replay already scored: the live recogniser emits a
    window at the same samples as ``all_windows`` over a take with no skipped rows, so
    the classifier need not run twice (DTW over every window of a long take is slow)."""
    if not hops:
        return np.empty(0, dtype=int), np.empty(0, dtype=int), np.empty(0)
    ends = np.rint(np.array([t for t, _ in hops]) * model.rate_hz).astype(int)
    y = _window_truth(rec, model, ends)
    keep = y >= 0
    prob = np.array([p for _, p in hops])
    return y[keep], prob.argmax(axis=1)[keep], prob.max(axis=1)[keep]


def evaluate_takes(model, recs, progress=None, block_s: float = 5.0, events: bool = True, names=None) -> dict:
    """Window and event scores of a model on takes it was not trained on.

    Raises ``ModelError`` (a ValueError) before any scoring when a take's channels are not the
    model's (count, rate, names in order: ``Model.check_takes``; ``names`` are the takes' names
    for that message): a model reads channels by position.

    Returns classification_scores(...) plus "calibration_error" (ECE of the windows' top
    probabilities, 10 bins), "confidence" and "correct" (per window, for pooling over
    folds), "events" (``events.summarise``: the strict firing counts) and "takes": per take its name, the events
    decided and the truth (for the report's timeline).
    With ``events`` False the takes are not replayed (window scores only).
    """
    recs = list(recs)
    model.check_takes(recs, names)
    ys, ps, cs, per_take, scored = [], [], [], [], []
    for i, rec in enumerate(recs):
        decided = []
        if events:
            decided, hops, skipped = replay_take(rec, model, None, block_s)
            y, p, c = hop_windows(rec, model, hops) if not skipped else take_windows(rec, model)
        else:
            y, p, c = take_windows(rec, model)
        ys.append(y); ps.append(p); cs.append(c)
        duration = rec.freq_hz.shape[0] / rec.rate_hz
        truth = [Span(iv.start_s, iv.end_s, iv.label) for iv in rec.intervals]
        s = score_take(truth, decided, model.windows.window_s, duration, model.kinds)
        scored.append(s)
        per_take.append({"rec": rec, "events": decided, "truth": truth, "latency_s": s["firings"]["latency_s"]})
        if progress:
            progress(i + 1, len(recs))
    y, p = np.concatenate(ys), np.concatenate(ps)
    out = classification_scores(y, p, model.classes)
    out["confidence"] = np.concatenate(cs)
    out["calibration_error"] = round(confidence_gap(out["confidence"], p == y), 4)
    out["correct"] = p == y
    out["events"] = summarise(scored) if events else None
    out["takes"] = per_take if events else []
    return out


def groups_of(recs, scheme: str) -> list[str]:
    """The group label of each take under a scheme (its wearer or its session)."""
    if scheme not in SCHEMES:
        raise ValueError(f"unknown scheme {scheme!r}; choose {', '.join(SCHEMES)}")
    field = SCHEMES[scheme]
    labels = [str(getattr(r, field) or "") for r in recs]
    if any(not l for l in labels):
        raise ValueError(f"{scheme} needs every take's {field} in its metadata; some takes have none")
    if len(set(labels)) < 2:
        raise ValueError(f"{scheme} needs takes of at least two {field}s; all are {labels[0]!r}")
    return labels


def cross_validate(recs, kinds: dict[str, str], scheme: str, classifier: str = "linear", settings=None,
                   progress=None, events: bool = True, **options) -> dict:
    """Train on all but one group, score the held-out group's takes; repeat for each group.

    Returns the pooled classification_scores, "events" (pooled over all held-out takes),
    "folds" (per group: accuracy, macro F1, firing counts and recall),
    "scheme", "classifier" and "takes" (for the report).
    """
    from ..recognition.classifiers import fit_recordings
    recs = list(recs)
    labels = groups_of(recs, scheme)
    order = sorted(set(labels))
    conf, folds, takes, scored, confidence, correct = None, [], [], [], [], []
    classes = None
    for n, grp in enumerate(order):
        train = [r for r, l in zip(recs, labels) if l != grp]
        test = [r for r, l in zip(recs, labels) if l == grp]
        extra = {} if classifier == "linear" else {"estimate": False}
        model = fit_recordings(classifier, train, kinds, settings, **extra, **options)
        classes = classes or model.classes
        if tuple(model.classes) != tuple(classes):
            raise ValueError(f"holding out {grp!r} leaves a class untrained; every gesture must appear in "
                             "takes of at least two groups")
        res = evaluate_takes(model, test, events=events)
        confidence.append(res["confidence"]); correct.append(res["correct"])
        c = np.array(res["confusion"])
        conf = c if conf is None else conf + c
        ev = res["events"] or {}
        folds.append({"held_out": grp, "takes": len(test), "accuracy": res["accuracy"], "macro_f1": res["macro_f1"],
                      "calibration_error": res["calibration_error"],
                      **{k: ev.get(k) for k in ("recall", "hit", "performed", "double", "wrong_name", "ordinary", "false",
                                                "take_hours", "ordinary_hours")}})
        window_s = model.windows.window_s
        for t in res["takes"]:
            scored.append(score_take(t["truth"], t["events"], window_s, t["rec"].freq_hz.shape[0] / t["rec"].rate_hz,
                                     model.kinds))
        takes += res["takes"]
        if progress:
            progress(n + 1, len(order))
    yy = np.repeat(np.arange(len(classes)), conf.sum(axis=1))
    pp = np.concatenate([np.repeat(np.arange(len(classes)), row) for row in conf])
    out = classification_scores(yy, pp, classes)
    out["calibration_error"] = round(confidence_gap(np.concatenate(confidence), np.concatenate(correct)), 4)
    out["events"] = summarise(scored) if events else None
    out.update(scheme=scheme, classifier=classifier, folds=folds, takes=takes)
    return out


def evaluate_cases(model, X_list, y, length: int | None = None) -> dict:
    """Scores of a model on cases from a .ts file; unequal lengths are resampled to the model's window.

    Case labels the model does not know raise ValueError.
    """
    from ..recognition.classifiers import predict_proba
    from ..sources.ts_format import stack_cases
    n = model.windows.length
    lengths = {c.shape[1] for c in X_list}
    X = stack_cases(X_list, n if lengths != {n} else None)
    want = model.n_channels * (2 if getattr(model, "stream", "level") == "both" else 1)
    if X.shape[1] != want:
        raise ValueError(f"cases have {X.shape[1]} dimensions; the model reads {want}")
    index = {c: i for i, c in enumerate(model.classes)}
    unknown = sorted(set(map(str, y)) - set(index))
    if unknown:
        raise ValueError(f"case labels the model does not know: {', '.join(unknown)}")
    yi = np.array([index[str(v)] for v in y])
    prob = predict_proba(model, X)
    out = classification_scores(yi, prob.argmax(axis=1), model.classes)
    out["calibration_error"] = round(expected_calibration_error(prob, yi), 4)
    return out
