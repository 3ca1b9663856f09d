"""The model verbs: fit, evaluate, tune."""

from __future__ import annotations

import sys
from pathlib import Path

from .common import _err, _folder_problem, _in_sample, _output_problem, _plural, _report, _say_in_sample


def _progress(desc: str):
    """A progress callback (done, total) drawing a bar on stderr when it is a terminal, and its closer."""
    from ..progress import progress_bar
    bar = progress_bar(desc)
    return bar, bar.close


def _read_takes(paths):
    """The takes (fit, evaluate), each one whose capture was cut short named in a warning."""
    from ..sources import read_recording, warn_incomplete
    recs = [read_recording(p) for p in paths]
    warn_incomplete(paths, recs)
    kinds = {}
    for r in recs:
        kinds.update(r.kinds)
    return recs, kinds


def _times(n: int) -> str:
    return {1: "once", 2: "twice"}.get(n, f"{n} times")


def _simulated_others(a, recs) -> dict:
    """{"ordinary": the built-in people, "others": their cue takes} for a minirocket fit on
    the built-in jacket's takes (saying so), unless --no-simulated-others; else {}."""
    from ..evaluation.simulated import (
        OTHERS_CUE_PEOPLE,
        OTHERS_PEOPLE,
        OTHERS_REPS,
        OTHERS_S,
        built_in_jacket_takes,
        built_in_others,
        built_in_others_cues,
    )
    if a.classifier != "minirocket" or a.no_simulated_others or not built_in_jacket_takes(recs):
        return {}
    cues = built_in_others_cues(recs[0].rate_hz, {iv.label for r in recs for iv in r.intervals})
    print(f"the takes are the built-in simulated jacket's: adding the ordinary movement of "
          f"{_plural(OTHERS_PEOPLE, 'simulated person', 'simulated people')} ({OTHERS_S / 60:g} min each) "
          "to the null class"
          + (f", and {OTHERS_CUE_PEOPLE} performing every gesture {_times(OTHERS_REPS)}" if cues else "")
          + " (--no-simulated-others leaves them out)", flush=True)
    return {"ordinary": built_in_others(recs[0].rate_hz), **({"others": cues} if cues else {})}


def _read_ts_cases(path):
    from ..sources.ts_format import TsFormatError, read_ts
    try:
        return read_ts(path)
    except FileNotFoundError:
        raise TsFormatError(f"{path}: no such .ts file") from None


def _training_settings(a):
    """TrainingSettings from the shared options of fit and evaluate."""
    from ..recognition import TrainingSettings
    band = {} if a.band_hz is None else {"low_hz": a.band_hz[0], "high_hz": a.band_hz[1]}
    return TrainingSettings(window_s=a.window_s, hop_s=a.hop_s, **band)


def _checked_settings(a, recs, scheme: str | None = None):
    """``_training_settings``, checked against the takes before anything is added to them or
    said of them (ValueError): a band-pass that fits no take's rate, takes with no labelled
    gesture, a ``scheme`` the takes cannot be split by."""
    from ..evaluation.heldout import groups_of
    settings = _training_settings(a)
    for rate_hz in sorted({r.rate_hz for r in recs}):
        settings.band(rate_hz)
    if not any(r.intervals for r in recs):
        raise ValueError("the takes hold no labelled gestures")
    if scheme:
        groups_of(recs, scheme)
    return settings


