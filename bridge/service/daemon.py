"""The daemon in service: several garments in one process, a control port, a status stream.

One loop runs every garment's pipeline. Each source gets a reader thread that only moves
blocks into one bounded queue shared by all garments: a serial read waits up to its timeout
and the simulated jacket sleeps to keep time, so polling N sources from one thread would add
up to N waits of latency; with readers the loop wakes as soon as any garment's block arrives,
and every stage's state is still touched by this one thread only. A reader whose queue is
full drops the block and counts it (the loop has fallen behind; old samples are worth less
than a live stream). Each wake the loop takes every block waiting, and a garment's blocks
taken together go through its pipeline as one (events do not depend on the blocking).

Each garment is a ``Garment``: its pipeline, outputs, mapping watcher, watchdog and its
calibration state ("calibrating" at start and on rebaseline: a hold-still capture sets each
channel's resting frequency; "settling" after a sudden sustained shift: the same, reported;
"waiting" before a garment's first sample when its device could not be opened: the capture
at start begins once it is there).
The captures and the shift detection run inside ``Pipeline`` (``Settling`` from the config's
[calibration], see ``Service.settling``), sample-exact, so a replay of the raw stream with
the same settings decides the same events; the daemon only mirrors ``pipeline.holding``
into its state, logs and notices. While calibrating or settling no gesture can fire; stream
time still advances so note-offs come due.

One garment failing (model missing, device gone for good, OSC port busy) is reported and
marked "failed"; the others keep running.
"""

from __future__ import annotations

import logging
import os
import queue
import threading
import time
from array import array
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..outputs.base import closing_summary
from ..sources.base import Block
from ..sources.health import NO_DATA, STREAMING, Watchdog
from . import status as st
from .control import DONE, PARTLY, REFUSED, printable
from .outputwatch import OutputWatch
from .pipeline import CALIBRATING, SETTLING, Pipeline, Settling
from .runner import (StopFlag, keys_only_for_local_input, left_out_words, no_rebaseline, reconcile_outputs,
                     samples_over_network)

log = logging.getLogger("drape")

RUNNING, FAILED = "running", "failed"
SAMPLE = "its last sample arrived"   # what set an event off, as ``Service.deliver`` logs it
WAITING = "waiting"   # no sample yet: the garment's device is not there (yet); it is tried again and again


@dataclass
class Latency:
    """One event's times: host monotonic seconds of its last sample's arrival, of the
    decision and of the hand-over of its messages to the outputs' queues."""

    arrived_s: float
    decided_s: float
    sent_s: float

    @property
    def decide_ms(self) -> float:
        return (self.decided_s - self.arrived_s) * 1e3

    @property
    def send_ms(self) -> float:
        return (self.sent_s - self.arrived_s) * 1e3


class DeliveryTimes:
    """Every delivery's times, kept for ``drape start --timings`` (and ``drape bench --live``).

    One row per delivery (a block's control events, or its decisions): garment index,
    arrival of its last sample and hand-over to the outputs (host monotonic, s), how many
    control and other events it carried, and the loop's own CPU time in between. Rows are
    kept as flat doubles (48 bytes each, so a 10-minute run of 4 garments adds about 12 MB
    to the daemon), at most ``limit`` of them (about 3 hours of 4 garments with a continuous
    control each); later ones are only counted in ``beyond``.
    """

    COLUMNS = ("garment", "arrived_s", "sent_s", "controls", "others", "loop_cpu_s")

    def __init__(self, limit: int = 5_000_000):
        self.limit = limit
        self.values = array("d")
        self.beyond = 0

    def __len__(self) -> int:
        return len(self.values) // len(self.COLUMNS)

    def record(self, index: int, events, lat: Latency, loop_cpu_s: float = float("nan")) -> None:
        """``loop_cpu_s``: the loop thread's CPU time from taking the block to this hand-over,
        s (NaN for deliveries outside a block): its own work, without waits to be scheduled."""
        if len(self) >= self.limit:
            self.beyond += 1
            return
        controls = sum(1 for e in events if e.kind == "control")
        self.values.extend((index, lat.arrived_s, lat.sent_s, controls, len(events) - controls, loop_cpu_s))

    def save(self, path) -> None:
        """As a .npz: one array per column, plus ``beyond`` (rows not kept). Written to
        ``path`` exactly (``np.savez`` given a name would add .npz to one without it: not the
        file the command line checked)."""
        a = np.frombuffer(self.values, dtype=float).reshape(-1, len(self.COLUMNS))
        with open(path, "wb") as f:
            np.savez(f, beyond=np.array(self.beyond), **{c: a[:, i] for i, c in enumerate(self.COLUMNS)})


