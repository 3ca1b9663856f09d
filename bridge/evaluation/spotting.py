"""The spotting protocol: does a model fire each deliberate gesture once and stay silent
during ordinary movement, on a session it never saw?

Per simulated wearer of a troupe (full vocabulary):

- **fit** on two sessions, each with ``fit_reps`` repetitions of every gesture and
  ``fit_null_s`` of ordinary movement;
- **tune** (``drape tune``'s search) on a third session: ``tune_reps`` repetitions and
  ``tune_null_s`` of ordinary movement;
- **score** a fourth session: ``score_reps`` repetitions and ``score_null_s`` of ordinary
  movement, with the one matcher, every firing counted.

Leave-wearer-out: a model fitted on the other wearers' fit sessions and tuned on their
tune sessions, scored on the held-out wearer's fourth session; the last wearer is held
out, or the last ``unseen_wearers`` each in turn (their counts pooled), so that the
unseen-wearer row covers enough hours to show a rate. Takes are rendered once
into a cache folder and read back on later runs; each scored session's hop probabilities
at the default gate are written there too (``hops-*.npz``).

Check-in variant (``checkin_reps`` > 0): before the scored session's performance the wearer,
dressed for it, records a short check-in take of its own (``checkin_reps`` repetitions and
``checkin_null_s`` of ordinary movement; the cables sit as in the scored session, the motion
and noise are drawn apart), and every fit of that wearer adds it. The leave-wearer-out
model then adds the held-out wearer's check-in take too: a new wearer enrolled with a few
minutes. The scored performance itself is never fitted on.

Three-dressings variant (``three_dressings``): the third session is fitted as a third
dressing instead of tuned on (each wearer's fit: the two fit sessions and that one; the
unseen wearer's: the others' three sessions), so there are no tuned rows. What the README's
advice to train over several dressings is measured by.

Development sessions (``run_development``): session DEV_SESSION of each wearer (``dev_reps``
repetitions and ``dev_null_s`` of ordinary movement), never scored by the protocol, on
which the default fit is counted at its stored gate. Changes are chosen there, so that the
protocol's figures stay held out.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from .matching import count_take, format_rate, pool


@dataclass(frozen=True)
class Protocol:
    wearers: int = 6
    seed: int = 1
    fit_reps: int = 5
    fit_null_s: float = 180.0
    tune_reps: int = 3
    tune_null_s: float = 600.0
    score_reps: int = 3
    score_null_s: float = 3600.0
    vocabulary: str = "full"
    prior_wearers: int = 0        # other simulated people whose ordinary movement is added to every fit
    prior_s: float = 600.0        # ordinary movement of each, s
    prior_cue_people: int = 0     # other simulated people whose performances of each gesture ...
    prior_reps: int = 1           # ... ``prior_reps`` times each are added as cases (0: none)
    dev_reps: int = 3             # development session: repetitions ...
    dev_null_s: float = 1800.0    # ... and ordinary movement, s
    checkin_reps: int = 0         # check-in take in the scored session's dressing: repetitions (0: none) ...
    checkin_null_s: float = 180.0  # ... and ordinary movement, s
    unseen_wearers: int = 1       # leave-wearer-out: the last this many wearers, each held out in turn
    three_dressings: bool = False  # the third session fitted as a third dressing instead of tuned on
    garment: str = ""             # the wearers' jacket as layout TOML text (``garment.load_layout``); "": built-in


ROLES = {"fit0": 0, "fit1": 1, "tune": 2, "score": 3}   # role -> session number
DEV_SESSION = 5                                         # the development session's number
CHECKIN_TAKE = 1                                        # the check-in's performance key (Jacket ``take``)
APART = ("prior_", "dev_", "checkin_", "unseen_", "three_")   # settings a cache's takes do not depend on


def session_take(p: Protocol, wearer: int, role: str):
    """The Recording of one wearer's session in its role: repetitions, then ordinary movement."""
    from ..garment import FULL_GESTURES, FULL_NULL_ACTIVITIES, GESTURES, NULL_ACTIVITIES, Jacket
    from ..garment.jacket import training_script
    from ..garment.troupe import ordinary_script
    from ..sources import Recording
    gestures, nulls = ((FULL_GESTURES, FULL_NULL_ACTIVITIES) if p.vocabulary == "full"
                       else (GESTURES, NULL_ACTIVITIES))
    reps, null_s = {"fit0": (p.fit_reps, p.fit_null_s), "fit1": (p.fit_reps, p.fit_null_s),
                    "tune": (p.tune_reps, p.tune_null_s), "score": (p.score_reps, p.score_null_s),
                    "dev": (p.dev_reps, p.dev_null_s), "checkin": (p.checkin_reps, p.checkin_null_s)}[role]
    session = {**ROLES, "dev": DEV_SESSION, "checkin": ROLES["score"]}[role]
    perf = CHECKIN_TAKE if role == "checkin" else None
    rng = np.random.default_rng([p.seed, wearer, session, 29] + ([] if perf is None else [perf]))
    script = training_script(rng, reps, list(gestures), null_activities=tuple(nulls)) + \
        ordinary_script(rng, null_s, nulls)
    take = Jacket(seed=p.seed, wearer=wearer, session=session, take=perf, layout=garment_layout(p)).perform(script)
    return Recording.from_take(take, dict(gestures))