def cmd_fit(a) -> int:
    from ..recognition import fit_cases, fit_recordings
    from ..sources import RecordingError
    from ..sources.ts_format import TsFormatError, stack_cases

    if bool(a.recordings) == bool(a.ts):
        return _err("give take files or --ts TRAIN.ts (one of the two)")
    problem = _output_problem(a.output, [*a.recordings, *a.ordinary, *([a.ts] if a.ts else [])], model=True,
                              replace=a.overwrite, option="-o")
    if problem:
        return _err(problem)
    options = {}
    edges = getattr(a, "edges", None)
    if edges:
        if a.classifier != "minirocket":
            return _err("--edges applies to --classifier minirocket only")
        options["edges"] = edges
    if a.band is not None or a.no_rejection:
        if a.classifier != "dtw":
            return _err("--band and --no-rejection are dtw settings; add --classifier dtw")
        if a.band is not None:
            if not 0.0 <= a.band <= 1.0:
                return _err(f"--band must be a fraction from 0 to 1, got {a.band:g}")
            options["band"] = a.band
        if a.no_rejection:
            options["reject"] = False
    ordinary = []
    step, close = _progress(f"fitting {a.classifier}")
    seen = []   # takes cut into windows so far, of how many

    def cutting(done: int, total: int) -> None:
        """Cutting each take into windows is a step; the fit after them is one more, so the
        bar never shows 100 % while the longest part is still running."""
        seen[:] = [total]
        if step:
            step(done, total + 1)
    try:
        if a.ts:
            X_list, y, meta = _read_ts_cases(a.ts)
            X = stack_cases(X_list)
            classes = sorted(set(y.tolist()))
            if step:
                step(0, 1)
            model = fit_cases(a.classifier, X, y, classes, **options)
            source = f"{len(y)} cases of {a.ts}"
        else:
            recs, kinds = _read_takes(a.recordings)
            settings = _checked_settings(a, recs)
            if a.ordinary:
                if a.classifier == "linear":
                    raise ValueError("--ordinary applies to --classifier minirocket or dtw")
                options["ordinary"] = ordinary = _read_takes(a.ordinary)[0]
            else:
                options.update(_simulated_others(a, recs))
            model = fit_recordings(a.classifier, recs, kinds, settings, progress=cutting, **options)
            if step and seen:
                step(seen[-1] + 1, seen[-1] + 1)   # the fit itself, the longest step, is done
            source = _plural(len(recs), "take")
    except (RecordingError, TsFormatError, ValueError) as exc:
        close()
        return _err(str(exc))
    close()
    if not a.ts:   # so that tune and evaluate can say when they are given a take the model learnt from
        model.summary["fitted_on"] = [r.fingerprint() for r in [*recs, *ordinary]]
    model.save(a.output)
    s = model.summary
    key = next((k for k in ("cross_validated_window_accuracy", "held_out_accuracy", "leave_one_out_accuracy") if k in s), None)
    estimate = f"{key.replace('_', ' ')} {s[key]:.3f}" if key else "no held-out estimate (one take)"
    if key and a.classifier in ("minirocket", "linear"):   # the penalty was picked on these very folds: say so
        estimate += " (its ridge penalty chosen on the same folds: a little optimistic)"
    cal = (f", calibration error {s['calibration_error']:.3f} (on the scores its temperature was fitted to)"
           if "calibration_error" in s else "")
    print(f"{a.output}: {a.classifier}, {_plural(len(model.classes) - 1, 'class', 'classes')} from {source}; {estimate}{cal}")
    if len(model.classes) == 2:
        # On the simulated jacket a model of hand_on_heart alone took arms crossed for it (a
        # switch's key pressed); with the other postures as classes of their own it did not.
        print(f"only one gesture in these takes ({model.classes[1]}): the model can fire nothing else, and the "
              f"wearer's other gestures and postures (arms crossed, hands clasped) may be taken for {model.classes[1]}; "
              "record those too and leave them unmapped (a switch), or, if a capture was cut short, record the rest "
              "and fit again")
    weakest = sorted((v["recall"], c) for c, v in s.get("held_out_by_class", {}).items() if v["recall"] is not None)[:3]
    if weakest:
        print("held-out window recall, lowest first: " + ", ".join(f"{c} {r:.2f}" for r, c in weakest)
              + " (the garment sees these least: rehearse or record more of them, or give them harmless actions)")
    if not a.ts:
        how = "as given" if a.window_s is not None else "room for the labelled gestures"
        print(f"window {model.windows.window_s:g} s ({how}), hop {model.windows.hop_s:g} s")
        advice = _dressing_advice(recs)
        if advice:
            print(advice)
        if not a.ordinary and a.classifier != "linear" and not model.summary.get("ordinary_takes"):
            from ..evaluation.simulated import built_in_jacket_takes
            # Other cables than the built-in jacket's: the people must wear the same layout,
            # or the fit refuses their takes (other channels).
            people = ("drape simulate --ordinary-people 6 --out others writes simulated ones"
                      if built_in_jacket_takes(recs) else
                      "drape simulate --ordinary-people 6 --layout FILE --out others writes simulated ones "
                      "in your garment's cable layout (FILE)")
            print("no --ordinary takes: on the simulated troupe, models fitted without other people's ordinary movement "
                  "fired about 17 to 120 times as often during it (docs/benchmarks.md, Spotting); " + people)
    return 0


