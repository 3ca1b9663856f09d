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
    "simulate": "write takes of the simulated jacket, or serve it as a serial port (no hardware needed)",
    "check": "validate a mapping file against a model and print its rules",
    "evaluate": "estimate accuracy on new sessions or unseen wearers, or score a model on held-out data",
    "tune": "choose each class's threshold, debounce and re-arm on takes the model was not fitted on; "
            "report the held-out figure; store them in the model",
    "bench": "print speed figures: classifier hops, replay speed, fit time, a continuous control's latency and jitter",
    "range": "capture a wearer's level range (relaxed, then closest) for continuous controls",
    "ports": "list serial ports with their USB ids and serial numbers",
    "capture": "record a new wearer: prompts each gesture in turn and saves a labelled take as it goes",
    "watch": "a live terminal view of a running daemon, from its status stream",
    "send": "send a command to a running daemon's control port (arm, disarm, panic, layer, ...)",
}


def _err(msg: str) -> int:
    print(f"drape: {msg}", file=sys.stderr)
    return 2


def _line(text: str) -> None:
    """One line to standard output for the live loops. A reader that went away (`| head`,
    a dead `tee`) must not stop the show: printing stops, stderr says so once, and fd 1
    points to /dev/null from then on (so Python's own flush at exit stays quiet too)."""
    try:
        print(text, flush=True)
    except (BrokenPipeError, ValueError, OSError) as exc:
        import os
        try:
            null = os.open(os.devnull, os.O_WRONLY)
            os.dup2(null, sys.stdout.fileno())
            os.close(null)
        except (OSError, ValueError):
            sys.stdout = open(os.devnull, "w")
        _report(f"standard output closed ({type(exc).__name__}); no more event lines, the show goes on")


def _print_event(e, timing=None) -> None:
    if e.kind == "control":
        return  # many per second: their messages are the output
    if e.kind in ("armed", "disarmed", "panic", "layer"):
        from .service.control import printable  # a layer name can come from the network
        _line(f"{e.t_s:9.2f} s  ** {e.kind}{' ' + printable(e.detail) if e.detail else ''}")
        return
    extra = f"  held {e.duration_s:5.2f} s" if e.kind == "left" else ""
    if timing is not None and timing.disarmed:
        lat = "  disarmed: not sent"
    else:
        lat = f"  latency {timing.send_ms:5.2f} ms" if timing else ""
    _line(f"{e.t_s:9.2f} s  {e.gesture:<16} {e.kind:<8} confidence {e.confidence:.2f}{lat}{extra}")


def _stop_on_signals(flag, reload: bool = False):
    """Every signal that ends the process only sets the flag: the loop then lets go of
    every key and note and puts lights to their safe look before it exits. SIGHUP (a
    closed terminal, a dropped SSH session) reloads the mapping with ``reload``, and
    stops cleanly otherwise; SIGUSR1 panics."""
    def handler(signum, _frame):
        flag.set(signal.Signals(signum).name)
    ending = ["SIGINT", "SIGTERM", "SIGQUIT"] + ([] if reload else ["SIGHUP"])
    for name in ending:
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), handler)
    if reload and hasattr(signal, "SIGHUP"):
        signal.signal(signal.SIGHUP, lambda *_: flag.request_reload())
    if hasattr(signal, "SIGUSR1"):  # panic: releases every output (see also `drape send panic`)
        signal.signal(signal.SIGUSR1, lambda *_: flag.request_panic())


def _write_pid_file(path) -> None:
    """Write this process's id to ``path`` (for `kill -USR1 "$(cat PATH)"`, which can hit no
    other process), and remove it at exit if it still holds our id."""
    import atexit
    import os
    if not path:
        return
    p = Path(path).expanduser()
    p.write_text(f"{os.getpid()}\n", encoding="ascii")

    def remove():
        try:
            if p.read_text(encoding="ascii").strip() == str(os.getpid()):
                p.unlink()
        except OSError:
            pass
    atexit.register(remove)


def _report(text: str) -> None:
    try:
        print(f"drape: {text}", file=sys.stderr, flush=True)
    except (OSError, ValueError):  # stderr gone too (a closed terminal): keep running
        pass


def _inbox(listen):
    """The control-message inbox for --listen HOST:PORT, or None."""
    if not listen:
        return None
    from .service.control import ControlInbox, parse_host_port
    inbox = ControlInbox(*parse_host_port(listen))
    _report(f"control messages (/drape/arm, /drape/disarm, /drape/panic, /drape/layer NAME) on "
            f"{inbox.address[0]}:{inbox.address[1]}; they never press keys")
    return inbox


def _open_one(d):
    from .outputs import open_output
    return open_output(d)


def _default_mapping() -> Path:
    """mappings/demo.toml in the current folder (a checkout, or the user's own copy), else the shipped one."""
    here = Path.cwd() / "mappings" / "demo.toml"
    if here.is_file():
        return here
    from .examples_data import example_path
    return example_path("demo.toml")


def _open_outputs(mapping, open_fn=None):
    """Each destination behind its own queue; one that cannot open is reported and left out."""
    from .outputs import OutputUnavailable, open_output
    outputs = {}
    for name, d in mapping.destinations.items():
        try:
            outputs[name] = (open_fn or open_output)(d)
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


def cmd_demo(a) -> int:
    import numpy as np
    from .evaluation.narration import Narrator
    from .garment import GESTURES, tour_script
    from .mapping import MappingError, MappingWatcher
    from .mapping.rules import describe_destination
    from .recognition import ModelError
    from .service import Pipeline, StopFlag, run
    from .sources.simulated import SimulatedSource

    mapping_path = Path(a.mapping) if a.mapping else _default_mapping()
    # The simulated wearer first performs each gesture once (a tour), then at random.
    tour = list(GESTURES)
    source = SimulatedSource(seed=a.seed + 1, wearer=a.wearer, session=2, realtime=not a.fast, duration_s=a.for_s,
                             first=tour_script(np.random.default_rng([a.seed, a.wearer, 23]), tour))
    if a.model:  # a model of the simulated jacket saved before: no training wait
        from .recognition import load_model
        try:
            model = load_model(a.model)
            model.check_source(len(source.channel_names), source.rate_hz)
            if tuple(model.channel_names) != source.channel_names:
                raise ModelError(f"{a.model} was trained on channels {', '.join(model.channel_names)}; the simulated "
                                 f"jacket has {', '.join(source.channel_names)}: use a model of the simulated jacket "
                                 f"(or leave out --model to train one)")
        except ModelError as exc:
            return _err(str(exc))
        print(f"model {a.model}: {len(model.classes) - 1} gestures", flush=True)
    else:
        print(f"training on simulated wearer {a.wearer} (seed {a.seed}) ...", flush=True)
        t0 = time.monotonic()
        from .evaluation.simulated import train_simulated
        model = train_simulated(a.seed, a.wearer)
        print(f"trained in {time.monotonic() - t0:.1f} s: {len(model.classes) - 1} gestures, "
              f"cross-validated window accuracy {model.summary['cross_validated_window_accuracy']:.2f}", flush=True)
    try:
        watcher = MappingWatcher(mapping_path, model.classes, model.kinds, model.channel_names)
        inbox = _inbox(a.listen)
    except MappingError as exc:
        return _err(f"mapping has errors:\n{exc}")
    except (ValueError, OSError) as exc:
        return _err(f"--listen: {exc}")
    mapping = watcher.mapping
    stop = StopFlag()
    _stop_on_signals(stop, reload=True)  # before anything is held: every ending lets go
    try:
        _write_pid_file(a.pid_file)
    except OSError as exc:
        return _err(f"--pid-file: {exc}")
    outputs = _open_outputs(mapping)
    for name, d in mapping.destinations.items():
        if name in outputs:  # one that could not open was reported as left out
            print(f"sending to {describe_destination(d)} ({name}) from {mapping_path}", flush=True)
    if a.mapping or mapping_path.parent.name == "mappings":
        print(f"edit {mapping_path} while this runs: saved changes take effect at once", flush=True)
    else:  # the copy shipped inside the package: not the file to edit
        print(f"mapping: the built-in demo mapping; copy {mapping_path} to a folder of yours, edit it and pass "
              f"--mapping FILE (saved changes take effect at once)", flush=True)
    narrator = Narrator(source.truth, say=_line)
    source.on_read = narrator.on_read

    def on_event(e, timing=None):
        if not narrator.on_event(e):
            _print_event(e, timing)

    print(f"the simulated wearer is performing: each of the {len(tour)} demo gestures once (about 50 s), then at "
          f"random; Ctrl-C stops" + (f" (or after {a.for_s:g} s)" if a.for_s else ""), flush=True)
    try:
        stats = run(source, Pipeline(model, mapping, "demo"), outputs, stop, on_event=on_event,
                    watcher=watcher, inbox=inbox, open_fn=_open_one, report=_report)
    finally:
        _close_outputs(outputs)
        if inbox:
            inbox.close()
    end_s = stats.samples / source.rate_hz
    t = narrator.summary(end_s)
    under_way = f"; {t['open']} still under way at the stop, not counted" if t["open"] else ""
    kinds = (f" ({t['doubles']} double, {t['wrong_name']} wrong name, {t['ordinary']} in ordinary movement)"
             if t["false_triggers"] and {"doubles", "wrong_name", "ordinary"} <= set(t) else "")
    _line(f"stopped{' (' + stop.reason + ')' if stop.reason else ''}: {end_s:.1f} s of stream; "
          f"{_plural(t['performed'], 'gesture')} performed, {t['recognised']} recognised, {t['missed']} missed, "
          f"{_plural(t['false_triggers'], 'false trigger')}{kinds}{under_way}")
    return 0