class Handoff:
    """The readers' one bounded queue to the loop, on the C ``queue.SimpleQueue``: a put and
    a get cost a fraction of ``queue.Queue``'s lock and condition work, paid per block.

    ``put_nowait`` raises ``queue.Full`` when ``maxsize`` blocks wait (the size check and the
    put are two steps, so with several readers the bound may be passed by one block per
    reader); ``put`` never refuses (a reader's last word); ``get`` raises ``queue.Empty``
    after ``timeout_s``; ``take_all`` returns every item waiting, oldest first.
    """

    def __init__(self, maxsize: int):
        self.maxsize = maxsize
        self._q = queue.SimpleQueue()

    def put_nowait(self, item) -> None:
        if self._q.qsize() >= self.maxsize:
            raise queue.Full
        self._q.put(item)

    def put(self, item) -> None:
        self._q.put(item)

    def get(self, timeout_s: float | None = None):
        return self._q.get(timeout=timeout_s)

    def qsize(self) -> int:
        return self._q.qsize()

    def take_all(self) -> list:
        get = self._q.get_nowait
        return [get() for _ in range(self._q.qsize())]  # only this thread takes: they are all there


def join_blocks(items: list) -> list:
    """A wake's (garment index, block) items with each garment's blocks joined into one,
    in the order each garment first appears; a garment's end (block None) stays after its
    blocks. Empty blocks count only as a read; the joined block's arrival is its first
    sample's block's (so a latency counts from the earliest arrival)."""
    order: dict[int, list] = {}
    for index, block in items:
        order.setdefault(index, []).append(block)
    out = []
    for index, blocks in order.items():
        end = any(b is None for b in blocks)
        data = [b for b in blocks if b is not None and len(b)]
        if len(data) > 1:
            out.append((index, Block(np.concatenate([b.t_s for b in data]),
                                     np.concatenate([b.freq_hz for b in data]), data[0].arrived_s)))
        elif data:
            out.append((index, data[0]))
        elif not end:
            out.append((index, next(b for b in blocks if b is not None)))  # an empty read: the watchdog counts it
        if end:
            out.append((index, None))
    return out


class Reader(threading.Thread):
    """Reads one source into the shared queue until stopped, the source ends or fails."""

    def __init__(self, index: int, source, q: queue.Queue):
        super().__init__(daemon=True, name=f"reader-{index}")
        self.index, self.source, self.q = index, source, q
        self.halt = threading.Event()
        self.dropped = 0
        self.error = ""

    def run(self) -> None:
        try:
            while not self.halt.is_set() and not self.source.ended:
                block = self.source.read()
                try:
                    self.q.put_nowait((self.index, block))
                except queue.Full:
                    self.dropped += len(block)
        except Exception as exc:  # device gone for good, a protocol nobody can read
            self.error = str(exc) or type(exc).__name__
            self.q.put((self.index, None))


@dataclass
class Garment:
    name: str
    cfg: object
    index: int = 0
    model: object = None
    pipeline: Pipeline | None = None
    source: object = None
    reader: Reader | None = None
    outputs: dict = field(default_factory=dict)
    watcher: object = None
    watchdog: Watchdog | None = None
    state: str = CALIBRATING
    note: str = ""
    left_out: dict = field(default_factory=dict)   # destinations that could not be opened: {name: why}
    holds_told: int = 0                         # pipeline.holds whose start was reported
    ends_told: int = 0                          # ... and whose end
    last_freq: np.ndarray | None = None
    recent: list = field(default_factory=list)  # (host time, samples) for the rate figure
    latencies_ms: list = field(default_factory=list)
    model_sig: tuple | None = None              # the model file as loaded (see check_model)
    ran: bool = False                           # its reader was started: a failure since is one while running
    failures: OutputWatch = field(default_factory=OutputWatch)  # outputs failing, told as it happens

    @property
    def flowing(self) -> bool:
        return self.watchdog is not None and self.watchdog.status == STREAMING

    def rate_hz(self, now_s: float) -> float:
        self.recent = [(t, n) for t, n in self.recent if now_s - t <= 2.0]
        if len(self.recent) < 2:
            return 0.0
        span = now_s - self.recent[0][0]
        return sum(n for _, n in self.recent[1:]) / span if span > 0 else 0.0

    def dropped(self) -> int:
        n = self.reader.dropped if self.reader else 0
        if self.source is not None and hasattr(self.source, "counters"):
            try:
                c = self.source.counters()
                n += int(getattr(c, "dropped", 0) or 0) if not isinstance(c, dict) else int(c.get("dropped", 0))
            except Exception:
                pass
        return n + (self.pipeline.skipped if self.pipeline else 0)


