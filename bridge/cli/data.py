"""The data verbs: capture, simulate, range, replay, check."""

from __future__ import annotations

import sys
import time
from pathlib import Path

from .common import _err, _folder_problem, _in_sample, _output_problem, _plural, _say_in_sample, _shipped_example_hint, \
    _stop_on_signals


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
    from ..garment import GESTURES
    from ..service import StopFlag
    from ..service.capture import CaptureSession, CaptureSettings, capture_plan, run_capture
    from ..sources import CutShort, RecordingWriter
    from ..sources.base import SourceGone
    from ..sources.recording import TakeWriteError
    from ..sources.protocols import describe_counters
    from ..sources.textline import ProtocolUndecided

    if bool(a.simulated) == bool(a.port):
        return _err("capture needs --port PORT (a garment) or --simulated (the built-in jacket)")
    gestures = [g.strip() for g in a.gestures.split(",") if g.strip()] if a.gestures else list(GESTURES)
    postures = {p.strip() for p in (a.postures or "").split(",") if p.strip()}
    kinds = {g: ("posture" if g in postures else GESTURES.get(g, "gesture")) for g in gestures}
    if a.simulated:
        unknown = [g for g in gestures if g not in GESTURES]
        if unknown:
            return _err(f"the simulated wearer knows {', '.join(GESTURES)}; not {', '.join(unknown)}")
    if a.reps is None:
        a.reps = 3 if a.check_in else 5
    if a.reps < 1 or not gestures:
        return _err("capture needs at least one gesture and --reps of 1 or more")
    interactive = sys.stdin is not None and sys.stdin.isatty() and not a.yes
    wearer, session = a.wearer, a.session
    if interactive:
        wearer = input(f"wearer [{wearer}]: ").strip() or wearer
        session = input(f"session [{session}]: ").strip() or session
    out = Path(a.out or f"{wearer}-{session}{'-checkin' if a.check_in else ''}.take")
    problem = _output_problem(out, replace=a.overwrite)
    if problem:
        return _err(problem)

    stop = StopFlag()
    if a.simulated:
        from ..sources.simulated import PromptedSimulatedSource
        # a check-in is a further performance in the --sim-session dressing: the cables sit as in it
        source = PromptedSimulatedSource(seed=a.seed, wearer=a.sim_wearer, session=a.sim_session, realtime=not a.fast,
                                         take=1 if a.check_in else None)
        layout = "simulated jacket"
    else:
        from ..sources.serialport import SerialSource
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
        writer = RecordingWriter(out, source.rate_hz, source.channel_names, wearer, session, layout, kinds,
                                 check_in=a.check_in, plan=CaptureSession.take_plan(plan, settings))
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

    print(f"capturing {_plural(len(gestures), 'gesture')} x {a.reps} into {out} ({len(source.channel_names)} channels at "
          f"{source.rate_hz:g} Hz); keys: r redo last, s skip, q finish", flush=True)
    code = 0
    gone = ""
    try:
        run_capture(source, sess, writer, stop, text, status, keys, first=first)
    except (SourceGone, ProtocolUndecided) as exc:
        text(f"drape: {exc}; the take so far is saved")
        code, gone = 1, "the garment's data stopped"
    except TakeWriteError as exc:  # disk full: stop recording, keep what is on disk readable
        text(f"drape: {exc}; stopped recording")
        code, gone = 1, "the take could not be written"
    finally:
        keys.close()
        # a take cut short says so in the file, so that fit, evaluate and tune can warn about it
        short = sess.shortfall()
        cut, marked = None, False
        if short is not None:
            reason = stop.reason or gone or ("q pressed" if sess.finished_early else "the source ended")
            cut = CutShort(reason, short[0], short[1], short[2], settings.ordinary_s)
            try:
                writer.cut(cut)
                marked = True
            except TakeWriteError:
                pass  # disk full: the take says nothing more, the message below still does
        writer.close()
        source.close()
    why = f" ({stop.reason})" if stop.reason else " (finished early)" if sess.finished_early else ""
    text(f"saved {out}{why}: {len(sess.done)} labelled, {len(sess.skipped)} skipped, {sess.redone} redone")
    if cut is not None:
        text(f"the take is incomplete{' (marked so in the file)' if marked else ''}: stopped during {cut.step}; "
             f"not recorded: {cut.missing()}. Capture again, or fit it only beside complete takes")
    if a.check_in and sess.done:
        text(f"fit it with your training takes, e.g. drape fit TRAINING.take ... {out} -o today.npz "
             "(--overwrite replaces the last show's), and run the show on today.npz")
    return code


def cmd_replay(a) -> int:
    from dataclasses import fields

    from ..evaluation.matching import match_events
    from ..mapping import MappingError, load_mapping
    from ..recognition import ModelError, load_model
    from ..service import Pipeline
    from ..sources import RecordingError, read_recording

    try:
        model = load_model(a.model)
        rec = read_recording(a.recording)
        model.check_takes([rec], [a.recording])
        mapping = load_mapping(a.mapping, model.classes, model.kinds) if a.mapping else None
    except (ModelError, RecordingError, MappingError) as exc:
        return _err(str(exc))
    _say_in_sample(a.model, _in_sample(model, [a.recording], [rec]))
    from ..mapping.watcher import nothing_to_send
    if nothing_to_send(mapping, a.mapping):
        print(f"drape: {a.mapping}: no destinations and no rules; nothing is sent", file=sys.stderr)
    from ..sources.replay import ReplaySource

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


