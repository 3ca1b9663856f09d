"""The `drape` command."""

from __future__ import annotations

import argparse
import signal
import sys
import time
from pathlib import Path

VERBS = {
    "demo": "run the whole live chain on the built-in simulated jacket, sending OSC",
    "start": "run the live chain from a garment on a serial port, as a foreground daemon",
    "fit": "train a model from take files",
    "replay": "run a take through the live chain as fast as possible and list its events",
    "simulate": "write a take of the simulated jacket (for training and trying things out)",
    "check": "validate a mapping file against a model and print its rules",
    "evaluate": "estimate accuracy on new sessions or unseen wearers, or score a model on held-out data",
    "bench": "print per-hop inference time, replay speed and fit time of each classifier",
}


def _err(msg: str) -> int:
    print(f"drape: {msg}", file=sys.stderr)
    return 2


def _print_event(e, timing=None) -> None:
    extra = f"  held {e.duration_s:5.2f} s" if e.kind == "left" else ""
    lat = f"  latency {timing.send_ms:5.2f} ms" if timing else ""
    print(f"{e.t_s:9.2f} s  {e.gesture:<16} {e.kind:<8} confidence {e.confidence:.2f}{lat}{extra}", flush=True)


def _stop_on_signals(flag):
    def handler(signum, _frame):
        flag.set(signal.Signals(signum).name)
    for s in (signal.SIGINT, signal.SIGTERM):
        signal.signal(s, handler)


def _default_mapping() -> Path | None:
    for p in (Path.cwd() / "mappings" / "demo.toml", Path(__file__).resolve().parent.parent / "mappings" / "demo.toml"):
        if p.is_file():
            return p
    return None


def _open_outputs(mapping):
    """Each destination behind its own queue; one that cannot open is reported and left out."""
    from .outputs import OutputUnavailable, open_output
    outputs = {}
    for name, d in mapping.destinations.items():
        try:
            outputs[name] = open_output(d)
        except (OutputUnavailable, OSError) as exc:
            print(f"drape: destination {name!r} left out: {exc}", file=sys.stderr, flush=True)
    return outputs


def _close_outputs(outputs) -> None:
    """Close every output (each releases what it holds) and report what it sent and dropped."""
    for name, o in outputs.items():
        o.close()
        s = o.stats
        err = f"; last error: {s.last_error}" if s.last_error else ""
        print(f"drape: output {name}: sent {s.sent}, dropped {s.dropped}{err}", file=sys.stderr, flush=True)


def train_simulated(seed: int, wearer: int, repetitions: int = 8, sessions: int = 2, null_s: float = 180.0):
    """A model for one simulated wearer, trained the way a user would on a new wearer:
    each gesture ``repetitions`` times per session, then ``null_s`` of ordinary movement."""
    import numpy as np
    from .garment import GESTURES, Jacket, training_script
    from .recognition import fit_linear
    from .sources import Recording

    takes = []
    for session in range(sessions):
        jacket = Jacket(seed=seed, wearer=wearer, session=session)
        rng = np.random.default_rng([seed, wearer, session, 11])
        script = training_script(rng, repetitions)
        script += [(activity, null_s / 3) for activity in ("standing", "walking", "fidgeting")]
        takes.append(Recording.from_take(jacket.perform(script), GESTURES))
    return fit_linear(takes, dict(GESTURES))