def _uses_service(path) -> bool:
    """Several garments, or the service's own tables: the service loop (bridge.service.daemon)."""
    import tomllib
    try:
        doc = tomllib.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(doc.get("garment"), list) or any(k in doc for k in ("control", "status", "calibration"))


def cmd_serve(a) -> int:
    """`drape start` for a config with [[garment]] tables: every garment in one process."""
    import logging
    from .service.config import ConfigError, load_service
    from .service.control import TokenMissing
    from .service.daemon import Service
    from .service.runner import StopFlag

    logging.basicConfig(level=getattr(logging, a.log_level.upper()), stream=sys.stderr,
                        format="%(asctime)s %(levelname)s %(message)s")
    log = logging.getLogger("drape")
    try:
        cfg = load_service(a.config)
        if a.listen:
            from dataclasses import replace
            cfg = replace(cfg, listen=a.listen)
    except ConfigError as exc:
        return _err(str(exc))
    stop = StopFlag()
    service = Service(cfg, _open_one, stop)
    try:
        service.open_control()
    except TokenMissing as exc:
        return _err(f"refusing to start: {exc}")
    except (ValueError, OSError) as exc:
        return _err(f"control port {cfg.listen}: {exc}")
    _stop_on_signals(stop)
    try:
        _write_pid_file(a.pid_file)
    except OSError as exc:
        return _err(f"--pid-file: {exc}")
    if hasattr(signal, "SIGHUP"):  # reload every garment's mapping
        def hup(*_):
            service.reloads_asked += 1
        signal.signal(signal.SIGHUP, hup)
    service.start_garments()
    if cfg.status_to:
        log.info("status stream to %s", ", ".join(cfg.status_to))
    log.info("running %d garment(s); SIGTERM or Ctrl-C stops, SIGHUP reloads mappings, SIGUSR1 panics",
             len(service.garments))
    service.serve()
    log.info("stopped%s", f" ({stop.reason})" if stop.reason else "")
    return 0


def cmd_start(a) -> int:
    if _uses_service(a.config):
        return cmd_serve(a)
    from .mapping import MappingError, MappingWatcher
    from .recognition import ModelError, load_model
    from .service import Pipeline, StopFlag, run
    from .service.config import ConfigError, load_config
    from .sources.base import SourceGone
    from .sources.protocols import describe_counters
    from .sources.textline import ProtocolUndecided

    try:
        cfg = load_config(a.config)
        model = load_model(cfg.model)
        watcher = MappingWatcher(cfg.mapping, model.classes, model.kinds, model.channel_names) if cfg.mapping else None
        mapping = watcher.mapping if watcher else None
        inbox = _inbox(a.listen)
    except (ConfigError, ModelError, MappingError) as exc:
        return _err(str(exc))
    except (ValueError, OSError) as exc:
        return _err(f"--listen: {exc}")

    def said(connected, message):
        print(f"drape: {cfg.port}: {message}", file=sys.stderr, flush=True)

    try:
        from .service.garment_source import open_garment_source
        source = open_garment_source(cfg, model)
    except (SourceGone, ValueError) as exc:
        return _err(str(exc))
    where = cfg.port if cfg.input == "serial" else f"OSC {cfg.listen} {cfg.address}"
    from .service.runner import keys_only_for_local_input
    opener = keys_only_for_local_input(_open_one, cfg.input == "osc")  # no keys from network samples
    stop = StopFlag()
    _stop_on_signals(stop, reload=True)  # before anything is held: every ending lets go
    try:
        _write_pid_file(a.pid_file)
    except OSError as exc:
        return _err(f"--pid-file: {exc}")
    outputs = _open_outputs(mapping, opener) if mapping else {}
    print(f"drape: {cfg.name} on {where}, model {cfg.model} ({len(model.classes) - 1} gestures)"
          + (f", mapping {cfg.mapping}" if cfg.mapping else ""), file=sys.stderr, flush=True)
    if not source.connected:
        hint = "" if cfg.input != "serial" or "drape ports" in source.last_error else \
            "; `drape ports` lists the serial ports of this machine"
        print(f"drape: waiting for the garment ({source.last_error}){hint}", file=sys.stderr, flush=True)
    if hasattr(source, "on_change"):
        source.on_change = said

    def status(state, reason):
        print(f"drape: {state}" + (f" ({reason}); postures released, outputs held" if reason else ""),
              file=sys.stderr, flush=True)

    code = 0
    from .service import Settling
    # the service's default [calibration]: a 1 s hold-still at start, re-settling after a lasting shift
    pipeline = Pipeline(model, mapping, cfg.name, settle=Settling())
    try:
        run(source, pipeline, outputs, stop, on_event=_print_event,
            watcher=watcher, inbox=inbox, open_fn=opener, report=_report,
            stall_s=cfg.stall_s, on_status=status)
    except ProtocolUndecided as exc:
        print(f"drape: {exc}", file=sys.stderr)
        code = 2
    except SourceGone as exc:
        print(f"drape: {exc}", file=sys.stderr)
        code = 1
    finally:
        source.close()
        if inbox:
            inbox.close()
        _close_outputs(outputs)
        _report(f"stopped; {describe_counters(source.counters())}; "
                f"samples skipped as implausible (far from the resting frequency) {pipeline.skipped}")
    return code