def _dressing_advice(recs) -> str:
    """A line for one wearer's takes from two sessions or fewer (each put on anew), else ''
    (also when one of them is a check-in: the advice is to record one)."""
    if len({r.wearer for r in recs}) != 1 or any(r.check_in for r in recs):
        return ""
    sessions = {r.session or f"take {i}" for i, r in enumerate(recs)}
    if len(sessions) > 2:
        return ""
    # Figures: the ten simulated troupes held out, docs/benchmarks.md "Spotting".
    return (f"takes from {_plural(len(sessions), 'session')}: the garment sits a little differently each time it is "
            "put on, and on the simulated troupe two sessions alone fired 0.89 of the cues with 1.3 false cues "
            "per hour; after dressing for a show, record a check-in (drape capture --check-in) and fit it with "
            "these (0.97 and 0.7 per hour there)")


def _json_ready(result: dict) -> dict:
    return {k: v for k, v in result.items() if k not in ("takes", "confidence", "correct")}


def _print_result(result: dict) -> None:
    cal = f", calibration error {result['calibration_error']:.3f}" if "calibration_error" in result else ""
    print(f"accuracy {result['accuracy']:.3f}, macro F1 {result['macro_f1']:.3f}{cal} over {result['windows']} windows")
    conf = result.get("confusion") or []
    predicted = dict(zip(result.get("classes", ()), (sum(col) for col in zip(*conf))))
    for c, v in result["per_class"].items():
        if not v["support"]:   # nothing to recall: its 0.000s would be made up
            print(f"  {c:<16} no windows of it in these takes (taken for it {_times(predicted.get(c, 0))})")
            continue
        print(f"  {c:<16} precision {v['precision']:.3f}  recall {v['recall']:.3f}  F1 {v['f1']:.3f}  ({v['support']})")
    for f in result.get("folds", []):
        rec = "n/a" if f.get("recall") is None else f"{f['recall']:.3f}"
        print(f"  held out {f['held_out']!s:<10} accuracy {f['accuracy']:.3f}  macro F1 {f['macro_f1']:.3f}  "
              f"recall {rec}  false firings {f.get('false')} ({f.get('double')} double, {f.get('wrong_name')} wrong name, "
              f"{f.get('ordinary')} in ordinary movement)")
    e = result.get("events")
    if e:
        from ..evaluation.matching import format_counts
        for line in format_counts(e):
            print(line)
        w = e["ward"]
        print(f"  event categories (Ward et al. 2011, detections never merged): {w['true_correct']} correct, "
              f"{w['true_deleted']} deleted, {w['true_fragmented'] + w['true_frag_merged']} fragmented, "
              f"{w['true_merged'] + w['true_frag_merged']} merged; {w['detected_inserted']} inserted of "
              f"{w['detections']} detections")