def cmd_demo(a) -> int:
    from .mapping import MappingError, load_mapping
    from .service import Pipeline, StopFlag, run
    from .sources.simulated import SimulatedSource

    mapping_path = Path(a.mapping) if a.mapping else _default_mapping()
    if mapping_path is None:
        return _err("no mappings/demo.toml here; run from the drape checkout or pass --mapping FILE")
    print(f"training on simulated wearer {a.wearer} (seed {a.seed}) ...", flush=True)
    t0 = time.monotonic()
    model = train_simulated(a.seed, a.wearer)
    print(f"trained in {time.monotonic() - t0:.1f} s: {len(model.classes) - 1} gestures, "
          f"cross-validated window accuracy {model.summary['cross_validated_window_accuracy']:.2f}", flush=True)
    try:
        mapping = load_mapping(mapping_path, model.classes, model.kinds)
    except MappingError as exc:
        return _err(f"mapping has errors:\n{exc}")
    outputs = _open_outputs(mapping)
    for name, d in mapping.destinations.items():
        print(f"sending OSC to {d.host}:{d.port} ({name}) from {mapping_path}", flush=True)
    source = SimulatedSource(seed=a.seed + 1, wearer=a.wearer, session=2, realtime=not a.fast, duration_s=a.for_s)
    stop = StopFlag()
    _stop_on_signals(stop)
    print("the simulated wearer is performing; Ctrl-C stops" + (f" (or after {a.for_s:g} s)" if a.for_s else ""), flush=True)
    try:
        stats = run(source, Pipeline(model, mapping, "demo"), outputs, stop, on_event=_print_event)
    finally:
        _close_outputs(outputs)
    performed = [iv for iv in source.truth if iv.end_s <= stats.samples / source.rate_hz]
    print(f"stopped{' (' + stop.reason + ')' if stop.reason else ''}: {stats.samples / source.rate_hz:.1f} s of stream, "
          f"{len(performed)} gestures performed, {stats.events} events", flush=True)
    return 0


def cmd_start(a) -> int:
    from .mapping import MappingError, load_mapping
    from .recognition import ModelError, load_model
    from .service import Pipeline, StopFlag, run
    from .service.config import ConfigError, load_config
    from .sources.base import SourceGone
    from .sources.serialport import SerialTextSource

    try:
        cfg = load_config(a.config)
        model = load_model(cfg.model)
        mapping = load_mapping(cfg.mapping, model.classes, model.kinds) if cfg.mapping else None
    except (ConfigError, ModelError, MappingError) as exc:
        return _err(str(exc))
    try:
        source = SerialTextSource(cfg.port, model.n_channels, model.rate_hz, cfg.baud, model.channel_names)
    except SourceGone as exc:
        return _err(str(exc))
    outputs = _open_outputs(mapping) if mapping else {}
    stop = StopFlag()
    _stop_on_signals(stop)
    print(f"drape: {cfg.name} on {cfg.port}, model {cfg.model.name} ({len(model.classes) - 1} gestures)", file=sys.stderr, flush=True)
    try:
        run(source, Pipeline(model, mapping, cfg.name), outputs, stop, on_event=_print_event)
    except SourceGone as exc:
        print(f"drape: {exc}", file=sys.stderr)
        return 1
    finally:
        source.close()
        _close_outputs(outputs)
        c = source.counters()
        print(f"drape: stopped; lines good {c['good']}, skipped {c['malformed'] + c['wrong_count'] + c['out_of_range']} "
              f"(malformed {c['malformed']}, wrong count {c['wrong_count']}, out of range {c['out_of_range']})",
              file=sys.stderr, flush=True)
    return 0


def _progress(desc: str):
    """A progress callback (done, total) drawing a tqdm bar on stderr, and its closer.

    Without tqdm (the ``progress`` extra) the work runs without a bar.
    """
    try:
        from tqdm import tqdm
    except ImportError:
        return None, lambda: None
    bar = tqdm(desc=desc, file=sys.stderr, leave=False, disable=None, unit="step")

    def step(done: int, total: int) -> None:
        bar.total = total
        bar.n = done
        bar.refresh()
    return step, bar.close


def _read_takes(paths):
    from .sources import read_recording
    recs = [read_recording(p) for p in paths]
    kinds = {}
    for r in recs:
        kinds.update(r.kinds)
    return recs, kinds


def _read_ts_cases(path):
    from .sources.ts_format import TsFormatError, read_ts
    try:
        return read_ts(path)
    except FileNotFoundError:
        raise TsFormatError(f"{path}: no such .ts file") from None