def cmd_ports(a) -> int:
    from .sources.serialport import list_serial_ports

    ports = list_serial_ports()
    if not ports:
        print("no serial ports found (is the garment plugged in? on Linux, is your user in the dialout group?)")
        return 0
    for p in ports:
        ident = f"{p.vid:04x}:{p.pid:04x}" if p.vid is not None else "-"
        print(f"{p.device:<22} usb {ident:<10} serial {p.serial_number or '-':<20} {p.description}"
              + (f" ({p.manufacturer})" if p.manufacturer else ""))
        if p.usb_id:
            print(f"{'':22} config: port = \"{p.usb_id}\"")
    return 0


class _Keys:
    """Keys pressed, without waiting: single keys from a terminal (cbreak mode), or lines from a
    pipe (each line's first letter is a key), so capture can be driven by a script."""

    def __init__(self, stream=None):
        self.stream = stream
        self.saved = None
        self.open = self.stream is not None and not self.stream.closed
        if self.open and self.stream.isatty():
            import termios
            import tty
            self.saved = termios.tcgetattr(self.stream.fileno())
            tty.setcbreak(self.stream.fileno())

    def __call__(self) -> list[str]:
        import os
        import select
        if not self.open:
            return []
        out = []
        while select.select([self.stream], [], [], 0)[0]:
            data = os.read(self.stream.fileno(), 64).decode("utf-8", "replace")
            if not data:  # end of input: no more keys
                self.open = False
                break
            out += [c for c in data if c.strip()] if self.saved else [l for l in data.splitlines() if l.strip()]
        return out

    def close(self) -> None:
        if self.saved is not None:
            import termios
            termios.tcsetattr(self.stream.fileno(), termios.TCSADRAIN, self.saved)
            self.saved = None


def cmd_capture(a) -> int:
    import numpy as np
    from .garment import GESTURES
    from .service import StopFlag
    from .service.capture import CaptureSession, CaptureSettings, capture_plan, run_capture
    from .sources import RecordingWriter
    from .sources.base import SourceGone
    from .sources.recording import TakeWriteError
    from .sources.protocols import describe_counters
    from .sources.textline import ProtocolUndecided

    if bool(a.simulated) == bool(a.port):
        return _err("capture needs --port PORT (a garment) or --simulated (the built-in jacket)")
    gestures = [g.strip() for g in a.gestures.split(",") if g.strip()] if a.gestures else list(GESTURES)
    postures = {p.strip() for p in (a.postures or "").split(",") if p.strip()}
    kinds = {g: ("posture" if g in postures else GESTURES.get(g, "gesture")) for g in gestures}
    if a.simulated:
        unknown = [g for g in gestures if g not in GESTURES]
        if unknown:
            return _err(f"the simulated wearer knows {', '.join(GESTURES)}; not {', '.join(unknown)}")
    if a.reps < 1 or not gestures:
        return _err("capture needs at least one gesture and --reps of 1 or more")
    interactive = sys.stdin is not None and sys.stdin.isatty() and not a.yes
    wearer, session = a.wearer, a.session
    if interactive:
        wearer = input(f"wearer [{wearer}]: ").strip() or wearer
        session = input(f"session [{session}]: ").strip() or session
    out = Path(a.out or f"{wearer}-{session}.take")
    if out.exists() and not a.overwrite:
        return _err(f"{out} exists; choose another --out or pass --overwrite")

    stop = StopFlag()
    if a.simulated:
        from .sources.simulated import PromptedSimulatedSource
        source = PromptedSimulatedSource(seed=a.seed, wearer=a.sim_wearer, session=a.sim_session, realtime=not a.fast)
        layout = "simulated jacket"
    else:
        from .sources.serialport import SerialSource
        try:
            source = SerialSource(a.port, a.channels, a.rate_hz, a.baud, None, a.protocol,
                                  {"yes": True, "no": False}.get(a.timestamp))
        except SourceGone as exc:
            return _err(str(exc))
        layout = a.layout
    try:
        first = None
        if not a.simulated:  # the take's header needs the channels: wait for the first samples
            t0 = time.monotonic()
            while first is None or len(first) == 0:
                first = source.read()
                if time.monotonic() - t0 > a.wait_s:
                    return _err(f"no samples from {a.port} within {a.wait_s:g} s ({describe_counters(source.counters())})")
        rng = np.random.default_rng(a.seed)
        plan = capture_plan(rng, gestures, a.reps)
        settings = CaptureSettings(a.reps, a.countdown_s, a.window_s, a.hold_s, (a.rest_s, a.rest_s * 2), a.lead_s,
                                   a.ordinary_s)
        writer = RecordingWriter(out, source.rate_hz, source.channel_names, wearer, session, layout, kinds)
    except (SourceGone, ProtocolUndecided, TakeWriteError) as exc:
        source.close()
        return _err(str(exc))
    sess = CaptureSession(plan, kinds, settings, writer, rng, getattr(source, "prompt", None))
    tty_out = sys.stdout.isatty()
    keys = _Keys(None if a.no_keys else sys.stdin)
    _stop_on_signals(stop)

    def text(line):
        print(("\r\033[K" if tty_out else "") + line, flush=True)

    def status(line):
        if tty_out:
            print("\r\033[K" + line, end="", flush=True)

    print(f"capturing {len(gestures)} gestures x {a.reps} into {out} ({len(source.channel_names)} channels at "
          f"{source.rate_hz:g} Hz); keys: r redo last, s skip, q finish", flush=True)
    code = 0
    try:
        if first is not None:
            writer.samples(np.arange(len(first)) / source.rate_hz, first.freq_hz)
        run_capture(source, sess, writer, stop, text, status, keys)
    except (SourceGone, ProtocolUndecided) as exc:
        text(f"drape: {exc}; the take so far is saved")
        code = 1
    except TakeWriteError as exc:  # disk full: stop recording, keep what is on disk readable
        text(f"drape: {exc}; stopped recording")
        code = 1
    finally:
        keys.close()
        writer.close()
        source.close()
    why = f" ({stop.reason})" if stop.reason else " (finished early)" if sess.finished_early else ""
    text(f"saved {out}{why}: {len(sess.done)} labelled, {len(sess.skipped)} skipped, {sess.redone} redone")
    return code


def _progress(desc: str):
    """A progress callback (done, total) drawing a bar on stderr when it is a terminal, and its closer."""
    from .progress import progress_bar
    bar = progress_bar(desc)
    return bar, bar.close


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


def _training_settings(a):
    """TrainingSettings from the shared options of fit and evaluate."""
    from .recognition import TrainingSettings
    band = {} if a.band_hz is None else {"low_hz": a.band_hz[0], "high_hz": a.band_hz[1]}
    return TrainingSettings(window_s=a.window_s, hop_s=a.hop_s, **band)


def cmd_fit(a) -> int:
    from .recognition import fit_cases, fit_recordings
    from .sources import RecordingError
    from .sources.ts_format import TsFormatError, stack_cases

    if bool(a.recordings) == bool(a.ts):
        return _err("give take files or --ts TRAIN.ts (one of the two)")
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
    step, close = _progress(f"fitting {a.classifier}")
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
            if a.ordinary:
                if a.classifier == "linear":
                    raise ValueError("--ordinary applies to --classifier minirocket or dtw")
                options["ordinary"] = _read_takes(a.ordinary)[0]
            model = fit_recordings(a.classifier, recs, kinds, _training_settings(a), progress=step, **options)
            source = _plural(len(recs), "take")
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
    return {k: v for k, v in result.items() if k not in ("takes", "confidence", "correct")}