def _offset(dt_s: float, kind: str) -> str:
    """'0.18 s after it ended' (a gesture) or '0.80 s after it began' (a posture's entry)."""
    return f"{abs(dt_s):.2f} s {'after' if dt_s >= 0 else 'before'} it {'began' if kind == 'entered' else 'ended'}"


def _show(message) -> str:
    """One line for a message value, in the words of the trade, numbers rounded for reading."""
    from ..mapping import messages as mm
    if isinstance(message, mm.OscMessage):
        return f"{message.address} {' '.join(f'{v:.4g}' if isinstance(v, float) else str(v) for v in message.args)}"
    if isinstance(message, mm.OscBundle):
        return "bundle: " + "; ".join(_show(m) for m in message.messages)
    if isinstance(message, mm.KeyAction):
        return f"keys {'+'.join(message.keys)} ({message.action})"
    if isinstance(message, mm.MidiNote):
        return (f"note {'on' if message.on else 'off'} {message.note} velocity {message.velocity}, "
                f"channel {message.channel}")
    if isinstance(message, mm.MidiControl):
        return f"CC {message.controller} value {message.value}, channel {message.channel}"
    if isinstance(message, mm.MidiProgram):
        return f"program {message.program}, channel {message.channel}"
    if isinstance(message, mm.LightLevels):
        levels = ", ".join(f"{slot}: {level}" for slot, level in sorted(message.levels.items()))
        return f"universe {message.universe} slots {{{levels}}}" + (f" over {message.fade_s:g} s" if message.fade_s else "")
    if isinstance(message, mm.Release):
        return "let go of everything held" + (" and disarm keys" if message.disarm else "")
    if isinstance(message, mm.Arm):
        return "keys armed"
    return repr(message)


def _simulated_vocabulary(name: str):
    from ..garment import FULL_GESTURES, FULL_NULL_ACTIVITIES, GESTURES, NULL_ACTIVITIES
    return (dict(FULL_GESTURES), FULL_NULL_ACTIVITIES) if name == "full" else (dict(GESTURES), NULL_ACTIVITIES)


def cmd_simulate(a) -> int:
    import numpy as np
    from ..garment import Jacket, LayoutError, load_layout, random_script, training_script
    from ..sources import Recording, write_recording

    if not a.serve and not a.out:
        return _err("simulate needs --out FILE (or DIR with --wearers), or --serve")
    try:
        layout = load_layout(a.layout) if a.layout else None
    except LayoutError as exc:
        return _err(str(exc))
    troupe = a.wearers is not None or a.sessions is not None
    if a.ordinary_people is not None:
        if a.serve or troupe or a.repetitions:
            return _err("--ordinary-people writes takes of ordinary movement only: "
                        "leave out --serve, --wearers, --sessions and --repetitions")
        return _ordinary_people(a, layout)
    vocabulary = a.vocabulary or ("full" if troupe else "demo")
    gestures, nulls = _simulated_vocabulary(vocabulary)
    if a.serve:
        return _serve(a, layout, gestures, nulls)
    if troupe:
        from ..sources.troupe import troupe_file_names, write_troupe

        problem = _folder_problem(a.out, troupe_file_names(a.wearers or 1, a.sessions or 1), a.overwrite)
        if problem:
            return _err(problem)

        def show(f):
            print(f"  {f['file']}: {f['seconds']:.0f} s, {f['gestures']} labelled", flush=True)
        out = write_troupe(a.out, a.seed, a.wearers or 1, a.sessions or 1, gestures, nulls, a.repetitions or 3,
                           layout, progress=show)
        print(f"{out}: troupe of {a.wearers or 1} wearers x {a.sessions or 1} sessions, {vocabulary} vocabulary "
              f"({len(gestures)} gestures and postures, {len(nulls)} null kinds), listed in troupe.json")
        return 0
    problem = _output_problem(a.out, replace=a.overwrite)
    if problem:
        return _err(problem)
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


ORDINARY_SEED_OFFSET = 1000   # other people: not the wearers a troupe of the same --seed simulates