def garment_layout(p: Protocol):
    """The wearers' cable layout (None: the built-in four cables). The simulated people added
    to fits wear the built-in jacket, as ``drape fit`` adds them."""
    if not p.garment:
        return None
    import tomllib
    from ..garment.layout import parse_layout
    return parse_layout(tomllib.loads(p.garment), "the protocol's garment")


def prior_take(p: Protocol, k: int):
    """Ordinary movement of the k-th prior person: a wearer of another seed, so nobody the
    protocol scores."""
    from ..garment import FULL_NULL_ACTIVITIES, NULL_ACTIVITIES
    from ..garment.troupe import ordinary_take
    from ..sources import Recording
    nulls = FULL_NULL_ACTIVITIES if p.vocabulary == "full" else NULL_ACTIVITIES
    return Recording.from_take(ordinary_take(p.seed + 1000, k, p.prior_s, nulls), {})


def prior_cue_take(p: Protocol, k: int):
    """The k-th prior person performing every gesture ``prior_reps`` times."""
    from ..garment import FULL_GESTURES, GESTURES
    from .simulated import others_cue_take
    return others_cue_take(p.seed + 1000, k, p.prior_reps, FULL_GESTURES if p.vocabulary == "full" else GESTURES)


def protocol_takes(p: Protocol, cache: str | Path, progress=None, roles=tuple(ROLES)) -> dict:
    """{(wearer, role): Recording} of ``roles``, rendered into ``cache`` once (a folder
    named by the protocol). Development takes are named by their settings, so a cache
    holds them beside the protocol's."""
    from ..sources import read_recording, write_recording
    folder = Path(cache)
    folder.mkdir(parents=True, exist_ok=True)
    stamp = folder / "protocol.json"
    sessions = {k: v for k, v in asdict(p).items() if not k.startswith(APART)}
    # Settings added since a cache was written take their defaults (its takes were rendered so).
    if stamp.exists() and {k: v for k, v in {**asdict(Protocol()), **json.loads(stamp.read_text())}.items()
                           if not k.startswith(APART)} != sessions:
        raise ValueError(f"{folder} holds takes of another protocol; give an empty folder")
    stamp.write_text(json.dumps(asdict(p), indent=1))
    out = {}
    for w in range(p.wearers):
        for role in roles:
            name = {"dev": f"dev{p.dev_reps}x{p.dev_null_s:g}s",
                    "checkin": f"checkin{p.checkin_reps}x{p.checkin_null_s:g}s"}.get(role, role)
            path = folder / f"wearer{w}-{name}.take"
            if not path.exists():
                write_recording(path, session_take(p, w, role))
            out[(w, role)] = read_recording(path)
            if progress:
                progress(f"take {path.stem}: {out[(w, role)].freq_hz.shape[0] / out[(w, role)].rate_hz / 60:.1f} min")
    for k in range(p.prior_wearers):
        path = folder / f"prior{k}-{p.prior_s:g}s.take"
        if not path.exists():
            write_recording(path, prior_take(p, k))
        out[(k, "prior")] = read_recording(path)
    for k in range(p.prior_cue_people if p.prior_reps else 0):
        path = folder / f"prior{k}-cues{p.prior_reps}.take"
        if not path.exists():
            write_recording(path, prior_cue_take(p, k))
        out[(k, "prior_cues")] = read_recording(path)
    return out