def _print_result(result: dict) -> None:
    cal = f", calibration error {result['calibration_error']:.3f}" if "calibration_error" in result else ""
    print(f"accuracy {result['accuracy']:.3f}, macro F1 {result['macro_f1']:.3f}{cal} over {result['windows']} windows")
    for c, v in result["per_class"].items():
        print(f"  {c:<16} precision {v['precision']:.3f}  recall {v['recall']:.3f}  F1 {v['f1']:.3f}  ({v['support']})")
    for f in result.get("folds", []):
        rec = "n/a" if f.get("recall") is None else f"{f['recall']:.3f}"
        print(f"  held out {f['held_out']!s:<10} accuracy {f['accuracy']:.3f}  macro F1 {f['macro_f1']:.3f}  "
              f"recall {rec}  false firings {f.get('false')} ({f.get('double')} double, {f.get('wrong_name')} wrong name, "
              f"{f.get('ordinary')} in ordinary movement)")
    e = result.get("events")
    if e:
        from .evaluation.matching import format_counts
        for line in format_counts(e):
            print(line)
        w = e["ward"]
        print(f"  event categories (Ward et al. 2011, detections never merged): {w['true_correct']} correct, "
              f"{w['true_deleted']} deleted, {w['true_fragmented'] + w['true_frag_merged']} fragmented, "
              f"{w['true_merged'] + w['true_frag_merged']} merged; {w['detected_inserted']} inserted of "
              f"{w['detections']} detections")


def cmd_evaluate(a) -> int:
    from .evaluation.heldout import cross_validate, evaluate_cases, evaluate_takes
    from .recognition import ModelError, load_model
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
                title = f"{a.model} on {_plural(len(recs), 'take')}"
            else:
                close()
                return _err("with --model, give take files or --ts TEST.ts to score it on")
        else:
            if not a.recordings or not a.scheme:
                close()
                return _err("give take files and --scheme leave-session-out or leave-wearer-out (or --model M with held-out data)")
            recs, kinds = _read_takes(a.recordings)
            result = cross_validate(recs, kinds, a.scheme, a.classifier, _training_settings(a), progress=step)
            title = f"{a.classifier}, {a.scheme}, {_plural(len(recs), 'take')}"
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


def cmd_bench(a) -> int:
    from .evaluation.bench import bench_continuous, run_all
    if a.continuous_only:
        c = bench_continuous()
        print(" ".join(f"{k} {v}" for k, v in c.items()))
        return 0
    if a.live:
        from .evaluation.bench import bench_live
        bench_live(a.live_s)
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
    from .evaluation.spotting import Protocol, format_table, run_protocol
    if a.spotting_wearers < 2 or a.spotting_score_min <= 0:
        return _err("--spotting-wearers must be at least 2 and --spotting-score-min positive")
    p = Protocol(wearers=a.spotting_wearers, seed=a.spotting_seed, score_null_s=60.0 * a.spotting_score_min,
                 prior_wearers=a.spotting_prior)
    cache = Path(a.spotting_cache or f"drape-spotting-{a.spotting_seed}-{a.spotting_wearers}-{a.spotting_score_min:g}")
    from .recognition.classifiers import DEFAULT_CLASSIFIER
    classifier = (a.classifier or [DEFAULT_CLASSIFIER])[0]
    print(f"spotting protocol, {classifier}: {p.wearers} simulated wearers, full vocabulary; fit on 2 sessions "
          f"({p.fit_reps} repetitions + {p.fit_null_s / 60:g} min ordinary movement each), tune on a third "
          f"({p.tune_reps} + {p.tune_null_s / 60:g} min), score a fourth ({p.score_reps} + {p.score_null_s / 60:g} min); "
          f"takes cached in {cache}"
          + (f"; every fit adds 10 min of ordinary movement of each of {p.prior_wearers} other simulated people"
             if p.prior_wearers else ""), flush=True)
    try:
        result = run_protocol(p, classifier, cache, progress=lambda m: print("  " + m, flush=True))
    except ValueError as exc:
        return _err(str(exc))
    print("\n".join(format_table(result)))
    if a.spotting_json:
        Path(a.spotting_json).write_text(json.dumps(result, indent=1, default=str), encoding="utf-8")
        print(f"{a.spotting_json}: written")
    return 0


def _bench_soak(a) -> int:
    """`drape bench --soak HOURS`: simulated hours through the live loop, then a replay check."""
    from .evaluation.soak import soak
    from .recognition import ModelError, load_model
    if a.soak <= 0:
        return _err("--soak takes a positive number of simulated hours, e.g. 2")
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
    from .evaluation.fuzz import TARGETS, fuzz
    crashes = 0
    for target in a.fuzz_target or TARGETS:
        r = fuzz(target, a.fuzz, seed=a.fuzz_seed, crash_dir=a.fuzz_crashes, report=lambda t: print(t, flush=True),
                 time_limit_s=a.fuzz_limit_s)
        print(r.line(), flush=True)
        crashes += sum(r.crashes.values()) + sum(r.violations.values())
    if crashes and a.fuzz_crashes:
        print(f"first input of each crash kind saved in {a.fuzz_crashes}")
    return 1 if crashes else 0


def cmd_replay(a) -> int:
    from dataclasses import fields

    from .evaluation.matching import match_events
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
    from .sources.replay import ReplaySource

    pipe = Pipeline(model, mapping)
    src = ReplaySource(rec, 0.1)
    events, sent = [], []
    while True:
        ended = src.ended
        batch = pipe.stop() if ended else pipe.feed(src.read().freq_hz)
        events += [e for e in batch if e.kind != "control"]
        sent += pipe.dispatches(batch) + (pipe.let_go() if ended else [])
        if ended:
            break
    print(f"{a.recording}: {rec.freq_hz.shape[0] / rec.rate_hz:.1f} s, {_plural(len(rec.intervals), 'gesture')} "
          f"performed (the take's labels), replayed through {a.model}"
          + (f" and {a.mapping}; nothing is sent: the messages a live run would send are listed under their events"
             if a.mapping else "; nothing is sent (no mapping given)"))
    # What was performed beside each decision: the one matcher evaluation and tuning count with.
    m = match_events(events, rec.intervals)
    verdict = {id(e): f"{iv.label}: hit, {_offset(e.t_s - (iv.start_s if e.kind == 'entered' else iv.end_s), e.kind)}"
               for iv, e in m.hits}
    for f in fields(m):  # kinds of false firing, when the matcher tells them apart
        if f.name not in ("hits", "missed", "false"):
            for e in getattr(m, f.name):
                verdict[id(e)] = f"FALSE TRIGGER ({'double' if f.name == 'doubles' else f.name.replace('_', ' ')})"
    for e in m.false:
        verdict.setdefault(id(e), "FALSE TRIGGER")
    messages = {}
    for d in sent:
        messages.setdefault(round(d.decided_s, 6), []).append(d)
    rows = sorted([(e.t_s, 0, i) for i, e in enumerate(events)] +
                  [(iv.end_s + 2.5, 1, i) for i, iv in enumerate(m.missed)])
    print(f"{'time':>9}    {'decided':<16} {'kind':<8} {'conf':>4}  performed")
    for t, missed, i in rows:
        if missed:
            iv = m.missed[i]
            print(f"{t:9.2f} s  {'-':<16} {'':<8} {'':>4}  {iv.label}: MISSED (performed {iv.start_s:.2f}-{iv.end_s:.2f} s)")
            continue
        e = events[i]
        if e.kind in ("armed", "disarmed", "panic", "layer"):
            print(f"{e.t_s:9.2f} s  ** {e.kind}{' ' + e.detail if e.detail else ''}")
        else:
            during = next((iv.label for iv in rec.intervals if iv.start_s <= e.t_s <= iv.end_s), "")
            held = f"held {e.duration_s:.1f} s" if e.kind in ("held", "left") else ""
            col = verdict.get(id(e)) or ", ".join(x for x in (during and f"during {during}", held) if x)
            print(f"{e.t_s:9.2f} s  {e.gesture:<16} {e.kind:<8} {e.confidence:4.2f}  {col}")
        for d in messages.pop(round(e.t_s, 6), []):
            print(f"{'':14}→ {d.destination}: {_show(d.message)}")
    for ds in messages.values():  # what is let go at the end of the take
        for d in ds:
            print(f"{d.decided_s:9.2f} s  → {d.destination}: {_show(d.message)}")
    print(f"{_plural(len(m.hits) + len(m.missed), 'gesture')} performed, {len(m.hits)} recognised, "
          f"{len(m.missed)} missed, {_plural(len(m.false), 'false trigger')}")
    return 0