def _ordinary_people(a, layout) -> int:
    from pathlib import Path

    from ..garment import FULL_NULL_ACTIVITIES
    from ..garment.troupe import ordinary_take
    from ..sources import Recording, write_recording
    if a.ordinary_people < 1 or not a.ordinary_s > 0:
        return _err("--ordinary-people must be at least 1 and --ordinary-s positive")
    folder = Path(a.out)
    names = [f"ordinary-person{k}.take" for k in range(a.ordinary_people)]
    problem = _folder_problem(folder, names, a.overwrite)
    if problem:
        return _err(problem)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        return _err(f"cannot make the folder {folder}: {exc.strerror or exc}")
    for k in range(a.ordinary_people):
        take = ordinary_take(a.seed + ORDINARY_SEED_OFFSET, k, a.ordinary_s, FULL_NULL_ACTIVITIES, layout, a.rate_hz)
        path = folder / names[k]
        rec = Recording.from_take(take, {}, layout=layout.name if layout else "built-in")
        rec.wearer, rec.session = f"ordinary-person{k}", "ordinary"   # nobody a troupe names wearerN
        write_recording(path, rec)
        print(f"  {path}: {take.t_s.size / take.rate_hz:.0f} s of ordinary movement, "
              f"{len(take.channel_names)} channels at {take.rate_hz:g} Hz", flush=True)
    print(f"{folder}: {_plural(a.ordinary_people, 'simulated person', 'simulated people')}'s ordinary movement "
          f"({', '.join(FULL_NULL_ACTIVITIES)}); add it to a fit: drape fit TAKE --ordinary {folder}/*.take -o MODEL")
    return 0


def _serve(a, layout, gestures, nulls) -> int:
    import numpy as np
    from ..garment import Jacket
    from ..sources.pseudodevice import PseudoGarment
    from ..service import StopFlag

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
    from ..mapping import MappingError, load_mapping
    from ..mapping.rules import describe_destination
    from ..recognition import ModelError, load_model

    try:
        model = load_model(a.model) if a.model else None
        mapping = load_mapping(a.file, model.classes if model else None, model.kinds if model else None,
                               model.channel_names if model else None)
    except (ModelError, MappingError) as exc:
        return _err(str(exc) + (_shipped_example_hint(a.file) if isinstance(exc, MappingError) else ""))
    from ..mapping.watcher import nothing_to_send
    if nothing_to_send(mapping, a.file):
        return _err(f"{a.file}: no destinations and no rules: a running daemon would send nothing")
    print(f"{a.file}: OK, {_plural(len(mapping.rules), 'rule')}, {_plural(len(mapping.controls), 'continuous control')}"
          + ("" if model else " (not checked against a model: give --model to check gestures and channels)"))
    print("destinations:")
    for name, d in mapping.destinations.items():
        print(f"  {name:<12} {describe_destination(d)}")
    if mapping.layers:
        print(f"layers: {', '.join(mapping.layers)} (first: {mapping.first_layer})")
    sf = mapping.safety
    print("safety: " + "; ".join(filter(None, [
        mapping.arming_at_start(),
        f"hold {sf.arm_posture} {sf.arm_hold_s:g} s to arm/disarm" if sf.arm_posture else "no arming posture",
        f"disarms after {sf.idle_disarm_s:g} s idle" if sf.idle_disarm_s else "",
        f"panic gesture {sf.panic_gesture}" if sf.panic_gesture else "panic by control message or SIGUSR1 only"])))
    if mapping.status:
        print(f"status: {mapping.status.to} {mapping.status.address}")
    print(f"  {'line':<5} {'layer':<8} {'gesture':<16} {'on':<18} {'to':<10} does")
    for r in mapping.rules:
        when = (r.on if r.on != "held" else f"held once at {r.once_after_s:g} s" if r.once_after_s
                else f"held every {r.every_s:g} s")
        print(f"  {r.line:<5} {r.layer or '*':<8} {r.gesture:<16} {when:<18} {r.to or '-':<10} {r.action.describe()}")
    for c in mapping.controls:
        mix = " + ".join(f"{w:g}·{ch}" for ch, w in c.mix)
        rng = "range file" if c.range_file is not None else f"relaxed {c.relaxed:g} .. closest {c.closest:g}"
        while_ = f", only while {c.only_while}" if c.only_while else ""
        print(f"  {c.line:<5} {c.layer or '*':<8} {c.name:<16} {'control':<18} {c.to:<10} {c.action.describe()} "
              f"from {mix} ({rng}{while_}); at most {c.max_rate_hz:g}/s, steps ≥ {c.min_change:g}; "
              f"one-euro min_cutoff {c.filter.min_cutoff_hz:g} Hz beta {c.filter.beta:g}")
    return 0


def cmd_range(a) -> int:
    from ..decisions import RangeError, capture_range
    from ..signal import Conditioner
    from ..sources.base import SourceGone

    problem = _output_problem(a.out, [a.model] if a.model else [], replace=a.overwrite)
    if problem:
        return _err(problem)

    try:
        if a.port:
            from ..recognition import load_model
            from ..sources.serialport import SerialTextSource
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
    from ..garment import Jacket
    from ..signal import BandPass
    from ..sources import Recording
    from ..sources.replay import ReplaySource

    jacket = Jacket(seed=seed, wearer=wearer, session=0)
    take = jacket.perform([("standing", countdown_s + seconds + 0.5),
                           ("hands_on_hips", countdown_s + seconds + 1.0)])
    rec = Recording(take.rate_hz, tuple(take.channel_names), take.t_s, take.freq_hz)
    return ReplaySource(rec, 0.1), BandPass(take.rate_hz), tuple(take.channel_names)