def cmd_fit(a) -> int:
    from .recognition import TrainingSettings, fit_cases, fit_recordings
    from .sources import RecordingError
    from .sources.ts_format import TsFormatError, stack_cases

    if bool(a.recordings) == bool(a.ts):
        return _err("give take files or --ts TRAIN.ts (one of the two)")
    step, close = _progress(f"fitting {a.classifier}")
    try:
        if a.ts:
            X_list, y, meta = _read_ts_cases(a.ts)
            X = stack_cases(X_list)
            classes = sorted(set(y.tolist()))
            if step:
                step(0, 1)
            model = fit_cases(a.classifier, X, y, classes)
            source = f"{len(y)} cases of {a.ts}"
        else:
            recs, kinds = _read_takes(a.recordings)
            model = fit_recordings(a.classifier, recs, kinds, TrainingSettings(window_s=a.window_s, hop_s=a.hop_s),
                                   progress=step)
            source = f"{len(recs)} takes"
    except (RecordingError, TsFormatError, ValueError) as exc:
        close()
        return _err(str(exc))
    close()
    model.save(a.output)
    s = model.summary
    key = next((k for k in ("cross_validated_window_accuracy", "held_out_accuracy", "leave_one_out_accuracy") if k in s), None)
    estimate = f"{key.replace('_', ' ')} {s[key]:.3f}" if key else "no held-out estimate (one take)"
    cal = f", calibration error {s['calibration_error']:.3f}" if "calibration_error" in s else ""
    print(f"{a.output}: {a.classifier}, {len(model.classes) - 1} classes from {source}; {estimate}{cal}")
    return 0


def _json_ready(result: dict) -> dict:
    return {k: v for k, v in result.items() if k != "takes"}


def _print_result(result: dict) -> None:
    print(f"accuracy {result['accuracy']:.3f}, macro F1 {result['macro_f1']:.3f} over {result['windows']} windows")
    for c, v in result["per_class"].items():
        print(f"  {c:<16} precision {v['precision']:.3f}  recall {v['recall']:.3f}  F1 {v['f1']:.3f}  ({v['support']})")
    for f in result.get("folds", []):
        print(f"  held out {f['held_out']!s:<10} accuracy {f['accuracy']:.3f}  macro F1 {f['macro_f1']:.3f}  "
              f"event recall {f['event_recall']}  false triggers/h {f['false_triggers_per_null_hour']}")
    e = result.get("events")
    if e:
        print(f"events: {e['true_events']} performed, {e['true_correct']} correct, {e['true_deleted']} deleted, "
              f"{e['true_fragmented'] + e['true_frag_merged']} fragmented, {e['true_merged'] + e['true_frag_merged']} merged; "
              f"{e['detections']} decided, {e['detected_inserted']} inserted (false triggers)")
        lat = e["latency_s"]
        print(f"event recall {e['event_recall']}, precision {e['event_precision']}, "
              f"false triggers {e['false_triggers_per_null_hour']} per hour of null activity ({e['null_hours']:.2f} h); "
              f"latency gesture end → event median {lat['median']} s, p95 {lat['p95']} s")


def cmd_evaluate(a) -> int:
    from .evaluation.heldout import cross_validate, evaluate_cases, evaluate_takes
    from .recognition import ModelError, TrainingSettings, load_model
    from .sources import RecordingError
    from .sources.ts_format import TsFormatError

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
                for r in recs:
                    model.check_source(len(r.channel_names), r.rate_hz)
                result = evaluate_takes(model, recs, progress=step)
                title = f"{a.model} on {len(recs)} takes"
            else:
                close()
                return _err("with --model, give take files or --ts TEST.ts to score it on")
        else:
            if not a.recordings or not a.scheme:
                close()
                return _err("give take files and --scheme leave-session-out or leave-wearer-out (or --model M with held-out data)")
            recs, kinds = _read_takes(a.recordings)
            result = cross_validate(recs, kinds, a.scheme, a.classifier,
                                    TrainingSettings(window_s=a.window_s, hop_s=a.hop_s), progress=step)
            title = f"{a.classifier}, {a.scheme}, {len(recs)} takes"
    except (ModelError, RecordingError, TsFormatError, ValueError) as exc:
        close()
        return _err(str(exc))
    close()
    if a.report:
        from .evaluation.report import write_report
        try:
            page = write_report(result, a.report, title, "drape " + " ".join(sys.argv[1:]))
        except ImportError as exc:
            return _err(str(exc))
        print(f"report: {page}", file=sys.stderr)
    if a.json:
        import json
        print(json.dumps(_json_ready(result), indent=1, default=str))
    else:
        print(title)
        _print_result(result)
    return 0