def prior_options(p: Protocol, takes: dict) -> dict:
    """Fit options that add the prior people: their ordinary movement and their cues."""
    out = {}
    if p.prior_wearers:
        out["ordinary"] = [takes[(k, "prior")] for k in range(p.prior_wearers)]
    if p.prior_reps and p.prior_cue_people:
        out["others"] = [takes[(k, "prior_cues")] for k in range(p.prior_cue_people)]
    return out


def score(model, rec, settings=None, keep: str | Path | None = None) -> dict:
    """``matching.count_take`` of a model (with ``settings`` as its decision table, if given)
    replayed over a take. ``keep``: also write each hop's time (s) and class probabilities
    there (.npz: ``t_s``, ``probabilities``, ``classes``, ``hop_s`` and the model's stored
    decision table as ``decision_json``), for ``recount``."""
    from .tuning import _hop_s
    from ..service.replay import replay_take
    if settings is not None:
        model.decision = {**model.decision, **settings}
    events, hops, _ = replay_take(rec, model, None, 5.0)
    if keep is not None:
        np.savez(keep, t_s=np.array([t for t, _ in hops]), probabilities=np.array([q for _, q in hops]),
                 classes=np.array(model.classes), hop_s=np.array(_hop_s(model)),
                 decision_json=np.array(json.dumps(model.decision)))
    return count_take(events, rec.intervals, rec.freq_hz.shape[0] / rec.rate_hz)


def recount(cache: str | Path, workflow: str, gestures: dict | None = None, postures: dict | None = None) -> dict:
    """The known wearers' scored sessions kept by ``run_protocol`` in ``cache``
    (``hops-{workflow}-wearer*.npz`` beside the takes), counted again through the gate with
    ``gestures`` / ``postures`` (GateSettings fields, e.g. {"threshold": 0.5}) replacing the
    stored settings of every class of that kind. Returns {"wearers": [wearer numbers],
    "per_wearer": [counts...], "pooled": ``pool``}. A setting chosen on these counts is no
    longer held out on them."""
    from dataclasses import replace

    from ..decisions.gate import gate_settings_for
    from ..sources import read_recording
    from .tuning import gate_hops
    folder = Path(cache)
    number = {q: int(q.stem.rsplit("wearer", 1)[1]) for q in folder.glob(f"hops-{workflow}-wearer*.npz")}
    kept = sorted(number, key=number.get)
    if not kept:
        raise ValueError(f"{folder} keeps no scored sessions of {workflow!r} (run drape bench --spotting on it first)")
    rows = []
    for path in kept:
        rec = read_recording(folder / f"{path.stem.rsplit('-', 1)[1]}-score.take")
        with np.load(path, allow_pickle=False) as z:
            t, probs, classes = z["t_s"], z["probabilities"], tuple(str(c) for c in z["classes"])
            hop_s, decision = float(z["hop_s"]), json.loads(str(z["decision_json"]))
        kinds = {c: rec.kinds[c] for c in classes[1:]}
        table = gate_settings_for(classes[1:], decision, kinds, hop_s=hop_s)
        for c, v in table.items():
            change = gestures if kinds[c] == "gesture" else postures
            table[c] = replace(v, **(change or {}))
        rows.append(count_take(gate_hops(classes, kinds, hop_s, t, probs, table), rec.intervals,
                               rec.freq_hz.shape[0] / rec.rate_hz))
    return {"wearers": [number[q] for q in kept], "per_wearer": rows, "pooled": pool(rows)}


