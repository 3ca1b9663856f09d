"""The tool verbs: bench (speed, live, soak, fuzz, spotting)."""

from __future__ import annotations

from pathlib import Path

from .common import _err, _folder_problem, _output_problem


def cmd_bench(a) -> int:
    from ..evaluation.bench import bench_continuous, run_all
    if a.continuous_only:
        c = bench_continuous()
        print(" ".join(f"{k} {v}" for k, v in c.items()))
        return 0
    if a.live:
        from ..evaluation.livebench import bench_live
        if a.live_s <= 0 or a.live_garments < 1:
            return _err("--live-s must be positive and --live-garments at least 1")
        bench_live(a.live_s, garments=a.live_garments)
        return 0
    if a.soak is not None:
        return _bench_soak(a)
    if a.fuzz is not None:
        return _bench_fuzz(a)
    if a.spotting:
        return _bench_spotting(a)
    run_all(channels=tuple(a.channels), hops=a.hops, replay_s=a.replay_s, fit_minutes=a.fit_minutes,
            classifiers=tuple(a.classifier or ("linear", "minirocket", "dtw")), compare=a.compare,
            batch_windows=a.batch_windows)
    return 0


def _bench_spotting(a) -> int:
    """`drape bench --spotting`: the spotting protocol on a simulated troupe; prints its table."""
    import json

    from ..evaluation.matching import format_by_name
    from ..evaluation.spotting import Protocol, format_development, format_table, run_development, run_protocol
    if (a.spotting_wearers < 2 or a.spotting_score_min <= 0 or a.spotting_prior_reps < 0
            or a.spotting_prior < 0 or a.spotting_prior_cues < 0 or a.spotting_checkin < 0
            or not a.spotting_checkin_s >= 0):
        return _err("--spotting-wearers must be at least 2, --spotting-score-min positive, and "
                    "--spotting-prior, --spotting-prior-cues, --spotting-prior-reps, --spotting-checkin and "
                    "--spotting-checkin-s 0 or more")
    if not 1 <= a.spotting_unseen <= a.spotting_wearers:
        return _err(f"--spotting-unseen must be 1 to --spotting-wearers ({a.spotting_wearers}), not {a.spotting_unseen}")
    if a.spotting_three_dressings and (a.spotting_checkin or a.spotting_development):
        return _err("--spotting-three-dressings is a workflow of its own: not with --spotting-checkin or "
                    "--spotting-development")
    if a.spotting_checkin and a.spotting_development:
        return _err("--spotting-checkin is for the protocol's scored sessions; the development sessions have none")
    if a.spotting_json:   # asked now: the protocol runs for tens of minutes before it writes
        problem = _output_problem(a.spotting_json, replace=a.overwrite, option="--spotting-json")
        if problem:
            return _err(problem)
    from ..recognition.classifiers import DEFAULT_CLASSIFIER
    classifier = (a.classifier or [DEFAULT_CLASSIFIER])[0]
    garment = ""
    if a.spotting_layout:
        from ..garment import LayoutError, default_layout, load_layout
        try:
            layout = load_layout(a.spotting_layout)
        except LayoutError as exc:
            return _err(str(exc))
        built_in = default_layout().channel_names
        if (layout.channel_names != built_in and classifier != "linear"
                and (a.spotting_prior or (a.spotting_prior_cues and a.spotting_prior_reps))):
            return _err(f"{a.spotting_layout}: its cables ({', '.join(layout.channel_names)}) are not the built-in "
                        f"jacket's ({', '.join(built_in)}) that the simulated people wear; name them so, or add "
                        "--spotting-prior 0 --spotting-prior-cues 0")
        garment = Path(a.spotting_layout).read_text(encoding="utf-8")
    # linear takes no ordinary-movement takes (drape fit refuses --ordinary for it)
    p = Protocol(wearers=a.spotting_wearers, seed=a.spotting_seed, score_null_s=60.0 * a.spotting_score_min,
                 prior_wearers=0 if classifier == "linear" else a.spotting_prior,
                 prior_cue_people=0 if classifier == "linear" else a.spotting_prior_cues, prior_reps=a.spotting_prior_reps,
                 checkin_reps=a.spotting_checkin, checkin_null_s=a.spotting_checkin_s, unseen_wearers=a.spotting_unseen,
                 three_dressings=a.spotting_three_dressings, garment=garment)
    cache = Path(a.spotting_cache or f"drape-spotting-{a.spotting_seed}-{a.spotting_wearers}-{a.spotting_score_min:g}")
    print(f"spotting protocol, {classifier}: {p.wearers} simulated wearers, full vocabulary; fit on 2 sessions "
          f"({p.fit_reps} repetitions + {p.fit_null_s / 60:g} min ordinary movement each), "
          f"{'fit a third as a third dressing' if p.three_dressings else 'tune on a third'} "
          f"({p.tune_reps} + {p.tune_null_s / 60:g} min), score a fourth ({p.score_reps} + {p.score_null_s / 60:g} min); "
          f"takes cached in {cache}"
          + (f"; the wearers' garment: {layout.name} ({a.spotting_layout})" if garment else "")
          + (f"; every fit adds {p.prior_s / 60:g} min of ordinary movement of each of {p.prior_wearers} other "
             "simulated people" if p.prior_wearers else "")
          + (f"; every fit adds {p.prior_reps} performance(s) of each gesture by each of {p.prior_cue_people} other "
             "simulated people" if p.prior_reps and p.prior_cue_people else "")
          + (f"; every fit of a wearer adds their check-in take, dressed for the scored session "
             f"({p.checkin_reps} repetitions + {p.checkin_null_s / 60:g} min)" if p.checkin_reps else ""), flush=True)
    run, table = (run_development, format_development) if a.spotting_development else (run_protocol, format_table)
    if a.spotting_development:
        print(f"development sessions instead of tune and score: {p.dev_reps} repetitions + "
              f"{p.dev_null_s / 60:g} min each, the default gate", flush=True)
    try:
        result = run(p, classifier, cache, progress=lambda m: print("  " + m, flush=True))
    except ValueError as exc:
        return _err(str(exc))
    print("\n".join(table(result)))
    named = result["pooled"] if a.spotting_development else result["known_default"]
    print("\nby name, known wearers at the default gate (which cues to change):")
    print("\n".join(format_by_name(named)))
    if a.spotting_json:
        Path(a.spotting_json).write_text(json.dumps(result, indent=1, default=str), encoding="utf-8")
        print(f"{a.spotting_json}: written")
    return 0


