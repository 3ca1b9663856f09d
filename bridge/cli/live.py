"""The live verbs: demo, start (one garment or the service), watch, send, ports."""

from __future__ import annotations

import signal
import sys
import time
from pathlib import Path

from .common import _err, _output_problem, _plural, _report, _shipped_example_hint, _stop_on_signals


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
        from ..service.control import printable  # a layer name can come from the network
        _line(f"{e.t_s:9.2f} s  ** {e.kind}{' ' + printable(e.detail) if e.detail else ''}")
        return
    extra = f"  held {e.duration_s:5.2f} s" if e.kind == "left" else ""
    if timing is not None and timing.not_sent:
        lat = f"  {timing.not_sent}: not sent"
    else:
        lat = f"  latency {timing.send_ms:5.2f} ms" if timing else ""
    _line(f"{e.t_s:9.2f} s  {e.gesture:<16} {e.kind:<8} confidence {e.confidence:.2f}{lat}{extra}")


def _stop_flag(pid_file):
    """The stop flag a single live loop runs on: every ending signal sets it and SIGHUP
    reloads the mapping (handlers set before anything is held), and the pid file written.
    OSError when the pid file cannot be written."""
    from ..service import StopFlag
    stop = StopFlag()
    _stop_on_signals(stop, reload=True)
    _write_pid_file(pid_file)
    return stop


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


def _inbox(listen):
    """The control-message inbox for --listen HOST:PORT, or None."""
    if not listen:
        return None
    from ..service.control import ControlInbox, parse_host_port
    inbox = ControlInbox(*parse_host_port(listen))
    _report(f"control messages (/drape/arm, /drape/disarm, /drape/panic, /drape/layer NAME, /drape/reload, "
            f"/drape/rebaseline, /drape/status) on "
            f"{inbox.address[0]}:{inbox.address[1]}; they never press keys")
    return inbox


def _open_one(d):
    from ..outputs import open_output
    return open_output(d)


def _default_mapping() -> Path:
    """mappings/demo.toml in the current folder (a checkout, or the user's own copy), else the shipped one."""
    here = Path.cwd() / "mappings" / "demo.toml"
    if here.is_file():
        return here
    from ..examples_data import example_path
    return example_path("demo.toml")


def _open_outputs(mapping, open_fn=None):
    """Each destination behind its own queue; one that cannot open is reported and left out."""
    from ..outputs import OutputUnavailable, open_output
    outputs = {}
    for name, d in mapping.destinations.items():
        try:
            outputs[name] = (open_fn or open_output)(d)
        except (OutputUnavailable, OSError) as exc:
            print(f"drape: destination {name!r} left out: {exc}", file=sys.stderr, flush=True)
    return outputs


def _close_outputs(outputs) -> None:
    """Close every output (each releases what it holds) and report what it sent and dropped."""
    from ..outputs.base import closing_summary
    for name, o in outputs.items():
        o.close()
        print(f"drape: output {name}: {closing_summary(o)}", file=sys.stderr, flush=True)