def _plural(n: int, word: str) -> str:
    """'1 take', '3 takes'."""
    return f"{n} {word}{'' if n == 1 else 's'}"


def _offset(dt_s: float, kind: str) -> str:
    """'0.18 s after it ended' (a gesture) or '0.80 s after it began' (a posture's entry)."""
    return f"{abs(dt_s):.2f} s {'after' if dt_s >= 0 else 'before'} it {'began' if kind == 'entered' else 'ended'}"


def _show(message) -> str:
    """One line for a message value, numbers rounded for reading."""
    from .mapping.messages import OscMessage
    if isinstance(message, OscMessage):
        return f"{message.address} {' '.join(f'{v:.4g}' if isinstance(v, float) else str(v) for v in message.args)}"
    return repr(message)


def replay_events(rec, model, mapping=None, block_s: float = 0.1, settle=None):
    """Events the live chain decides over a whole take (see ``bridge.service.replay_events``)."""
    from .service import replay_events as replay
    return replay(rec, model, mapping, block_s, settle)


def _simulated_vocabulary(name: str):
    from .garment import FULL_GESTURES, FULL_NULL_ACTIVITIES, GESTURES, NULL_ACTIVITIES
    return (dict(FULL_GESTURES), FULL_NULL_ACTIVITIES) if name == "full" else (dict(GESTURES), NULL_ACTIVITIES)


def cmd_simulate(a) -> int:
    import numpy as np
    from .garment import Jacket, LayoutError, load_layout, random_script, training_script
    from .sources import Recording, write_recording

    if not a.serve and not a.out:
        return _err("simulate needs --out FILE (or DIR with --wearers), or --serve")
    for name in ("wearers", "sessions", "repetitions"):
        if getattr(a, name) is not None and getattr(a, name) < (0 if name == "repetitions" else 1):
            return _err(f"--{name} must be at least {0 if name == 'repetitions' else 1}")
    if not ((a.duration_s is None or a.duration_s > 0) and a.rate_hz > 0):
        return _err("--duration-s and --rate-hz must be positive")
    try:
        layout = load_layout(a.layout) if a.layout else None
    except LayoutError as exc:
        return _err(str(exc))
    troupe = a.wearers is not None or a.sessions is not None
    vocabulary = a.vocabulary or ("full" if troupe else "demo")
    gestures, nulls = _simulated_vocabulary(vocabulary)
    if a.serve:
        return _serve(a, layout, gestures, nulls)
    if troupe:
        from .garment.troupe import write_troupe

        def show(f):
            print(f"  {f['file']}: {f['seconds']:.0f} s, {f['gestures']} labelled", flush=True)
        out = write_troupe(a.out, a.seed, a.wearers or 1, a.sessions or 1, gestures, nulls, a.repetitions or 3,
                           layout, progress=show)
        print(f"{out}: troupe of {a.wearers or 1} wearers x {a.sessions or 1} sessions, {vocabulary} vocabulary "
              f"({len(gestures)} gestures and postures, {len(nulls)} null kinds), listed in troupe.json")
        return 0
    jacket = Jacket(seed=a.seed, wearer=a.wearer, session=a.session, rate_hz=a.rate_hz, layout=layout)
    rng = np.random.default_rng([a.seed, a.wearer, a.session, 3])
    # Training repetitions, then ordinary movement (null activity), then a random performance.
    script = training_script(rng, a.repetitions, list(gestures), null_activities=nulls) if a.repetitions else []
    script += [(activity, a.null_s / 3) for activity in ("standing", "walking", "fidgeting")] if a.null_s else []
    if a.duration_s or not script:
        script += random_script(rng, a.duration_s or 120.0, list(gestures), null_activities=nulls)
    take = jacket.perform(script)
    write_recording(a.out, Recording.from_take(take, gestures, layout=layout.name if layout else "built-in"))
    print(f"{a.out}: {take.t_s.size / take.rate_hz:.1f} s, {len(take.intervals)} labelled gestures, "
          f"{len(take.channel_names)} channels at {take.rate_hz:g} Hz")
    return 0


def _serve(a, layout, gestures, nulls) -> int:
    import numpy as np
    from .garment import Jacket
    from .garment.device import PseudoGarment
    from .service import StopFlag

    jacket = Jacket(seed=a.seed, wearer=a.wearer, session=a.session, rate_hz=a.rate_hz, layout=layout)
    try:
        device = PseudoGarment(jacket, np.random.default_rng([a.seed, a.wearer, a.session, 5]), gestures, nulls,
                               drop_probability=0.0 if a.no_drops else 5e-4,
                               late_probability=0.0 if a.no_drops else 2e-3)
    except OSError as exc:
        return _err(f"cannot open a pseudo-terminal: {exc}")
    stop = StopFlag()
    _stop_on_signals(stop)
    print(device.path, flush=True)  # first line: the port to open (drape start, a serial terminal)
    print(f"drape: simulated jacket on {device.path}: {len(jacket.channel_names)} channels "
          f"({', '.join(jacket.channel_names)}) at {jacket.rate_hz:g} Hz, text protocol with device time; "
          f"Ctrl-C stops", file=sys.stderr, flush=True)
    try:
        device.run(stop, a.for_s, on_performed=lambda iv: print(
            f"{iv.start_s:9.2f} s  performed {iv.label:<16} until {iv.end_s:.2f} s", flush=True))
    finally:
        device.close()
    print(f"drape: stopped{' (' + stop.reason + ')' if stop.reason else ''}; lines sent {device.sent_lines}, "
          f"discarded with no reader {device.discarded_lines}, samples dropped {device.dropped_samples}",
          file=sys.stderr, flush=True)
    return 0


def cmd_check(a) -> int:
    from .mapping import MappingError, load_mapping
    from .mapping.rules import describe_destination
    from .recognition import ModelError, load_model

    try:
        model = load_model(a.model) if a.model else None
        mapping = load_mapping(a.file, model.classes if model else None, model.kinds if model else None,
                               model.channel_names if model else None)
    except (ModelError, MappingError) as exc:
        return _err(str(exc))
    print(f"{a.file}: OK, {_plural(len(mapping.rules), 'rule')}, {_plural(len(mapping.controls), 'continuous control')}"
          + ("" if model else " (not checked against a model: give --model to check gestures and channels)"))
    print("destinations:")
    for name, d in mapping.destinations.items():
        print(f"  {name:<12} {describe_destination(d)}")
    if mapping.layers:
        print(f"layers: {', '.join(mapping.layers)} (first: {mapping.first_layer})")
    sf = mapping.safety
    print("safety: " + ", ".join(filter(None, [
        "starts armed" if sf.start_armed else "starts disarmed",
        f"hold {sf.arm_posture} {sf.arm_hold_s:g} s to arm/disarm" if sf.arm_posture else "no arming posture",
        f"disarms after {sf.idle_disarm_s:g} s idle" if sf.idle_disarm_s else "",
        f"panic gesture {sf.panic_gesture}" if sf.panic_gesture else "panic by control message or SIGUSR1 only"])))
    if mapping.status:
        print(f"status: {mapping.status.to} {mapping.status.address}")
    print(f"  {'line':<5} {'layer':<8} {'gesture':<16} {'on':<16} {'to':<10} does")
    for r in mapping.rules:
        when = f"{r.on} every {r.every_s:g} s" if r.on == "held" else r.on
        print(f"  {r.line:<5} {r.layer or '*':<8} {r.gesture:<16} {when:<16} {r.to or '-':<10} {r.action.describe()}")
    for c in mapping.controls:
        mix = " + ".join(f"{w:g}·{ch}" for ch, w in c.mix)
        rng = "range file" if c.range_file is not None else f"relaxed {c.relaxed:g} .. closest {c.closest:g}"
        while_ = f", only while {c.only_while}" if c.only_while else ""
        print(f"  {c.line:<5} {c.layer or '*':<8} {c.name:<16} {'control':<16} {c.to:<10} {c.action.describe()} "
              f"from {mix} ({rng}{while_}); at most {c.max_rate_hz:g}/s, steps ≥ {c.min_change:g}; "
              f"one-euro min_cutoff {c.filter.min_cutoff_hz:g} Hz beta {c.filter.beta:g}")
    return 0