def _bench_soak(a) -> int:
    """`drape bench --soak HOURS`: simulated hours through the live loop, then a replay check."""
    from ..evaluation.soak import soak
    from ..recognition import ModelError, load_model
    if a.soak <= 0:
        return _err("--soak takes a positive number of simulated hours, e.g. 2")
    if a.soak_out:   # the files soak() writes there, asked before the hours of stream
        problem = _folder_problem(a.soak_out, ["soak-take.csv", "soak-live-events.txt"], a.overwrite,
                                  option="--soak-out")
        if problem:
            return _err(problem)
    try:
        model = load_model(a.soak_model) if a.soak_model else None
    except ModelError as exc:
        return _err(str(exc))
    print(f"soak: {a.soak:g} simulated hours through the live loop (blocks of 10-50 ms, OSC to loopback, take captured)",
          flush=True)
    if a.soak_out:  # made here, so a bad folder is named before the hours of stream, not after
        try:
            Path(a.soak_out).mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            return _err(f"--soak-out {a.soak_out}: cannot make this folder ({exc.strerror or exc})")
    r = soak(a.soak, model=model, out_dir=a.soak_out, heap=a.soak_heap, report=lambda t: print(t, flush=True))
    for line in r.lines():
        print(line)
    c = r.comparison
    return 0 if c["only_live"] == c["only_replay"] == c["doubled_live"] == 0 and r.dropped == 0 else 1


def _bench_fuzz(a) -> int:
    """`drape bench --fuzz N`: N mutated inputs into each parser; crashes counted by type."""
    from ..evaluation.fuzz import TARGETS, fuzz
    targets = a.fuzz_target or TARGETS
    if a.fuzz_crashes:
        # a crash file is named TARGET-EXCEPTION: which will be written is not known before the run,
        # so any such file of a target about to run would be written over, or mixed with this run's
        folder = Path(a.fuzz_crashes)
        there = (sorted(p.name for t in targets for p in folder.glob(f"{t}-*") if p.suffix in (".bin", ".txt"))
                 if folder.is_dir() else [])
        problem = _folder_problem(folder, there, a.overwrite, option="--fuzz-crashes")
        if problem:
            return _err(problem)
    crashes = 0
    for target in targets:
        r = fuzz(target, a.fuzz, seed=a.fuzz_seed, crash_dir=a.fuzz_crashes, report=lambda t: print(t, flush=True),
                 time_limit_s=a.fuzz_limit_s)
        print(r.line(), flush=True)
        crashes += sum(r.crashes.values()) + sum(r.violations.values())
    if crashes and a.fuzz_crashes:
        print(f"first input of each crash kind saved in {a.fuzz_crashes}")
    return 1 if crashes else 0