def cmd_bench(a) -> int:
    from .evaluation.bench import run_all
    run_all(channels=tuple(a.channels), hops=a.hops, replay_s=a.replay_s, fit_minutes=a.fit_minutes,
            classifiers=tuple(a.classifier or ("linear", "minirocket", "dtw")))
    return 0


def cmd_replay(a) -> int:
    from .mapping import MappingError, load_mapping
    from .recognition import ModelError, load_model
    from .service import Pipeline
    from .sources import RecordingError, read_recording

    try:
        model = load_model(a.model)
        rec = read_recording(a.recording)
        model.check_source(len(rec.channel_names), rec.rate_hz)
        mapping = load_mapping(a.mapping, model.classes, model.kinds) if a.mapping else None
    except (ModelError, RecordingError, MappingError) as exc:
        return _err(str(exc))
    events = replay_events(rec, model, mapping)
    for e in events:
        _print_event(e)
        if mapping:
            for d in mapping.dispatches(e):
                print(f"{'':14}→ {d.destination}: {d.message.address} {' '.join(map(str, d.message.args))}")
    return 0


def replay_events(rec, model, mapping=None, block_s: float = 0.1):
    """Events the live chain decides over a whole take (see ``bridge.service.replay_events``)."""
    from .service import replay_events as replay
    return replay(rec, model, mapping, block_s)


def cmd_simulate(a) -> int:
    import numpy as np
    from .garment import GESTURES, Jacket, random_script, training_script
    from .sources import Recording, write_recording

    jacket = Jacket(seed=a.seed, wearer=a.wearer, session=a.session)
    rng = np.random.default_rng([a.seed, a.wearer, a.session, 3])
    # Training repetitions, then ordinary movement (null activity), then a random performance.
    script = training_script(rng, a.repetitions) if a.repetitions else []
    script += [(activity, a.null_s / 3) for activity in ("standing", "walking", "fidgeting")] if a.null_s else []
    if a.duration_s or not script:
        script += random_script(rng, a.duration_s or 120.0)
    take = jacket.perform(script)
    write_recording(a.out, Recording.from_take(take, GESTURES))
    print(f"{a.out}: {take.t_s.size / take.rate_hz:.1f} s, {len(take.intervals)} labelled gestures, "
          f"{len(take.channel_names)} channels at {take.rate_hz:g} Hz")
    return 0