def cmd_tune(a) -> int:
    from .evaluation.matching import format_counts
    from .evaluation.tuning import tune_model
    from .recognition import ModelError, load_model
    from .sources import RecordingError, read_recording

    try:
        model = load_model(a.model)
        recs = [read_recording(p) for p in a.recordings]
        for r in recs:
            model.check_source(len(r.channel_names), r.rate_hz)
    except (ModelError, RecordingError) as exc:
        return _err(str(exc))
    hours = sum(r.freq_hz.shape[0] / r.rate_hz for r in recs) / 3600
    print(f"replaying {_plural(len(recs), 'take')} ({hours * 60:.1f} min, "
          f"{sum(len(r.intervals) for r in recs)} labelled) ...", flush=True)
    step, close = _progress("replaying")
    try:
        result = tune_model(model, recs, max_false_per_hour=a.max_false_per_hour, progress=step)
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
        print(f"  {g:<16} threshold {st['threshold']:.2f}, {st['agree_k']} of {st['agree_n']} hops{rearm}")
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
        _report(f"nothing stored in {out} (--store-anyway stores the settings all the same); "
                "more ordinary movement in training, or a stricter budget, may help")
        return 3
    for p in problems:
        _report("budget missed, stored anyway: " + p)
    model.decision = {**model.decision, **result.settings}
    model.save(out)
    print(f"{out}: decision settings stored")
    return 0


def cmd_range(a) -> int:
    from .decisions import RangeError, capture_range
    from .signal import Conditioner
    from .sources.base import SourceGone

    try:
        if a.port:
            from .recognition import ModelError, load_model
            from .sources.serialport import SerialTextSource
            model = load_model(a.model) if a.model else None
            if model is None:
                return _err("--port needs --model (for the channel count, names and rate)")
            source = SerialTextSource(a.port, model.n_channels, model.rate_hz, a.baud, model.channel_names)
            settings, names = model.conditioning, model.channel_names
        else:
            source, settings, names = _simulated_range_source(a.seed, a.wearer, a.seconds, a.countdown_s)
    except (SourceGone, ValueError) as exc:
        return _err(str(exc))
    if a.seconds <= 0 or a.countdown_s < 0:
        source.close()
        return _err("--seconds must be above 0 and --countdown-s 0 or more")
    try:
        rng = capture_range(source, Conditioner(settings), names, a.seconds, prompt=lambda t: print(t, flush=True),
                            countdown_s=a.countdown_s, leave_out_flat=a.leave_out_flat)
    except RangeError as exc:
        return _err(str(exc))
    finally:
        source.close()
    rng.save(a.out)
    for n, lo, hi in zip(rng.channel_names, rng.relaxed, rng.closest):
        print(f"  {n:<14} relaxed {lo:+.4f}  closest {hi:+.4f}  (ΔC/C0)")
    flat = [n for n in names if n not in rng.channel_names]
    if flat:
        print(f"  left out (did not rise): {', '.join(flat)}; a control cannot mix them with this range file")
    print(f"{a.out}: written; use it in a mapping's [[control]] as range = \"{a.out}\"")
    return 0


def _simulated_range_source(seed: int, wearer: int, seconds: float = 5.0, countdown_s: float = 3.0):
    """The simulated wearer standing, then holding hands on hips (near the front antennas),
    timed to the captures: the move to the posture happens during the second countdown."""
    import numpy as np
    from .garment import Jacket
    from .signal import BandPass
    from .sources import Recording
    from .sources.replay import ReplaySource

    jacket = Jacket(seed=seed, wearer=wearer, session=0)
    take = jacket.perform([("standing", countdown_s + seconds + 0.5),
                           ("hands_on_hips", countdown_s + seconds + 1.0)])
    rec = Recording(take.rate_hz, tuple(take.channel_names), take.t_s, take.freq_hz)
    return ReplaySource(rec, 0.1), BandPass(take.rate_hz), tuple(take.channel_names)


def cmd_watch(a) -> int:
    from .service.watch import PortBusy, watch
    try:
        return watch(a.host, a.port, once=a.once, wait_s=a.wait_s)
    except PortBusy as exc:
        return _err(str(exc))
    except OSError as exc:
        return _err(f"cannot listen on {a.host}:{a.port}: {exc}")


def _send_token(a) -> str:
    """The control token: --token-file, else the DRAPE_TOKEN environment variable, else
    --token (visible to every user of the machine in the process list: warned)."""
    import os
    from .service.watch import TOKEN_ENV
    if a.token_file:
        try:
            return Path(a.token_file).expanduser().read_text(encoding="utf-8").strip()
        except (OSError, UnicodeDecodeError) as exc:
            raise ValueError(f"--token-file: {exc}") from None
    if os.environ.get(TOKEN_ENV):
        return os.environ[TOKEN_ENV].strip()
    if a.token:
        _report(f"--token is visible to other users in the process list; prefer {TOKEN_ENV} or --token-file")
    return a.token