def fit_model(classifier: str, recs, **options):
    from ..recognition.classifiers import fit_recordings
    kinds = {}
    for r in recs:
        kinds.update(r.kinds)
    return fit_recordings(classifier, recs, kinds, **options)


def run_protocol(p: Protocol, classifier: str, cache: str | Path, leave_wearer_out: bool = True,
                 progress=print, use_prior: bool = True, **options) -> dict:
    """Rows per wearer (known-wearer) and for the held-out wearer: counts at the default gate,
    and tuned counts unless the third session was fitted (``three_dressings``)."""
    from .tuning import tune_model
    if p.three_dressings and p.checkin_reps:
        raise ValueError("a check-in take and a third fitted dressing are two workflows: choose one")
    roles = tuple(ROLES) + (("checkin",) if p.checkin_reps else ())
    takes = protocol_takes(p, cache, progress, roles=roles)
    fitted = ("fit0", "fit1", "tune") if p.three_dressings else ("fit0", "fit1")

    def own(w):  # a wearer's own takes in a fit: the fitted sessions, and the check-in take if any
        return [takes[(w, r)] for r in fitted] + ([takes[(w, "checkin")]] if p.checkin_reps else [])

    def tuned(model, tune_takes, rec):   # None when the tune sessions were fitted
        return None if p.three_dressings else score(model, rec, tune_model(model, tune_takes).settings)

    def said(d, tt):   # the progress line of one scored wearer
        out = f"default {d['hit']}/{d['performed']} hits, {d['false']} false"
        return out if tt is None else (out + f"; tuned {tt['hit']}/{tt['performed']} hits, {tt['false']} false "
                                       f"({tt['double']} double, {tt['wrong_name']} wrong name, {tt['ordinary']} ordinary)")
    if use_prior:
        options = {**options, **prior_options(p, takes)}
    rows = {"default": [], "tuned": [], "wearers": []}
    workflow = workflow_name(p)
    for w in range(p.wearers):
        model = fit_model(classifier, own(w), **options)
        rows["default"].append(score(model, takes[(w, "score")], keep=Path(cache) / f"hops-{workflow}-wearer{w}.npz"))
        rows["tuned"].append(tuned(model, [takes[(w, "tune")]], takes[(w, "score")]))
        rows["wearers"].append(w)
        if progress:
            progress(f"wearer{w}: " + said(rows["default"][-1], rows["tuned"][-1]))
    out = {"protocol": asdict(p), "classifier": classifier,
           "options": {k: (f"{len(v)} takes" if k in ("ordinary", "others") else str(v)) for k, v in options.items()},
           "per_wearer": rows, "known_default": pool(rows["default"])}
    if not p.three_dressings:
        out["known_tuned"] = pool(rows["tuned"])
    if leave_wearer_out and p.wearers > 1:
        unseen = {"default": [], "tuned": [], "wearers": []}
        for held in range(p.wearers - max(1, min(p.unseen_wearers, p.wearers)), p.wearers):
            others = [w for w in range(p.wearers) if w != held]
            enrol = [takes[(held, "checkin")]] if p.checkin_reps else []   # a new wearer's few minutes
            model = fit_model(classifier, [takes[(w, r)] for w in others for r in fitted] + enrol, **options)
            d = score(model, takes[(held, "score")], keep=Path(cache) / f"hops-{workflow}-unseen{held}.npz")
            tt = tuned(model, [takes[(w, "tune")] for w in others], takes[(held, "score")])
            for key, value in (("default", d), ("tuned", tt), ("wearers", held)):
                unseen[key].append(value)
            if progress:
                progress(f"{'new' if p.checkin_reps else 'unseen'} wearer{held}: " + said(d, tt))
        out["unseen_per_wearer"] = unseen
        out["unseen_default"] = pool(unseen["default"])
        if not p.three_dressings:
            out["unseen_tuned"] = pool(unseen["tuned"])
    return out