def file_signature(path) -> tuple | None:
    """(modification time ns, size, inode) of a file, None when it cannot be seen."""
    try:
        st_ = os.stat(path)
    except OSError:
        return None
    return (st_.st_mtime_ns, st_.st_size, st_.st_ino)


def model_file_note(path, running) -> tuple[int, str]:
    """What to say about a model file that changed under a running garment: (log level, text).

    The running model is never swapped: a garment streams the channels it has, and the
    mapping, the calibration and everything held were made for the running model. Another
    channel layout is refused outright; a compatible file is used from the next start.
    """
    from ..recognition import ModelError, load_model
    try:
        new = load_model(path)
    except ModelError as exc:
        return logging.ERROR, f"model file changed but cannot be used ({exc}); the running model keeps going"
    if tuple(new.channel_names) != tuple(running.channel_names):
        return logging.ERROR, (
            f"model file {path} now has {new.n_channels} channels ({', '.join(new.channel_names)}) where this "
            f"garment has {running.n_channels} ({', '.join(running.channel_names)}): refused, the running model "
            "keeps going; put back a model made for this garment before the next start")
    if new.rate_hz != running.rate_hz:
        return logging.ERROR, (
            f"model file {path} now expects {new.rate_hz:g} Hz where the running model has {running.rate_hz:g} Hz: "
            "refused, the running model keeps going")
    return logging.WARNING, (
        f"model file {path} changed ({len(new.classes) - 1} gestures, same channels); the running model keeps "
        "going, the new one is used from the next start")


def train_simulated_model(cfg, path: Path):
    """A small model of a simulated garment's wearer, saved to ``path`` for the next start."""
    from ..garment import GESTURES, Jacket, training_script
    from ..recognition import fit_linear
    from ..sources import Recording
    takes = []
    for session in range(2):
        jacket = Jacket(seed=cfg.seed, wearer=cfg.wearer, session=session)
        rng = np.random.default_rng([cfg.seed, cfg.wearer, session, 11])
        script = training_script(rng, 4) + [(a, 20.0) for a in ("standing", "walking", "fidgeting")]
        takes.append(Recording.from_take(jacket.perform(script), GESTURES))
    model = fit_linear(takes, dict(GESTURES))
    path.parent.mkdir(parents=True, exist_ok=True)
    model.save(path)
    return model


def open_source(cfg, model):
    if cfg.simulated:
        from ..sources.simulated import SimulatedSource
        return SimulatedSource(seed=cfg.seed + 1, wearer=cfg.wearer, session=2, realtime=True)
    from .garment_source import open_garment_source
    return open_garment_source(cfg, model)