def cmd_evaluate(a) -> int:
    from ..evaluation.heldout import cross_validate, evaluate_cases, evaluate_takes
    from ..recognition import ModelError, load_model
    from ..sources import RecordingError
    from ..sources.ts_format import TsFormatError

    if a.model and (a.scheme or a.window_s is not None or a.band_hz):
        return _err("--scheme, --window-s and --band-hz fit models to evaluate; with --model the model's own are used: "
                    "leave them out")
    if a.report:   # before the scoring: a cross-validation can take many minutes
        from ..evaluation.report import REPORT_FILES
        problem = _folder_problem(a.report, REPORT_FILES, a.overwrite, option="--report")
        if problem:
            return _err(problem)
    in_sample = {}   # take path -> "fitted_on" / "tuned_on": the model learnt from it
    step, close = _progress("evaluating")
    try:
        if a.model:
            model = load_model(a.model)
            if a.ts:
                X_list, y, _ = _read_ts_cases(a.ts)
                result = evaluate_cases(model, X_list, y)
                title = f"{a.model} on {a.ts}"
            elif a.recordings:
                recs, _ = _read_takes(a.recordings)
                model.check_takes(recs, a.recordings)   # refused before the in-sample notes below
                in_sample = _in_sample(model, a.recordings, recs)
                _say_in_sample(a.model, in_sample)
                unknown = sorted({iv.label for r in recs for iv in r.intervals} - set(model.classes))
                if unknown:
                    n = sum(iv.label in unknown for r in recs for iv in r.intervals)
                    print(f"drape: {_plural(n, 'labelled performance')} of {', '.join(unknown)}, which the model does "
                          "not know, count as missed", file=sys.stderr)
                result = evaluate_takes(model, recs, progress=step, names=a.recordings)
                title = f"{a.model} on {_plural(len(recs), 'take')}"
            else:
                close()
                return _err("with --model, give take files or --ts TEST.ts to score it on")
        else:
            if not a.recordings or not a.scheme:
                close()
                return _err("give take files and --scheme leave-session-out or leave-wearer-out (or --model M with held-out data)")
            recs, kinds = _read_takes(a.recordings)
            settings = _checked_settings(a, recs, a.scheme)
            result = cross_validate(recs, kinds, a.scheme, a.classifier, settings, progress=step,
                                    **_simulated_others(a, recs))
            title = f"{a.classifier}, {a.scheme}, {_plural(len(recs), 'take')}"
    except (ModelError, RecordingError, TsFormatError, ValueError) as exc:
        close()
        return _err(str(exc))
    close()
    result["in_sample"] = in_sample
    if a.report:
        from ..evaluation.report import write_report
        try:
            page = write_report(result, a.report, title, "drape " + " ".join(sys.argv[1:]))
        except ImportError as exc:
            return _err(str(exc))
        print(f"report: {page}", file=sys.stderr)
    try:
        if a.json:
            import json
            print(json.dumps(_json_ready(result), indent=1, default=str))
        else:
            print(title)
            _print_result(result)
        sys.stdout.flush()
    except BrokenPipeError:  # the reader stopped early (`| head`): what it read is what it wanted
        _stdout_to_devnull()
    return 0


def _stdout_to_devnull() -> None:
    """After a closed pipe: point stdout at /dev/null so Python's flush at exit does not fail again."""
    import os
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, sys.stdout.fileno())
    os.close(devnull)


def _same_file(path, other) -> bool:
    """True when ``path`` and ``other`` name one file (or one path, when it does not exist yet)."""
    try:
        return Path(path).samefile(other)
    except OSError:
        return Path(path).resolve() == Path(other).resolve()