def workflow_name(p: Protocol) -> str:
    """What a wearer's fit holds, naming the scored sessions' kept hops (``hops-{name}-*.npz``)."""
    return "checkin" if p.checkin_reps else "three-dressings" if p.three_dressings else "two-sessions"


WORKFLOWS = ("two-sessions", "checkin", "three-dressings")


def run_development(p: Protocol, classifier: str, cache: str | Path, progress=print, use_prior: bool = True,
                    **options) -> dict:
    """Each wearer's default fit (its two fit sessions) counted at its stored gate on its
    development session: {"per_wearer": [counts...], "pooled": ``pool``}. For choosing
    changes without looking at the protocol's tune and score sessions."""
    takes = protocol_takes(p, cache, progress, roles=("fit0", "fit1", "dev"))
    if use_prior:
        options = {**options, **prior_options(p, takes)}
    rows = []
    for w in range(p.wearers):
        model = fit_model(classifier, [takes[(w, "fit0")], takes[(w, "fit1")]], **options)
        rows.append(score(model, takes[(w, "dev")]))
        if progress:
            c = rows[-1]
            progress(f"wearer{w}: {c['hit']}/{c['performed']} hits, {c['false']} false ({c['double']} double, "
                     f"{c['wrong_name']} wrong name, {c['ordinary']} ordinary)")
    return {"protocol": asdict(p), "classifier": classifier, "per_wearer": rows, "pooled": pool(rows)}


def format_development(result: dict) -> list[str]:
    """The development sessions' counts in Markdown, per wearer and pooled (default gate)."""
    lines = ["| who | recall | double | wrong name | in ordinary movement | all false /h of take |",
             "|---|---|---|---|---|---|"]
    for w, c in enumerate(result["per_wearer"] + [None]):
        p = pool([c]) if c is not None else result["pooled"]
        rec = "n/a" if p["recall"] is None else f"{p['recall']:.3f} ({p['hit']}/{p['performed']})"
        lines.append(f"| {'pooled' if c is None else f'wearer{w}'} | {rec} | {p['double']} | {p['wrong_name']} | "
                     f"{p['ordinary']} | {format_rate(p['rates']['false_per_take_hour'])} |")
    return lines


def format_table(result: dict) -> list[str]:
    """The protocol's table in Markdown: recall and every kind of false firing with its
    rate and 95 % interval, per wearer (tuned; the default gate when the third session was
    fitted) and pooled."""
    lines = ["| who | setting | recall | double /h of take | wrong name /h of take | "
             "ordinary /h of ordinary movement | all false /h of take |",
             "|---|---|---|---|---|---|---|"]

    def row(who, setting, p):
        r = p["rates"]
        rec = "n/a" if p["recall"] is None else f"{p['recall']:.3f} ({p['hit']}/{p['performed']})"
        lines.append(f"| {who} | {setting} | {rec} | {format_rate(r['double_per_take_hour'])} | "
                     f"{format_rate(r['wrong_name_per_take_hour'])} | {format_rate(r['ordinary_per_ordinary_hour'])} | "
                     f"{format_rate(r['false_per_take_hour'])} |")
    per = result["per_wearer"]
    was_tuned = "known_tuned" in result   # not when the third session was fitted
    for w, c in zip(per["wearers"], per["tuned"] if was_tuned else per["default"]):
        row(f"wearer{w}", "tuned" if was_tuned else "default gate", pool([c]))
    row("pooled, known wearers", "default gate", result["known_default"])
    if was_tuned:
        row("pooled, known wearers", "tuned", result["known_tuned"])
    if "unseen_default" in result:
        new = bool(result["protocol"].get("checkin_reps"))
        in_turn = len(result.get("unseen_per_wearer", {}).get("wearers", ())) > 1
        who = (("new wearer" if new else "unseen wearer") + ("s, each held out in turn" if in_turn else "")
               + (", check-in take only" if new else ""))
        row(who, "default gate", result["unseen_default"])
        if "unseen_tuned" in result:
            row(who, "tuned", result["unseen_tuned"])
    return lines