def cmd_check(a) -> int:
    from .mapping import MappingError, load_mapping
    from .recognition import ModelError, load_model

    try:
        model = load_model(a.model) if a.model else None
        mapping = load_mapping(a.file, model.classes if model else None, model.kinds if model else None)
    except (ModelError, MappingError) as exc:
        return _err(str(exc))
    print(f"{a.file}: OK, {len(mapping.rules)} rules")
    for r in mapping.rules:
        d = mapping.destinations[r.to]
        print(f"  line {r.line:<4} {r.gesture:<16} on {r.on:<8} → {r.to} ({d.host}:{d.port}) {r.address} {list(r.args)}")
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="drape", description="Postures and gestures from textile antennas, as live control messages.")
    sub = p.add_subparsers(dest="verb", metavar="VERB")
    d = sub.add_parser("demo", help=VERBS["demo"], description=VERBS["demo"])
    d.add_argument("--for", dest="for_s", type=float, default=None, metavar="SECONDS", help="stop after this many seconds")
    d.add_argument("--mapping", help="mapping file (default mappings/demo.toml)")
    d.add_argument("--seed", type=int, default=1)
    d.add_argument("--wearer", type=int, default=0)
    d.add_argument("--fast", action="store_true", help="run as fast as possible instead of in real time")
    d.set_defaults(func=cmd_demo)
    s = sub.add_parser("start", help=VERBS["start"], description=VERBS["start"])
    s.add_argument("--config", required=True, help="daemon config file (TOML)")
    s.set_defaults(func=cmd_start)
    from .recognition.classifiers import CLASSIFIERS
    f = sub.add_parser("fit", help=VERBS["fit"], description=VERBS["fit"])
    f.add_argument("recordings", nargs="*", metavar="TAKE")
    f.add_argument("--ts", metavar="TRAIN.ts", help="train on the cases of a .ts file instead of takes")
    f.add_argument("--classifier", choices=tuple(CLASSIFIERS), default="linear",
                   help="linear (default, tiny), minirocket (convolution features) or dtw (few-shot templates)")
    f.add_argument("-o", "--output", required=True, help="model file to write (.npz)")
    f.add_argument("--window-s", type=float, default=2.0, help="window length, s")
    f.add_argument("--hop-s", type=float, default=0.1, help="hop between windows, s")
    f.set_defaults(func=cmd_fit)
    e = sub.add_parser("evaluate", help=VERBS["evaluate"], description=VERBS["evaluate"])
    e.add_argument("recordings", nargs="*", metavar="TAKE")
    e.add_argument("--scheme", choices=("leave-session-out", "leave-wearer-out"),
                   help="hold out each session (new recordings of known wearers) or each wearer (unseen wearers)")
    e.add_argument("--classifier", choices=tuple(CLASSIFIERS), default="linear")
    e.add_argument("--model", help="score this model on held-out takes or --ts cases instead")
    e.add_argument("--ts", metavar="TEST.ts", help="cases to score --model on (resampled to its window)")
    e.add_argument("--json", action="store_true", help="print a machine-readable summary")
    e.add_argument("--report", metavar="DIR", help="write an HTML report with pictures into DIR (needs matplotlib)")
    e.add_argument("--window-s", type=float, default=2.0, help="window length, s")
    e.add_argument("--hop-s", type=float, default=0.1, help="hop between windows, s")
    e.set_defaults(func=cmd_evaluate)
    b = sub.add_parser("bench", help=VERBS["bench"], description=VERBS["bench"])
    b.add_argument("--channels", type=int, nargs="+", default=[4, 8])
    b.add_argument("--hops", type=int, default=200, help="hops timed per classifier and channel count")
    b.add_argument("--replay-s", type=float, default=300.0, help="length of the replayed take, s (0 to skip)")
    b.add_argument("--fit-minutes", type=float, default=30.0, help="minutes of 4-channel data to time fitting on (0 to skip)")
    b.add_argument("--classifier", action="append", choices=tuple(CLASSIFIERS), help="only this one (repeatable)")
    b.set_defaults(func=cmd_bench)
    r = sub.add_parser("replay", help=VERBS["replay"], description=VERBS["replay"])
    r.add_argument("recording", metavar="TAKE")
    r.add_argument("--model", required=True)
    r.add_argument("--mapping")
    r.set_defaults(func=cmd_replay)
    m = sub.add_parser("simulate", help=VERBS["simulate"], description=VERBS["simulate"])
    m.add_argument("--out", required=True, help="take file to write")
    m.add_argument("--duration-s", type=float, default=None,
                   help="length of a random performance, s (default 120 when nothing else is asked for)")
    m.add_argument("--repetitions", type=int, default=0, help="each gesture this many times first (a training take)")
    m.add_argument("--null-s", type=float, default=0.0, help="then this long of ordinary movement (standing, walking, fidgeting), s")
    m.add_argument("--seed", type=int, default=0)
    m.add_argument("--wearer", type=int, default=0)
    m.add_argument("--session", type=int, default=0)
    m.set_defaults(func=cmd_simulate)
    c = sub.add_parser("check", help=VERBS["check"], description=VERBS["check"])
    c.add_argument("file", metavar="MAPPING")
    c.add_argument("--model")
    c.set_defaults(func=cmd_check)
    return p


def main(argv=None) -> int:
    parser = build_parser()
    a = parser.parse_args(argv)
    if not getattr(a, "func", None):
        parser.print_help()
        return 2
    return a.func(a)


if __name__ == "__main__":
    sys.exit(main())