def cmd_demo(a) -> int:
    import numpy as np
    from ..evaluation.narration import Narrator
    from ..garment import GESTURES, tour_script
    from ..mapping import MappingError, MappingWatcher
    from ..mapping.rules import describe_destination
    from ..recognition import ModelError
    from ..service import Pipeline, run
    from ..sources.simulated import SimulatedSource

    mapping_path = Path(a.mapping) if a.mapping else _default_mapping()
    # The simulated wearer first performs each gesture once (a tour), then at random.
    tour = list(GESTURES)
    source = SimulatedSource(seed=a.seed + 1, wearer=a.wearer, session=2, realtime=not a.fast, duration_s=a.for_s,
                             first=tour_script(np.random.default_rng([a.seed, a.wearer, 23]), tour))
    # Bad input is refused before the training wait.
    try:
        inbox = _inbox(a.listen)
    except (ValueError, OSError) as exc:
        return _err(f"--listen: {exc}")

    def fail(text: str) -> int:
        if inbox:
            inbox.close()
        return _err(text)
    if not mapping_path.is_file():
        return fail(f"mapping has errors:\n{mapping_path}: no such mapping file")
    if a.model:  # a model of the simulated jacket saved before: no training wait
        from ..recognition import load_model
        try:
            model = load_model(a.model)
            model.check_source(len(source.channel_names), source.rate_hz)
            if tuple(model.channel_names) != source.channel_names:
                raise ModelError(f"{a.model} was trained on channels {', '.join(model.channel_names)}; the simulated "
                                 f"jacket has {', '.join(source.channel_names)}: use a model of the simulated jacket "
                                 f"(or leave out --model to train one)")
        except ModelError as exc:
            return fail(str(exc))
        print(f"model {a.model}: {_plural(len(model.classes) - 1, 'gesture')}", flush=True)
    else:
        print(f"training on simulated wearer {a.wearer} (seed {a.seed}) ...", flush=True)
        t0 = time.monotonic()
        from ..evaluation.simulated import train_simulated
        model = train_simulated(a.seed, a.wearer)
        print(f"trained in {time.monotonic() - t0:.1f} s: {len(model.classes) - 1} gestures, "
              f"cross-validated window accuracy {model.summary['cross_validated_window_accuracy']:.2f}", flush=True)
    try:
        watcher = MappingWatcher(mapping_path, model.classes, model.kinds, model.channel_names)
    except MappingError as exc:
        return fail(f"mapping has errors:\n{exc}")
    mapping = watcher.mapping
    from ..mapping.watcher import nothing_to_send
    note = nothing_to_send(mapping, mapping_path)
    if note:
        _report(note)
    try:
        stop = _stop_flag(a.pid_file)  # before anything is held: every ending lets go
    except OSError as exc:
        return fail(f"--pid-file: {exc}")
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
        if not narrator.on_event(e, disarmed=bool(timing is not None and timing.disarmed)):
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
    from ..service.config import ConfigError, load_service
    from ..service.control import TokenMissing
    from ..service.daemon import DeliveryTimes, Service
    from ..service.runner import StopFlag

    if getattr(a, "timings", None):   # asked before any garment opens, not when the show is over
        problem = _output_problem(a.timings, replace=getattr(a, "overwrite", False), option="--timings")
        if problem:
            return _err(problem)
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
    timings = DeliveryTimes() if getattr(a, "timings", None) else None
    service = Service(cfg, _open_one, stop, timings=timings)
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
    nothing = service.none_started()
    if nothing:   # a service that runs nothing must not look healthy: say why, close what opened, fail
        log.error("no garment could start (%s); stopping", nothing)
        service.shutdown()
        return 1
    if cfg.status_to:
        log.info("status stream to %s", ", ".join(cfg.status_to))
    failed = [g.name for g in service.garments if g not in service.live()]
    log.log(logging.WARNING if failed else logging.INFO,
            "running %d of %d garment(s)%s; SIGTERM or Ctrl-C stops, SIGHUP reloads mappings, SIGUSR1 panics",
            len(service.garments) - len(failed), len(service.garments),
            f" ({', '.join(failed)} failed: see above; the other garments carry on)" if failed else "")
    import gc
    gc.freeze()  # what start loaded (models, modules) is left out of later collections: a full one
    try:
        service.serve()  # then scans only what the loop made, not a pause of tens of ms in the stream
    except Exception as exc:   # serve closed every output on its way out; the traceback follows
        log.error("stopped (%s); every output closed, keys and notes let go", stop.reason or _fault_words(exc))
        raise
    log.info("stopped%s", f" ({stop.reason})" if stop.reason else "")
    if timings is not None:
        try:
            timings.save(a.timings)
        except OSError as exc:
            return _err(f"--timings {a.timings}: {exc}")
        log.info("timings of %d deliveries written to %s", len(timings), a.timings)
    return 0


def _fault_words(exc: BaseException) -> str:
    """Why a live loop stopped when drape itself failed, for its stop line."""
    from ..service.control import printable
    return f"a fault inside drape: {type(exc).__name__}: {printable(str(exc), 160)}"