def cmd_send(a) -> int:
    from .service.watch import send_command
    to = f"127.0.0.1:{a.port}" if a.port else a.to
    if a.what == "layer" and not a.layer:
        return _err("send layer needs the layer's name: drape send layer NAME")
    try:
        answer = send_command(to, a.what, a.layer or "", a.garment, _send_token(a), a.wait_s)
    except (ValueError, OSError) as exc:
        return _err(str(exc))
    for line in answer.lines:
        (print if answer.ok else _report)(line)
    return 0 if answer.ok else 1


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="drape", description="Postures and gestures from textile antennas, as live control messages.")
    sub = p.add_subparsers(dest="verb", metavar="VERB")
    d = sub.add_parser("demo", help=VERBS["demo"], description=VERBS["demo"])
    d.add_argument("--for", dest="for_s", type=float, default=None, metavar="SECONDS", help="stop after this many seconds")
    d.add_argument("--mapping", help="mapping file (default mappings/demo.toml)")
    d.add_argument("--seed", type=int, default=1)
    d.add_argument("--wearer", type=int, default=0)
    d.add_argument("--fast", action="store_true", help="run as fast as possible instead of in real time")
    d.add_argument("--listen", metavar="HOST:PORT", help="take control messages (arm, disarm, panic, layer) here")
    d.add_argument("--model", help="use this model of the simulated jacket instead of training one first")
    d.add_argument("--pid-file", metavar="FILE", help="write the process id here (for kill -USR1 \"$(cat FILE)\")")
    d.set_defaults(func=cmd_demo)
    s = sub.add_parser("start", help=VERBS["start"], description=VERBS["start"])
    s.add_argument("--config", required=True, help="daemon config file (TOML)")
    s.add_argument("--listen", metavar="HOST:PORT", help="take control messages (arm, disarm, panic, layer) here")
    s.add_argument("--pid-file", metavar="FILE", help="write the process id here (for kill -USR1 \"$(cat FILE)\")")
    s.add_argument("--log-level", default="info", choices=("debug", "info", "warning", "error"),
                   help="with [[garment]] configs: how much to log to stderr")
    s.set_defaults(func=cmd_start)
    w = sub.add_parser("watch", help=VERBS["watch"], description=VERBS["watch"] +
                       ". Add this address to the daemon's [status] to = [...] list.")
    w.add_argument("--port", type=int, default=9200, help="UDP port the status stream comes to (default 9200)")
    w.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1)")
    w.add_argument("--once", action="store_true", help="print one plain frame once every garment was heard, then exit")
    w.add_argument("--wait-s", type=float, default=5.0, help="--once: give up after this long, s")
    w.set_defaults(func=cmd_watch)
    n = sub.add_parser("send", help=VERBS["send"], description=VERBS["send"] +
                       ". Network commands never press keys.")
    n.add_argument("what", choices=("arm", "disarm", "panic", "layer", "reload", "rebaseline", "status"))
    n.add_argument("layer", nargs="?", help="layer: the layer's name")
    n.add_argument("--garment", default="", help="only this garment (default: every garment)")
    n.add_argument("--to", default="127.0.0.1:9100", help="the daemon's control port (default 127.0.0.1:9100)")
    n.add_argument("--port", type=int, help="shorthand for --to 127.0.0.1:PORT")
    n.add_argument("--token", default="", help="the shared token, when the daemon's port has one (other users can "
                   "see it in the process list: prefer DRAPE_TOKEN or --token-file)")
    n.add_argument("--token-file", metavar="FILE", help="read the token from this file")
    n.add_argument("--wait-s", type=float, default=1.0, help="how long to wait for the daemon's answer, s (default 1)")
    n.set_defaults(func=cmd_send)
    from .recognition.classifiers import CLASSIFIERS, DEFAULT_CLASSIFIER
    f = sub.add_parser("fit", help=VERBS["fit"], description=VERBS["fit"])
    f.add_argument("recordings", nargs="*", metavar="TAKE")
    f.add_argument("--ts", metavar="TRAIN.ts", help="train on the cases of a .ts file instead of takes")
    f.add_argument("--classifier", choices=tuple(CLASSIFIERS), default=DEFAULT_CLASSIFIER,
                   help="minirocket (default: convolution features, trained against false cues), "
                        "linear (tiny) or dtw (few-shot templates)")
    f.add_argument("-o", "--output", required=True, help="model file to write (.npz)")
    f.add_argument("--window-s", type=float, default=2.0, help="window length, s")
    f.add_argument("--hop-s", type=float, default=0.1, help="hop between windows, s")
    f.add_argument("--band-hz", type=float, nargs=2, metavar=("LOW", "HIGH"),
                   help="band-pass edges, Hz (default 1 to 10 Hz, the upper edge lowered to 0.4 × the rate "
                        "for slow sources); stored in the model")
    f.add_argument("--ordinary", metavar="TAKE", action="append", default=[],
                   help="a take of ordinary movement only (no labels), from this wearer or others, added to "
                        "the null class (repeatable); minirocket and dtw")
    f.add_argument("--band", type=float, metavar="FRACTION",
                   help="dtw: warping band as a fraction of the window (0 = no warping, 1 = unconstrained; default 0.1)")
    f.add_argument("--no-rejection", action="store_true",
                   help="dtw: always name the nearest class, never null for lack of a near template")
    f.add_argument("--edges", choices=("alternate", "valid"),
                   help="minirocket: 'valid' pools over unpadded positions only (default for takes: a stream's "
                        "window edges are arbitrary), 'alternate' is the paper's padding (default for --ts)")
    f.set_defaults(func=cmd_fit)
    e = sub.add_parser("evaluate", help=VERBS["evaluate"], description=VERBS["evaluate"])
    e.add_argument("recordings", nargs="*", metavar="TAKE")
    e.add_argument("--scheme", choices=("leave-session-out", "leave-wearer-out"),
                   help="hold out each session (new recordings of known wearers) or each wearer (unseen wearers)")
    e.add_argument("--classifier", choices=tuple(CLASSIFIERS), default=DEFAULT_CLASSIFIER)
    e.add_argument("--model", help="score this model on held-out takes or --ts cases instead")
    e.add_argument("--ts", metavar="TEST.ts", help="cases to score --model on (resampled to its window)")
    e.add_argument("--json", action="store_true", help="print a machine-readable summary")
    e.add_argument("--report", metavar="DIR", help="write an HTML report with pictures into DIR (needs matplotlib)")
    e.add_argument("--window-s", type=float, default=2.0, help="window length, s")
    e.add_argument("--hop-s", type=float, default=0.1, help="hop between windows, s")
    e.add_argument("--band-hz", type=float, nargs=2, metavar=("LOW", "HIGH"),
                   help="band-pass edges, Hz (as drape fit)")
    e.set_defaults(func=cmd_evaluate)
    b = sub.add_parser("bench", help=VERBS["bench"], description=VERBS["bench"])
    b.add_argument("--channels", type=int, nargs="+", default=[4, 8])
    b.add_argument("--hops", type=int, default=200, help="hops timed per classifier and channel count")
    b.add_argument("--replay-s", type=float, default=300.0, help="length of the replayed take, s (0 to skip)")
    b.add_argument("--fit-minutes", type=float, default=30.0, help="minutes of 4-channel data to time fitting on (0 to skip)")
    b.add_argument("--classifier", action="append", choices=tuple(CLASSIFIERS), help="only this one (repeatable)")
    b.add_argument("--continuous-only", action="store_true", help="only the continuous-control figures")
    b.add_argument("--compare", action="store_true",
                   help="also time the reference implementations in the same run and print ratios "
                        "(the numba MiniRocket needs the compare extra)")
    b.add_argument("--batch-windows", type=int, default=1000,
                   help="windows of the batch minirocket transform figure (0 to skip)")
    b.add_argument("--live", action="store_true",
                   help="end to end instead: the simulated jacket through a pty into `drape start`, out to loopback OSC")
    b.add_argument("--live-s", type=float, default=30.0, help="--live: seconds of stream")
    b.add_argument("--soak", type=float, metavar="HOURS",
                   help="soak instead: HOURS of simulated performance through the live loop, memory and replay check")
    b.add_argument("--soak-model", metavar="MODEL", help="--soak: a model of simulated wearer 1 (default: train one)")
    b.add_argument("--soak-out", metavar="DIR", help="--soak: keep the captured take and live events in DIR")
    b.add_argument("--soak-heap", action="store_true", help="--soak: also trace Python heap growth (slower)")
    b.add_argument("--spotting", action="store_true",
                   help="the spotting protocol: fit, tune and score sessions of a simulated troupe, every firing counted")
    b.add_argument("--spotting-wearers", type=int, default=6, help="--spotting: simulated wearers (default 6)")
    b.add_argument("--spotting-score-min", type=float, default=60.0,
                   help="--spotting: minutes of ordinary movement in each scored session (default 60)")
    b.add_argument("--spotting-seed", type=int, default=1)
    b.add_argument("--spotting-prior", type=int, default=0, metavar="N",
                   help="--spotting: add ordinary movement of N other simulated people to every fit (default 0)")
    b.add_argument("--spotting-cache", metavar="DIR", help="--spotting: folder for the rendered takes (kept for reruns)")
    b.add_argument("--spotting-json", metavar="FILE", help="--spotting: also write the full result as JSON")
    b.add_argument("--fuzz", type=int, metavar="N", help="fuzz instead: N mutated inputs into each parser")
    b.add_argument("--fuzz-target", action="append", choices=("text", "frames", "osc", "control", "mapping", "model"),
                   help="--fuzz: only this parser (repeatable)")
    b.add_argument("--fuzz-seed", type=int, default=1, help="--fuzz: mutator seed (same seed, same inputs)")
    b.add_argument("--fuzz-crashes", metavar="DIR", help="--fuzz: save the first input of each crash kind here")
    b.add_argument("--fuzz-limit-s", type=float, metavar="S", help="--fuzz: stop each target after S seconds")
    b.set_defaults(func=cmd_bench)
    r = sub.add_parser("replay", help=VERBS["replay"], description=VERBS["replay"])
    r.add_argument("recording", metavar="TAKE")
    r.add_argument("--model", required=True)
    r.add_argument("--mapping")
    r.set_defaults(func=cmd_replay)
    m = sub.add_parser("simulate", help=VERBS["simulate"], description=VERBS["simulate"])
    m.add_argument("--out", help="take file to write (a folder with --wearers/--sessions)")
    m.add_argument("--duration-s", type=float, default=None,
                   help="length of a random performance, s (default 120 when nothing else is asked for)")
    m.add_argument("--repetitions", type=int, default=None,
                   help="each gesture this many times first (a training take; 3 per session in a troupe)")
    m.add_argument("--null-s", type=float, default=0.0, help="then this long of ordinary movement (standing, walking, fidgeting), s")
    m.add_argument("--seed", type=int, default=0)
    m.add_argument("--wearer", type=int, default=0)
    m.add_argument("--session", type=int, default=0)
    m.add_argument("--wearers", type=int, help="write a troupe: this many wearers (into the folder --out)")
    m.add_argument("--sessions", type=int, help="troupe: sessions per wearer (the jacket put on anew each time)")
    m.add_argument("--layout", metavar="FILE", help="cable layout (TOML, see examples/layouts); default: built-in four cables")
    m.add_argument("--vocabulary", choices=("demo", "full"),
                   help="demo: the 9 of mappings/demo.toml; full: 15 gestures and postures, 8 null kinds "
                        "(default: full for a troupe, demo otherwise)")
    m.add_argument("--rate-hz", type=float, default=100.0, help="counter gates per second (sample rate)")
    m.add_argument("--serve", action="store_true",
                   help="act as a garment on a pseudo-terminal in real time; prints its path first")
    m.add_argument("--for", dest="for_s", type=float, default=None, metavar="SECONDS", help="--serve: stop after this long")
    m.add_argument("--no-drops", action="store_true", help="--serve: never drop or delay a sample")
    m.set_defaults(func=cmd_simulate)
    c = sub.add_parser("check", help=VERBS["check"], description=VERBS["check"])
    c.add_argument("file", metavar="MAPPING")
    c.add_argument("--model")
    c.set_defaults(func=cmd_check)
    t = sub.add_parser("tune", help=VERBS["tune"], description=VERBS["tune"])
    t.add_argument("recordings", nargs="+", metavar="TAKE", help="held-out labelled takes (not used to fit the model)")
    t.add_argument("--model", required=True)
    t.add_argument("--max-false-per-hour", type=float, default=1.0, help="false-trigger budget (default 1)")
    t.add_argument("-o", "--output", help="write the tuned model here (default: update MODEL in place)")
    t.add_argument("--store-anyway", action="store_true",
                   help="store the settings even when the false-firing budget is missed (exit 0)")
    t.set_defaults(func=cmd_tune)
    g = sub.add_parser("range", help=VERBS["range"], description=VERBS["range"] +
                       ". Without --port it runs on the simulated wearer, to try it out.")
    g.add_argument("--out", required=True, help="range file to write (JSON)")
    g.add_argument("--port", help="the garment's serial device")
    g.add_argument("--model", help="model of this garment (channel names and rate); needed with --port")
    g.add_argument("--baud", type=int, default=115200)
    g.add_argument("--seconds", type=float, default=5.0, help="length of each capture, s")
    g.add_argument("--countdown-s", type=float, default=3.0, help="countdown before each capture, s (0: none)")
    g.add_argument("--leave-out-flat", action="store_true",
                   help="leave out of the range file the channels whose level did not rise in the second capture")
    g.add_argument("--seed", type=int, default=1)
    g.add_argument("--wearer", type=int, default=0)
    g.set_defaults(func=cmd_range)
    o = sub.add_parser("ports", help=VERBS["ports"], description=VERBS["ports"])
    o.set_defaults(func=cmd_ports)
    g = sub.add_parser("capture", help=VERBS["capture"], description=VERBS["capture"] +
                       ". Keys while it runs: r redo the last prompt, s skip, q finish; Ctrl-C stops and keeps the take.")
    g.add_argument("--port", help="the garment's serial port (path, usb:VID:PID[:SERIAL] or serial:SERIAL)")
    g.add_argument("--simulated", action="store_true", help="the built-in simulated jacket; its wearer follows the prompts")
    g.add_argument("--out", help="take file to write (default WEARER-SESSION.take)")
    g.add_argument("--overwrite", action="store_true", help="replace an existing take file")
    g.add_argument("--wearer", default="wearer1")
    g.add_argument("--session", default=time.strftime("%Y%m%d-%H%M"))
    g.add_argument("--yes", action="store_true", help="ask nothing: take wearer and session from the options")
    g.add_argument("--gestures", help="comma-separated names to prompt (default: the built-in vocabulary)")
    g.add_argument("--postures", help="which of the names are postures (held); built-in names know their kind")
    g.add_argument("--reps", type=int, default=5, help="repetitions of each gesture")
    g.add_argument("--countdown-s", type=float, default=3.0)
    g.add_argument("--window-s", type=float, default=3.0, help="time given to perform a gesture, s")
    g.add_argument("--hold-s", type=float, default=5.0, help="time a posture is held, s")
    g.add_argument("--rest-s", type=float, default=2.0, help="shortest rest between prompts, s (up to twice this)")
    g.add_argument("--lead-s", type=float, default=4.0, help="null activity recorded before the first prompt, s")
    g.add_argument("--ordinary-s", type=float, default=180.0,
                   help="ordinary movement recorded after the last prompt, s (default 180: the model learns "
                        "from it to stay silent when no gesture is meant)")
    g.add_argument("--seed", type=int, default=0, help="seeds the prompt order (and the simulated jacket)")
    g.add_argument("--fast", action="store_true", help="simulated: run as fast as possible")
    g.add_argument("--sim-wearer", type=int, default=0)
    g.add_argument("--sim-session", type=int, default=0)
    g.add_argument("--no-keys", action="store_true", help="ignore standard input")
    g.add_argument("--protocol", choices=("auto", "text", "frames"), default="auto")
    g.add_argument("--channels", type=int, help="channels per sample (default: detect)")
    g.add_argument("--timestamp", choices=("yes", "no"), help="text lines start with the device time (default: detect)")
    g.add_argument("--rate-hz", type=float, default=100.0, help="sample rate to record at, Hz")
    g.add_argument("--baud", type=int, default=115200)
    g.add_argument("--layout", default="", help="garment or antenna layout, kept in the take")
    g.add_argument("--wait-s", type=float, default=5.0, help="give up when the port sends nothing for this long, s")
    g.set_defaults(func=cmd_capture)
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
