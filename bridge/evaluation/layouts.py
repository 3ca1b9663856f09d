"""Which cable layout separates the vocabulary best for wearers it was not trained on?

``leave_one_wearer_out`` trains the ``linear`` classifier (quick to fit; ``drape fit``
defaults to ``minirocket``) on every wearer but one and scores the windows of the one
left out; it also scores held-out sessions of the wearers it did train on, so the two
can be compared (unseen wearers are harder).  ``compare_layouts`` simulates the same troupe in
several layouts and runs it for each: the garment-design aid of ``examples/``.

The score is balanced window accuracy: the mean over classes (null included) of the
fraction of each class's windows classified right, so chance is 1 / classes.
Windows are labelled as for training (``recognition.training.label_windows``).
"""

from __future__ import annotations

from collections import defaultdict

import numpy as np

from ..recognition.training import IGNORE, TrainingSettings, fit_linear, label_windows, recording_features


def balanced_window_accuracy(model, recordings) -> float:
    """Mean per-class recall of ``model``'s window decisions over labelled recordings."""
    truth, guess = [], []
    for rec in recordings:
        features, ends = recording_features(rec, (model.conditioning, model.windows))
        y = label_windows(ends, model.windows.length, rec.rate_hz, rec.intervals, model.classes, model.kinds)
        keep = y != IGNORE
        truth.append(y[keep])
        guess.append(model.scores(features[keep]).argmax(axis=1))
    t, g = np.concatenate(truth), np.concatenate(guess)
    recalls = [float(np.mean(g[t == k] == k)) for k in range(len(model.classes)) if np.any(t == k)]
    return float(np.mean(recalls))


def leave_one_wearer_out(recordings, kinds: dict[str, str], settings: TrainingSettings | None = None,
                         progress=None) -> dict:
    """Leave-one-wearer-out balanced window accuracy of the linear classifier.

    ``recordings`` carry ``wearer`` and ``session`` names.  For each wearer W: train on
    the other wearers' sessions except each one's last, score W's sessions ("unseen")
    and the others' last sessions ("seen", a new session of a known wearer).  With one
    session per wearer there is no new session of a known wearer: "seen" is None (a score
    on the training takes themselves would not be held out).
    Returns {"folds": [{"wearer", "unseen", "seen"}], "unseen", "seen", "chance", "classes"}.
    """
    settings = settings or TrainingSettings()
    by_wearer: dict[str, list] = defaultdict(list)
    for r in recordings:
        by_wearer[r.wearer].append(r)
    if len(by_wearer) < 2:
        raise ValueError("leave-one-wearer-out needs recordings of at least two wearers")
    folds = []
    model = None
    for held in sorted(by_wearer):
        train, seen = [], []
        for w, recs in sorted(by_wearer.items()):
            if w == held:
                continue
            recs = sorted(recs, key=lambda r: r.session)
            if len(recs) > 1:
                train += recs[:-1]
                seen.append(recs[-1])
            else:
                train += recs
        model = fit_linear(train, kinds, settings)
        folds.append({"wearer": held, "unseen": balanced_window_accuracy(model, by_wearer[held]),
                      "seen": balanced_window_accuracy(model, seen) if seen else None})
        if progress:
            progress(folds[-1])
    return {"folds": folds, "unseen": float(np.mean([f["unseen"] for f in folds])),
            "seen": None if any(f["seen"] is None for f in folds) else float(np.mean([f["seen"] for f in folds])),
            "chance": 1.0 / len(model.classes),
            "classes": len(model.classes)}


def compare_layouts(layouts, seed: int = 1, wearers: int = 6, sessions: int = 2, repetitions: int = 3,
                    gestures=None, null_activities=None, progress=None) -> list[dict]:
    """Simulate one troupe per layout (same people, same scripts) and score each by leave-one-wearer-out.

    ``layouts`` are ``GarmentLayout`` values (``None`` for the built-in four cables).
    Returns one dict per layout: {"layout", "channels", "unseen", "seen", "chance", ...}.
    """
    from ..garment import FULL_GESTURES, FULL_NULL_ACTIVITIES
    from ..garment.troupe import troupe_takes
    from ..sources import Recording

    gestures = dict(FULL_GESTURES if gestures is None else gestures)
    null_activities = tuple(FULL_NULL_ACTIVITIES if null_activities is None else null_activities)
    out = []
    for layout in layouts:
        recs = [Recording.from_take(take, gestures)
                for _, _, take in troupe_takes(seed, wearers, sessions, gestures, null_activities, repetitions, layout)]
        result = leave_one_wearer_out(recs, gestures)
        result.update(layout=layout.name if layout else "built-in, 4 cables", channels=len(recs[0].channel_names))
        out.append(result)
        if progress:
            progress(result)
    return out