def cmd_tune(a) -> int:
    from ..evaluation.matching import format_counts, hours_to_show
    from ..evaluation.tuning import tune_model
    from ..recognition import ModelError, load_model
    from ..sources import RecordingError, read_recording

    # Storing into the model being tuned is what tune does; only another existing file needs --overwrite.
    problem = _output_problem(a.output or a.model, a.recordings, model=True,
                              replace=a.overwrite or _same_file(a.output or a.model, a.model), option="-o")
    if problem:
        return _err(problem)
    try:
        model = load_model(a.model)
        recs = [read_recording(p) for p in a.recordings]
        model.check_takes(recs, a.recordings)   # refused before the in-sample refusal and notes below
    except (ModelError, RecordingError) as exc:
        return _err(str(exc))
    fitted = [path for path, how in _in_sample(model, a.recordings, recs).items() if "fitted_on" in how]
    if fitted:   # settings chosen, and a "held-out" figure scored, on what the model learnt
        return _err(f"{', '.join(fitted)} {'is one' if len(fitted) == 1 else 'are'} of the takes {a.model} was "
                    f"fitted on: settings chosen on {'it' if len(fitted) == 1 else 'them'} and their figures would "
                    "be in-sample; tune on takes the model was not fitted on. Nothing stored")
    from ..sources import warn_incomplete
    warn_incomplete(a.recordings, recs)
    hours = sum(r.freq_hz.shape[0] / r.rate_hz for r in recs) / 3600
    print(f"replaying {_plural(len(recs), 'take')} ({hours * 60:.1f} min, "
          f"{sum(len(r.intervals) for r in recs)} labelled) ...", flush=True)
    need_h = hours_to_show(a.max_false_per_hour)
    short = hours < need_h   # the counter's rule: these takes cannot show the budget, so nothing is loosened
    step, close = _progress("replaying")
    try:
        result = tune_model(model, recs, max_false_per_hour=a.max_false_per_hour, progress=step, loosen=not short,
                            names=a.recordings)
    finally:
        close()
    print("before, the settings stored in the model, on these takes:")
    for line in format_counts(result.before):
        print("  " + line)
    if result.held_out is None:
        print("held out: none (one take with no gap between labelled gestures to cut it at); "
              "give two or more takes for an honest figure")
    else:
        print(f"held out (settings chosen on the other {result.pieces - 1} of {result.pieces} pieces, "
              f"scored on the one left out; this is the figure to expect):")
        for line in format_counts(result.held_out):
            print("  " + line)
    for g, st in result.settings.items():
        rearm = (f", re-arms below {st['rearm_below']:.2f} for {st['rearm_hops']} hops"
                 if model.kinds.get(g) == "gesture" else "")
        mean = f" averaging ≥ {st['min_confidence']:.2f}" if st.get("min_confidence", 0) > 0 else ""
        print(f"  {g:<16} threshold {st['threshold']:.2f}, {st['agree_k']} of {st['agree_n']} hops{mean}{rearm}")
    if short:
        shown = f"≥ {need_h:.1f} h" if need_h < float("inf") else "no length of take does"
        firings = "false firing" if a.max_false_per_hour == 1 else "false firings"
        print(f"{hours:.2f} h of take cannot show at most {a.max_false_per_hour:g} {firings} per hour "
              f"(that needs {shown}): no class was given settings looser than the model's (a lower threshold, "
              "fewer agreeing hops, a quicker re-arm)"
              + (f"; on these takes alone the search would have loosened {', '.join(result.held_back)}"
                 if result.held_back else "")
              + ". Tune on longer takes to let it loosen them")
    problems = []
    if not result.met:
        problems.append(f"even the strictest settings fire {result.in_sample['false']} false on these takes, "
                        f"over the budget of {result.budget} ({a.max_false_per_hour:g} per hour × {hours:.2f} h)")
    if result.held_out is not None and not result.held_out_met:
        problems.append(f"held out, the chosen settings fired {result.held_out['false']} false in "
                        f"{result.held_out['take_hours']:.2f} h, over the budget of {a.max_false_per_hour:g} per hour")
    out = Path(a.output or a.model)
    if problems and not a.store_anyway:
        for p in problems:
            _report("budget missed: " + p)
        _report(f"nothing stored in {out} (--store-anyway stores the settings all the same); what can help: "
                "more ordinary movement in training, a longer tuning take, or a looser --max-false-per-hour "
                "if the show allows it")
        return 3
    for p in problems:
        _report("budget missed, stored anyway: " + p)
    model.decision = {**model.decision, **result.settings}
    # so that evaluate and replay can say when a figure is on a take these settings were chosen on
    tuned_on = [str(f) for f in model.summary.get("tuned_on") or ()]
    model.summary["tuned_on"] = list(dict.fromkeys([*tuned_on, *(r.fingerprint() for r in recs)]))
    model.save(out)
    print(f"{out}: decision settings stored")
    return 0