def cmd_start(a) -> int:
    if _uses_service(a.config):
        return cmd_serve(a)
    from ..mapping import MappingError, MappingWatcher
    from ..recognition import ModelError, load_model
    from ..service import Pipeline, run
    from ..service.config import ConfigError, load_config
    from ..sources.base import SourceGone
    from ..sources.protocols import describe_counters
    from ..sources.textline import ProtocolUndecided

    try:
        cfg = load_config(a.config)
        model = load_model(cfg.model)
        watcher = MappingWatcher(cfg.mapping, model.classes, model.kinds, model.channel_names) if cfg.mapping else None
        mapping = watcher.mapping if watcher else None
        inbox = _inbox(a.listen)
    except (ConfigError, ModelError, MappingError) as exc:
        return _err(str(exc) + (_shipped_example_hint(cfg.mapping) if isinstance(exc, MappingError) else ""))
    except (ValueError, OSError) as exc:
        return _err(f"--listen: {exc}")
    from ..mapping.watcher import nothing_to_send
    note = nothing_to_send(mapping, cfg.mapping)
    if note:
        _report(note)

    def said(connected, message):
        print(f"drape: {cfg.port}: {message}", file=sys.stderr, flush=True)

    try:
        from ..service.garment_source import open_garment_source
        source = open_garment_source(cfg, model)
    except (SourceGone, ValueError) as exc:
        return _err(str(exc))
    where = cfg.port if cfg.input == "serial" else f"OSC {cfg.listen} {cfg.address}"
    from ..service.runner import keys_only_for_local_input, samples_over_network
    opener = keys_only_for_local_input(_open_one, samples_over_network(cfg))  # no keys from network samples
    try:
        stop = _stop_flag(a.pid_file)  # before anything is held: every ending lets go
    except OSError as exc:
        return _err(f"--pid-file: {exc}")
    outputs = _open_outputs(mapping, opener) if mapping else {}
    print(f"drape: {cfg.name} on {where}, model {cfg.model} ({_plural(len(model.classes) - 1, 'gesture')})"
          + (f", mapping {cfg.mapping}; {mapping.arming_at_start(outputs)}" if mapping else ""), file=sys.stderr, flush=True)
    if mapping and inbox is None and not mapping.safety.arm_posture:   # only stopping drape changes its arming
        if any(d.kind == "keys" and n in outputs for n, d in mapping.destinations.items()):
            print("drape: caution: keys, no arming posture and no control port: nothing but stopping drape (Ctrl-C) "
                  "disarms; start with --listen 127.0.0.1:9100 to disarm or panic with `drape send`",
                  file=sys.stderr, flush=True)
        if not mapping.safety.start_armed:
            print("drape: caution: the mapping starts disarmed and has no arming posture, and there is no control "
                  "port: nothing can arm it, so no cue will be sent; start with --listen 127.0.0.1:9100 and "
                  "`drape send arm`", file=sys.stderr, flush=True)
    if not source.connected:
        hint = "" if cfg.input != "serial" or any(w in source.last_error for w in ("drape ports", "another program")) else \
            "; `drape ports` lists the serial ports of this machine"
        print(f"drape: waiting for the garment ({source.last_error}){hint}", file=sys.stderr, flush=True)
    if hasattr(source, "on_change"):
        source.on_change = said

    def status(state, reason):
        print(f"drape: {state}" + (f" ({reason}); postures released, outputs stay open" if reason else ""),
              file=sys.stderr, flush=True)

    code = 0
    from ..service import Settling
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
    except Exception as exc:   # a fault of drape's own: the stop line says so, its traceback follows
        stop.reason = stop.reason or _fault_words(exc)
        raise
    finally:
        source.close()
        if inbox:
            inbox.close()
        _close_outputs(outputs)
        _report(f"stopped{f' ({stop.reason})' if stop.reason else ''}; {describe_counters(source.counters())}; "
                f"samples skipped as implausible (far from the resting frequency) {pipeline.skipped}")
    return code


def cmd_ports(a) -> int:
    from ..sources.serialport import list_serial_ports

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


def cmd_watch(a) -> int:
    from ..service.watch import PortBusy, watch
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
    from ..service.watch import TOKEN_ENV
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


SEND_PARTLY = 3   # `drape send`'s exit when some garments did it and some did not (1: none did, or no answer)


def cmd_send(a) -> int:
    """Exit 0: done; 3: done on some garments only (the answer names which); 1: refused or
    unanswered (nothing was confirmed); 2: the command line was wrong, nothing was sent."""
    from ..service.control import PARTLY
    from ..service.watch import send_command
    to = f"127.0.0.1:{a.port}" if a.port else a.to
    if a.what == "layer" and not a.layer:
        return _err("send layer needs the layer's name: drape send layer NAME")
    if a.what != "layer" and a.layer:   # never widen a command to every garment by a misplaced name
        return _err(f"send {a.what} takes no name; for one garment: drape send {a.what} --garment {a.layer}")
    try:
        answer = send_command(to, a.what, a.layer or "", a.garment, _send_token(a), a.wait_s)
    except (ValueError, OSError) as exc:
        return _err(str(exc))
    for line in answer.lines:
        (print if answer.ok else _report)(line)
    if answer.ok:
        return 0
    return SEND_PARTLY if answer.outcome == PARTLY else 1