class Service:
    """Runs the garments of a ``ServiceConfig`` until ``stop`` is set (see module doc).

    open_fn(destination) opens an output (``bridge.outputs.open_output``); clock is the host
    monotonic clock. on_event(garment name, event, latency) hears every event but the
    continuous controls', after its messages were handed over; latency (a ``Latency``) is
    None when nothing went out for it (disarmed, no mapping). ``serve()`` returns when stopped, with every output closed.
    """

    def __init__(self, config, open_fn, stop: StopFlag | None = None, clock=time.monotonic,
                 on_event=None, timings: DeliveryTimes | None = None):
        self.config = config
        self.open_fn = open_fn
        self.stop = stop or StopFlag()
        self.clock = clock
        self.on_event = on_event
        self.timings = timings
        self._cpu_at_take: float | None = None  # loop thread CPU time when the block in hand was taken
        self.q = Handoff(maxsize=256 * max(1, len(config.garments)))
        self.garments: list[Garment] = []
        self.status = st.StatusStream(config.status_to)
        self.control = None
        self.reloads_asked = 0       # SIGHUP: an integer store, safe from a signal handler
        self._reloads_seen = 0
        self.started_s = clock()

    # -- start ----------------------------------------------------------------------------

    def open_control(self) -> None:
        from .control import ControlPort, parse_host_port
        host, port = parse_host_port(self.config.listen)
        self.control = ControlPort(host, port, self.config.token)  # TokenMissing: refuse to start
        h, p = self.control.address[:2]
        log.info("control port %s:%s (arm, disarm, panic, layer, reload, rebaseline, status); never presses keys", h, p)
        if self.config.token:
            log.info("control port needs the shared token from the config on every message")

    def start_garments(self) -> None:
        from ..mapping import MappingError, MappingWatcher
        from ..recognition import ModelError, load_model
        for i, cfg in enumerate(self.config.garments):
            g = Garment(cfg.name, cfg, i)
            self.garments.append(g)
            try:
                if cfg.simulated and not Path(cfg.model).is_file():
                    log.info("%s: no model at %s; training one on the simulated wearer ...", g.name, cfg.model)
                    t0 = time.monotonic()
                    g.model = train_simulated_model(cfg, Path(cfg.model))
                    log.info("%s: trained in %.1f s, saved as %s", g.name, time.monotonic() - t0, cfg.model)
                else:
                    g.model = load_model(cfg.model)
                g.model_sig = file_signature(cfg.model)
                g.watcher = MappingWatcher(cfg.mapping, g.model.classes, g.model.kinds,
                                           g.model.channel_names) if cfg.mapping else None
                mapping = g.watcher.mapping if g.watcher else None
                from ..mapping.watcher import nothing_to_send
                note = nothing_to_send(mapping, cfg.mapping)
                if note:
                    log.warning("%s: %s", g.name, note)
                g.pipeline = Pipeline(g.model, mapping, g.name, settle=self.settling())
                if mapping is not None:
                    self.reconcile(g, None, mapping)
                g.source = open_source(cfg, g.model)
            except (ModelError, MappingError, OSError, ValueError) as exc:
                self.fail(g, str(exc))
                continue
            g.watchdog = Watchdog(cfg.stall_s)
            self.sync_hold(g)  # the pipeline starts calibrating ...
            if not getattr(g.source, "connected", True):   # ... once the garment is there: say why it is not
                hint = ("" if any(w in g.source.last_error for w in ("drape ports", "another program"))
                        else "; `drape ports` lists the serial ports")
                g.state, g.note = WAITING, f"waiting for the garment ({g.source.last_error}{hint})"
                log.warning("%s: %s", g.name, g.note)
            g.reader = Reader(i, g.source, self.q)
            where = "simulated jacket" if cfg.simulated else (cfg.port or f"OSC {cfg.listen}")
            m = g.pipeline.mapping if g.pipeline is not None else None
            log.info("%s: %s, model %s (%d gestures), mapping %s%s", g.name, where, Path(cfg.model).resolve(),
                     len(g.model.classes) - 1, Path(cfg.mapping).resolve() if cfg.mapping else "none",
                     f"; {m.arming_at_start(g.outputs)}" if m is not None else "")

        for g in self.garments:  # read only once every model is ready: none waits on another's training
            if g.reader is not None and g.state != FAILED:
                g.reader.start()
                g.ran = True

    def none_started(self) -> str:
        """After ``start_garments``: why no garment could start ("" when one did). A garment
        waiting for its device has started (it runs once the device is there)."""
        if self.live():
            return ""
        return "; ".join(f"{g.name}: {g.note}" for g in self.garments) or "no garment in the config"

    def opener(self, g: Garment):
        """How this garment's outputs are opened: no keys for samples from the network."""
        return keys_only_for_local_input(self.open_fn, samples_over_network(g.cfg))

    def reconcile(self, g: Garment, old, new) -> None:
        """``reconcile_outputs`` for a garment: a destination that could not be opened is a
        warning, in the log and every view (its cues go nowhere)."""
        def warn(text: str) -> None:
            log.warning("%s: %s", g.name, text)
            self.status.send([st.notice(g.name, text)])
        # kept in the garment's state, so a view started later (or a status request) sees it too
        g.left_out = reconcile_outputs(g.outputs, old, new, self.opener(g),
                                       lambda text: log.info("%s: %s", g.name, text), warn)

    def fail(self, g: Garment, why: str) -> None:
        g.state, g.note = FAILED, why
        # At start the others are not all tried yet: the line after start says who runs
        # (and a start where none could ends, see none_started).
        others = [x for x in self.garments if x is not g and x.state != FAILED]
        tail = ("" if not g.ran else "; the other garments carry on" if others else
                "; no garment is running now" if len(self.garments) > 1 else "")
        log.error("%s: %s%s", g.name, why, tail)
        self.status.send([st.notice(g.name, f"failed: {why}")])
        if g.pipeline is not None:
            self.deliver(g, g.pipeline.stop(), self.clock(), after="the failure")
            self.send(g, g.pipeline.let_go())

    def settling(self) -> Settling:
        """Every garment's calibration settings, from [calibration]: pass the same value to
        ``replay_events(..., settle=...)`` to replay a take of a garment's raw stream."""
        return Settling(max(self.config.hold_still_s, 0.05), self.config.detect_shift, start_holding=True)

    def begin_hold(self, g: Garment, why: str) -> None:
        """Rebaseline: a hold-still capture from the next sample; postures held are released."""
        self.deliver(g, g.pipeline.rebaseline(why), self.clock(), after="the command")
        self.sync_hold(g)

    def sync_hold(self, g: Garment) -> None:
        """Mirror the pipeline's captures into the garment's state, log and notices."""
        p = g.pipeline
        for h in p.holds[g.holds_told:]:
            if h.state == SETTLING:  # begun by a shift inside feed
                log.warning("%s: %s", g.name, h.why)
                self.status.send([st.notice(g.name, h.why)])
        g.holds_told = len(p.holds)
        for h in p.holds[g.ends_told:]:
            if h.end_sample is None:
                break
            if h.done:
                log.info("%s: baseline set from %.1f s of holding still", g.name,
                         (h.end_sample - h.start_sample) / g.model.rate_hz)
            g.ends_told += 1
        if p.holding:
            g.state, g.note = p.holding, p.holds[-1].why
        elif g.state in (CALIBRATING, SETTLING, WAITING):
            g.state, g.note = RUNNING, ""

    # -- the loop ---------------------------------------------------------------------------

    def serve(self) -> None:
        next_levels = next_state = next_alive = self.clock()
        levels_every = 1.0 / self.config.levels_hz
        try:
            next_house = self.clock()
            while not self.stop.stopped:
                try:
                    items = [self.q.get(timeout_s=0.02)]
                except queue.Empty:
                    items = []
                items += self.q.take_all()
                for item in join_blocks(items) if len(items) > 1 else items:
                    self.take(*item)
                now = self.clock()
                if now >= next_house:  # control messages, reloads, output failures: 100 times a second is soon enough
                    next_house = now + 0.01
                    self.housekeeping(now)
                if now >= next_levels:
                    next_levels = now + levels_every
                    self.send_levels()
                if now >= next_state:
                    next_state = now + 0.5
                    self.status.send(self.state_messages(now))
                if now >= next_alive:
                    next_alive = now + 1.0
                    self.status.send([st.alive(now - self.started_s, len(self.garments), os.getpid())])
        finally:
            self.shutdown()

    def take(self, index: int, block) -> None:
        g = self.garments[index]
        if g.state == FAILED:
            return
        if block is None:
            self.fail(g, g.reader.error)
            return
        now = self.clock()
        n = len(block)
        step = g.watchdog.step(now, n, getattr(g.source, "connected", True))
        if n == 0:
            self.watch(g, step)
            return
        self.watch(g, step)
        if g.state == WAITING:
            text = f"the garment is there; hold still: calibrating ({self.settling().hold_still_s:g} s)"
            log.info("%s: %s", g.name, text)
            self.status.send([st.notice(g.name, text)])
        g.recent.append((now, n))
        g.last_freq = block.freq_hz[-1]
        if self.timings is not None:
            self._cpu_at_take = time.thread_time()
        events = g.pipeline.feed(block.freq_hz, early=lambda ev: self.deliver(g, ev, block.arrived_s))
        self.deliver(g, events, block.arrived_s)
        self._cpu_at_take = None
        self.sync_hold(g)
        if g.state in (CALIBRATING, SETTLING):
            self.send(g, g.pipeline.dispatches([]))  # stream time went on: note-offs come due

    def watch(self, g: Garment, step) -> None:
        status, reason = step
        if status == NO_DATA and reason and g.note != reason and g.state == RUNNING:
            log.warning("%s: no data (%s); postures released, outputs stay open", g.name, reason)
            self.deliver(g, g.pipeline.stop(), self.clock(), after="no data was seen")
            g.note = reason
        elif status == STREAMING and g.note and g.state == RUNNING:
            log.info("%s: data flowing again", g.name)
            g.note = ""

    def send(self, g: Garment, dispatches) -> set:
        """Hand each dispatch to its output; returns the destinations that have none (left out)."""
        missing = set()
        for d in dispatches:
            out = g.outputs.get(d.destination)
            if out is not None:
                out.send(d.message)
            else:
                missing.add(d.destination)
        return missing

    def deliver(self, g: Garment, events, arrived_s: float, after: str = SAMPLE) -> None:
        """Route and send a garment's events; log each, tell the status stream.

        ``arrived_s``: host time of what set them off, s; ``after`` names it: the last sample
        of the block (``SAMPLE``) or, for events a command, a signal or a stop caused, that
        cause, so a log line never claims a latency from a sample that did not cause it."""
        if not events:
            return
        decided = self.clock()
        dispatches, why_not = g.pipeline.dispatches_marked(events)
        missing = self.send(g, dispatches)
        sent = self.clock()
        lat = Latency(arrived_s, decided, sent)
        nowhere = f"; not sent to {', '.join(sorted(missing))} (left out)" if missing else ""
        if self.timings is not None:
            cpu = time.thread_time() - self._cpu_at_take if self._cpu_at_take is not None else float("nan")
            self.timings.record(g.index, events, lat, cpu)
        out = []
        for e, not_sent in zip(events, why_not):
            if e.kind == "control":
                continue
            out.append(st.event(g.name, e, arrived_s, lat.decide_ms, lat.send_ms, not not_sent,
                                not_sent))
            what = f"{g.name}: {e.kind} {e.gesture}{' ' + printable(e.detail) if e.detail else ''} at {e.t_s:.2f} s"
            if not_sent:
                log.info("%s; %s: not sent", what, not_sent)
                if self.on_event:
                    self.on_event(g.name, e, None)
                continue
            if after != SAMPLE:
                log.info("%s; sent %.2f ms after %s%s", what, lat.send_ms, after, nowhere)
            else:
                g.latencies_ms.append(lat.send_ms)
                del g.latencies_ms[:-1000]
                log.info("%s; decided %.2f ms, sent %.2f ms after %s%s", what, lat.decide_ms, lat.send_ms, after,
                         nowhere)
            if self.on_event:
                self.on_event(g.name, e, lat)
        self.status.send(out)

    def housekeeping(self, now: float) -> None:
        if self.stop.panics:
            self.stop.panics = 0
            for g in self.live():
                self.deliver(g, g.pipeline.command("panic", "signal"), now, after="the signal")
        if self.reloads_asked != self._reloads_seen:
            self._reloads_seen = self.reloads_asked
            self.command("reload", "", "", None, source="SIGHUP")
        if self.control is not None:
            for cmd, detail, target, peer in self.control.poll():
                self.command(cmd, detail, target, peer)
            ignored = self.control.take_ignored()
            if ignored:  # by reason, so none is lost behind the last one
                log.warning("control messages ignored: %s (last: %s)", ignored, self.control.last_ignored)
        for g in self.live():
            if g.watcher is not None:
                change = g.watcher.poll(now)
                if change is not None:
                    self.apply_reload(g, change)
            if g.state != RUNNING and g.state != FAILED:  # stream time may move while holding
                self.send(g, g.pipeline.dispatches([]))
            for text in g.failures.poll(g.outputs, now):
                log.warning("%s: %s", g.name, text)
                self.status.send([st.notice(g.name, text)])
            r = g.pipeline.router
            if r is not None and r.warnings:
                for w in r.warnings:
                    log.warning("%s: %s", g.name, w)
                r.warnings.clear()

    def live(self) -> list[Garment]:
        return [g for g in self.garments if g.state != FAILED and g.pipeline is not None]

    def command(self, cmd: str, detail: str, target: str, peer, source: str = "control") -> None:
        """One control message (or a signal: ``source``); the sender gets an acknowledgement
        (``ControlPort.acknowledge``) with what was done, or why it was refused."""
        outcome, text = self.carry_out(cmd, detail, target, peer, source)
        if outcome == REFUSED:
            log.warning("%s: %s refused: %s", source, cmd, text)
        elif outcome == PARTLY:
            log.warning("%s: %s partly done: %s", source, cmd, text)
        if outcome != REFUSED and cmd != "status":
            # The state a command set goes out at once, not at the next half-second tick: a
            # rebaseline's short hold-still can end before that tick, and a view would never see it.
            self.status.send(self.state_messages(self.clock()))
        if peer is not None and self.control is not None and (cmd != "status" or outcome != DONE):
            self.control.acknowledge(peer, outcome, cmd, text)

    def carry_out(self, cmd: str, detail: str, target: str, peer, source: str = "control") -> tuple[str, str]:
        """(outcome, text): DONE, PARTLY (some garments did it and some did not: the text
        names both, then says why each that did not) or REFUSED."""
        if cmd == "status":  # answered with the state itself, failed garments included
            asked = [g for g in self.garments if not target or g.name == target]
            if not asked:
                return REFUSED, f"no garment {printable(target)!r} (have {', '.join(g.name for g in self.garments) or 'none'})"
            if peer is not None and self.control is not None:
                now = self.clock()
                self.control.reply(peer, [st.alive(now - self.started_s, len(asked), os.getpid())]
                                   + self.state_messages(now, asked))
            return DONE, "status sent"
        chosen = [g for g in self.live() if not target or g.name == target]
        if target and not chosen:
            return REFUSED, (f"no such running garment {printable(target)!r} (have "
                             f"{', '.join(g.name + ('' if g.state != FAILED else ' (failed)') for g in self.garments) or 'none'})")
        # A command to every garment cannot reach a failed one: the answer says so, with why,
        # so nobody reads "done" as "every garment did it".
        passed = [] if target else [f"{g.name}: {self.failed_how(g)}" for g in self.garments if g.state == FAILED]
        if not chosen:
            return REFUSED, "; ".join(["no garment is running"] + passed)
        if cmd == "layer":
            without = [g.name for g in chosen if g.pipeline.mapping is None or detail not in g.pipeline.mapping.layers]
            if len(without) == len(chosen):
                return REFUSED, "; ".join([f"no layer {printable(detail)!r} in the mapping of {', '.join(without)}"]
                                          + passed)
            chosen = [g for g in chosen if g.name not in without]
        log.info("%s: %s%s asked for %s", "control message" if source == "control" else source, cmd,
                 f" {printable(detail)}" if detail else "", target or "every garment")
        said, refused = [], []
        took, missed = [], []   # garment names, for the head of a partial answer and the outcome
        short = []              # garments that reloaded with a destination that could not be opened
        for g in chosen:
            if cmd == "reload":
                self.check_model(g)
                if g.watcher is None and not target:   # nothing of its own to reload: neither took nor missed
                    said.append(f"{g.name}: no mapping file, nothing to reload")
                elif g.watcher is None:
                    refused.append(f"{g.name}: no mapping file")
                    missed.append(g.name)
                else:
                    change = g.watcher.reload_now()
                    if self.apply_reload(g, change):
                        said.append(f"{g.name}: mapping reloaded ({len(g.pipeline.mapping.rules)} rules)"
                                    + left_out_words(g.left_out))
                        took.append(g.name)
                        if g.left_out:   # applied, but some of its cues go nowhere
                            short.append(g.name)
                    else:
                        refused.append(f"{g.name}: mapping not reloaded, the last good one keeps running; fix: "
                                       + "; ".join(change.problems))
                        missed.append(g.name)
            elif cmd == "rebaseline":
                why = self.no_data(g)
                if why:   # nobody to hold still for: state, note and the arrival message stay as they are
                    refused.append(no_rebaseline(g.name, why, g.pipeline.holding))
                    missed.append(g.name)
                else:
                    self.begin_hold(g, "hold still: re-baselining")
                    said.append(f"{g.name}: hold still, re-baselining ({self.settling().hold_still_s:g} s)")
                    took.append(g.name)
            else:  # arm, disarm, panic, layer: Pipeline.command never presses keys
                self.deliver(g, g.pipeline.command(cmd, detail), self.clock(), after="the command")
                r = g.pipeline.router
                now = "" if r is None else f"{'armed' if r.armed else 'disarmed'}" + (f", layer {r.layer!r}" if r.layer else "")
                did = {"arm": "armed", "disarm": "disarmed, keys and notes let go",
                       "panic": "panic, every note, key and light released", "layer": f"layer {detail!r}"}[cmd]
                said.append(f"{g.name}: {did}" + (f" (now {now})" if now and cmd in ("panic", "layer") else ""))
                took.append(g.name)
        if cmd == "layer":
            said += [f"{n}: no layer {printable(detail)!r}, unchanged" for n in
                     [g.name for g in self.live() if (not target or g.name == target) and g not in chosen]]
        if cmd == "reload" and not took and not refused:
            return REFUSED, "; ".join(["no running garment has a mapping file to reload"] + passed)
        if not refused:
            return (PARTLY if short else DONE), "; ".join(said + passed)
        if not took:
            return REFUSED, "; ".join(refused + said + passed)
        # Some garments took it, some did not: an operator must not read this as a refusal
        # (the garments that took it run the new mapping) nor as a success.
        return PARTLY, (f"{cmd} took effect on {', '.join(took)}, NOT on {', '.join(missed)}: "
                        + "; ".join(refused + said + passed))

    @staticmethod
    def failed_how(g: Garment) -> str:
        """A failed garment's part of an answer: when it failed, and why."""
        return f"failed {'while running' if g.ran else 'at start'}, not running ({g.note})"

    def no_data(self, g: Garment) -> str:
        """Why this garment has no data flowing ("" when it has): its device not there yet
        (the waiting note), gone, or silent for longer than its stall time."""
        if g.state == WAITING:
            return g.note
        if not g.flowing:
            return g.watchdog.reason if g.watchdog is not None else "no sample yet"
        return ""

    def check_model(self, g: Garment) -> None:
        """On reload: say what became of a model file replaced on disk (never swapped live)."""
        sig = file_signature(g.cfg.model)
        if sig is None or sig == g.model_sig:
            return
        g.model_sig = sig
        level, text = model_file_note(g.cfg.model, g.model)
        log.log(level, "%s: %s", g.name, text)
        self.status.send([st.notice(g.name, text)])

    def apply_reload(self, g: Garment, change) -> bool:
        if change.mapping is None:
            text = "mapping not reloaded, the last good one keeps running; fix: " + "; ".join(change.problems)
            log.error("%s: %s", g.name, text)
            self.status.send([st.notice(g.name, text)])
            return False
        old = g.pipeline.mapping
        g.pipeline.swap_mapping(change.mapping)
        self.reconcile(g, old, change.mapping)
        text = f"mapping reloaded: {len(change.mapping.rules)} rules"
        log.info("%s: %s", g.name, text)
        self.status.send([st.notice(g.name, text)])
        return True

    # -- status -------------------------------------------------------------------------------

    def state_messages(self, now: float, garments=None) -> list[bytes]:
        out = []
        for g in self.garments if garments is None else garments:
            p = g.pipeline
            armed = bool(p.router.armed) if p is not None and p.router is not None else bool(p and p.safety.armed)
            layer = p.router.layer if p is not None and p.router is not None else ""
            channels = g.model.channel_names if g.model is not None else ()
            note = g.note
            if g.left_out and g.state != FAILED:
                gone = f"cues to {', '.join(sorted(g.left_out))} go nowhere (left out at start or reload: see the log)"
                note = f"{note}; {gone}" if note else gone
            bad = g.failures.failing() if g.state != FAILED else ""
            if bad:
                note = f"{note}; {bad}" if note else bad
            out += st.garment_state(g.name, g.state, armed, layer, g.flowing and g.state != FAILED,
                                    g.rate_hz(now), g.dropped(), p.samples if p else 0, note, channels,
                                    p.skipped if p else 0)
        return out

    def send_levels(self) -> None:
        out = []
        for g in self.live():
            c = g.pipeline.conditioner.state
            if g.last_freq is None or c.centre_hz is None or g.state != RUNNING:
                continue
            from ..signal import relative_capacitance
            level = relative_capacitance(g.last_freq[None, :], c.centre_hz)[0]
            if c.baseline is not None:
                level = level - c.baseline
            out.append(st.levels(g.name, level))
            out.append(st.top(g.name, g.model.classes, g.pipeline.last_probabilities))
        self.status.send(out)

    # -- stop ---------------------------------------------------------------------------------

    def shutdown(self) -> None:
        """Stop readers, release everything held, close every garment's outputs (closing
        sends notes off, keys up, lights to their safe levels, sACN stream terminated)."""
        for g in self.garments:
            if g.reader is not None:
                g.reader.halt.set()
        for g in self.garments:
            try:
                if g.pipeline is not None:
                    self.deliver(g, g.pipeline.stop(), self.clock(), after="the stop")
                    self.send(g, g.pipeline.let_go())
            finally:
                for name, o in g.outputs.items():
                    o.close()
                    log.info("%s: output %s: %s", g.name, name, closing_summary(o))
                g.outputs.clear()
        for g in self.garments:
            if g.reader is not None:
                g.reader.join(timeout=2.0)
            if g.source is not None:
                try:
                    g.source.close()
                except Exception:
                    pass
        if self.control is not None:
            self.control.close()
        self.status.close()
