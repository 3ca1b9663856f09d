"""The live loop: read a source, run the pipeline, send to outputs, until told to stop.

Between blocks the loop also polls (no threads of its own): a panic asked for by a signal,
commands from the control inbox, and the mapping watcher. A reloaded mapping is swapped in
between blocks, so no window is ever decided half by the old mapping and half by the new.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

from ..decisions import Event
from ..outputs import Output
from ..outputs.base import closing_summary
from ..sources.base import Source
from ..sources.health import NO_DATA, STREAMING, Watchdog
from .control import PARTLY, printable
from .outputwatch import OutputWatch
from .pipeline import Pipeline


@dataclass
class Timing:
    """Per-event latency figures, ms: sample arrival → decision → all messages handed to outputs."""

    decide_ms: float
    send_ms: float
    not_sent: str = ""      # why nothing went out for the event ("disarmed", "no rule due", "no mapping"); "" when sent

    @property
    def disarmed(self) -> bool:
        """The event matched nothing because the garment was disarmed: nothing went out."""
        return self.not_sent == "disarmed"


@dataclass
class StopFlag:
    """Set from a signal handler or another thread to end ``run`` after the current block.

    ``request_panic`` (e.g. from SIGUSR1) asks the loop to release every output at once;
    ``request_reload`` (SIGHUP) asks it to read the mapping file again.
    """

    stopped: bool = False
    reason: str = ""
    panics: int = 0
    reloads: int = 0

    def set(self, reason: str = "") -> None:
        self.stopped, self.reason = True, reason

    def request_panic(self) -> None:
        self.panics += 1  # only an integer store: safe from a signal handler

    def request_reload(self) -> None:
        self.reloads += 1  # the same: the loop does the reading


@dataclass
class RunStats:
    blocks: int = 0
    samples: int = 0
    events: int = 0
    controls: int = 0
    reloads: int = 0
    broken_reloads: int = 0
    holds: int = 0  # times the outputs were held safe because data stopped
    hop_ms: list = field(default_factory=list)


def samples_over_network(cfg) -> str:
    """How a garment's samples can come over the network ("" when they cannot): OSC input, or
    a port given as a pyserial URL that reaches another machine (``socket://``,
    ``rfc2217://``, or one wrapping such a URL). Only a device path, a USB identity or
    ``loop://`` (a test loop in this process) counts as local."""
    if getattr(cfg, "input", "serial") == "osc":
        return 'its samples come over the network (input = "osc")'
    port = str(getattr(cfg, "port", "") or "")
    scheme = port.split("://", 1)[0].lower() if "://" in port else ""
    if scheme and scheme != "loop":
        return f"its port {port!r} is a {scheme}:// URL, which samples can reach from the network"
    return ""


def keys_only_for_local_input(open_fn, network_input: bool | str):
    """``open_fn`` for a garment's destinations, refusing keys when its samples can come over
    the network (``network_input``: true, or the reason from ``samples_over_network``):
    anyone who can send to that port could otherwise type on this computer by sending a
    gesture's samples. Keys stay for garments on a local serial port."""
    if not network_input:
        return open_fn
    why = network_input if isinstance(network_input, str) else 'its samples come over the network (input = "osc")'

    def opener(d):
        if getattr(d, "kind", "") == "keys":
            from ..outputs import OutputUnavailable
            raise OutputUnavailable(f"keys are never pressed for this garment: {why}; use a garment on a local "
                                    "serial port for keys")
        return open_fn(d)
    return opener


def reconcile_outputs(outputs: dict, old, new, open_fn, report=print, warn=None) -> dict:
    """Bring ``outputs`` in line with a reloaded mapping: open new destinations, close
    removed or changed ones (closing releases what they hold), keep the rest running.
    Returns the destinations left out ({name: why}): nothing is sent to them; each is told
    through ``warn`` (default ``report``)."""
    left_out = {}
    old_d = old.destinations if old is not None else {}
    for name, d in old_d.items():
        if name in outputs and new.destinations.get(name) != d:
            o = outputs.pop(name)
            o.close()
            report(f"destination {name!r} closed: {closing_summary(o)}")   # what closing let go of
    for name, d in new.destinations.items():
        if name not in outputs:  # new, changed, or left out before: (re)try
            try:
                outputs[name] = open_fn(d)
                report(f"destination {name!r} opened")
            except Exception as exc:  # a missing system leaves the others running
                left_out[name] = str(exc)
    for name, why in left_out.items():
        (warn or report)(f"destination {name!r} left out, its cues go nowhere: {why}"
                         + ("" if outputs else " (no destination is open: nothing is sent)"))
    return left_out


def left_out_words(left_out: dict) -> str:
    """The part of a reload's answer naming destinations that could not be opened, and why."""
    return "".join(f"; but destination {name!r} could not be opened, its cues go nowhere: {printable(why, 160)}"
                   for name, why in sorted(left_out.items()))


def no_rebaseline(name: str, why: str, holding: bool) -> str:
    """A rebaseline's refusal for a garment whose data does not flow (``why``): nobody is
    there to hold still, and a garment still calibrating does so once its data comes."""
    later = "it calibrates when its data comes" if holding else "not re-baselined; ask again once its data flows"
    return f"{name}: no data ({why}); {later}"


def tell_holds(pipeline: Pipeline, told: int, report, answered=frozenset()) -> int:
    """Report the pipeline's hold-still captures begun since ``told``, except those whose
    index is in ``answered`` (a rebaseline command's answer said it already); returns how
    many are told."""
    from .pipeline import SETTLING
    holds = getattr(pipeline, "holds", [])
    for i, h in enumerate(holds[told:], told):
        if i not in answered:
            report(h.why if h.state == SETTLING else f"{h.why} ({pipeline.settle.hold_still_s:g} s)")
    return len(holds)


def run(source: Source, pipeline: Pipeline, outputs: dict[str, Output], stop: StopFlag | None = None,
        on_event=None, clock=time.monotonic, watcher=None, inbox=None, open_fn=None, report=print,
        stall_s: float | None = None, on_status=None) -> RunStats:
    """Process until the source ends or ``stop`` is set; held postures, notes and keys are
    released on the way out.

    on_event(event, timing) is called for every event after its messages are sent.
    watcher: a ``MappingWatcher`` polled between blocks; open_fn(destination) opens outputs
    for destinations a reload adds. inbox: a ``ControlInbox`` polled between blocks.
    report(text) receives reload results and command notes.
    stall_s: when set, a watchdog declares "no data" once the source is disconnected or has
    given no sample for this long (s); held postures are then released (once) and the loop
    keeps reading, resuming when samples come back. on_status(status, reason) hears each change.
    """
    stop = stop or StopFlag()
    stats = RunStats()
    panics_seen, reloads_seen = stop.panics, stop.reloads
    watchdog = Watchdog(stall_s) if stall_s else None
    failures = OutputWatch()
    marks = hasattr(pipeline, "dispatches_marked")  # a stand-in pipeline may only route
    # The capture at start is told when the first samples arrive: "hold still" while the
    # garment is not there yet would send a performer to stand still for nothing.
    holds_told = 0
    answered: set[int] = set()   # captures begun by a rebaseline command, whose answer told the operator
    reported = None

    def send(dispatches) -> None:
        for d in dispatches:
            out = outputs.get(d.destination)
            if out is not None:
                out.send(d.message)

    def deliver(events: list[Event], arrived: float) -> None:
        decided = clock()
        dispatches, why_not = (pipeline.dispatches_marked(events) if marks else
                               (pipeline.dispatches(events), [""] * len(events)))
        send(dispatches)
        sent = clock()
        for e, not_sent in zip(events, why_not):
            if e.kind == "control":
                stats.controls += 1
            else:
                stats.events += 1
            if on_event:
                on_event(e, Timing((decided - arrived) * 1e3, (sent - arrived) * 1e3, not_sent))

    def apply(change, quiet: bool = False) -> dict:
        """Swap in a reloaded mapping; ``quiet``: the outcome is said by the caller (a command's answer).
        Returns the destinations left out ({name: why}): their cues go nowhere."""
        if change.mapping is None:
            stats.broken_reloads += 1
            if not quiet:
                report(f"mapping not reloaded, the last good one keeps running; fix:\n  " + "\n  ".join(change.problems))
            return {}
        old = pipeline.mapping
        pipeline.swap_mapping(change.mapping)
        stats.reloads += 1
        left_out = {}
        if open_fn is not None:
            left_out = reconcile_outputs(outputs, old, change.mapping, open_fn, report)
        m = change.mapping
        if not quiet:
            report(f"mapping reloaded: {len(m.rules)} rules, {len(m.controls)} controls"
                   + (f", layer {pipeline.router.layer!r}" if m.layers else ""))
        return left_out

    def command(kind: str, detail: str, garment: str) -> tuple[bool | str, str]:
        """One control message: (done, what was done or why it was refused); done is PARTLY
        for a reload whose new destinations could not all be opened."""
        name = pipeline.garment or "garment"
        if garment and garment != pipeline.garment:
            return False, f"no garment {printable(garment)!r} here; this loop runs {name!r}"
        if kind == "status":
            r = pipeline.router
            flow = "running" if reported is None or reported[0] != NO_DATA else f"no data ({reported[1]})"
            bad = failures.failing()   # a dead keys output is no switch that works
            return True, (f"{name}: {flow}, {'armed' if r is None or r.armed else 'disarmed'}"
                          + (f", layer {r.layer!r}" if r is not None and r.layer else "")
                          + f", {pipeline.samples} samples, {pipeline.skipped} skipped as implausible"
                          + (f"; {bad}" if bad else ""))
        if kind == "reload":
            if watcher is None:
                return False, f"{name} has no mapping file to reload"
            change = watcher.reload_now()
            left_out = apply(change, quiet=True)   # the answer below is reported once, as every command's
            if change.mapping is None:
                return False, f"{name}: mapping not reloaded, the last good one keeps running: " + "; ".join(change.problems)
            done = f"{name}: mapping reloaded ({len(change.mapping.rules)} rules)"   # as the service says it
            if left_out:   # applied, but some cues go nowhere: not a plain "done"
                return PARTLY, done + left_out_words(left_out)
            return True, done
        if kind == "layer":
            m = pipeline.mapping
            if m is None or detail not in m.layers:
                have = ", ".join(m.layers) if m is not None and m.layers else "none"
                return False, f"no layer {printable(detail)!r} in the mapping (layers: {have})"
        if kind == "rebaseline":
            if getattr(pipeline, "settle", None) is None:
                return False, f"{name} does not calibrate here (no hold-still capture in this loop)"
            if reported is not None and reported[0] == NO_DATA:   # nobody to hold still for
                return False, no_rebaseline(name, reported[1], pipeline.holding)
            deliver(pipeline.rebaseline(), clock())
            # The answer names the garment and the hold's length: the capture is not told again
            # when its first samples come in.
            answered.add(len(pipeline.holds) - 1)
            return True, f"{name}: hold still, re-baselining ({pipeline.settle.hold_still_s:g} s)"
        if kind not in ("arm", "disarm", "panic", "layer"):
            return False, f"{kind} is not available in the single-garment loop (use a service config)"
        deliver(pipeline.command(kind, detail), clock())
        r = pipeline.router
        # arm and disarm say the state themselves; a panic disarms, a layer may not be the only change
        state = "" if r is None or kind in ("arm", "disarm") else \
            f"; now {'armed' if r.armed else 'disarmed'}" + (f", layer {r.layer!r}" if r.layer else "")
        done = {"arm": "armed", "disarm": "disarmed: keys and notes let go",
                "panic": "panic: every note, key and light released", "layer": f"layer {detail!r}"}[kind]
        return True, f"{name}: {done}{state}"

    def poll() -> None:
        nonlocal panics_seen, reloads_seen
        if stop.panics != panics_seen:
            panics_seen = stop.panics
            deliver(pipeline.command("panic", "signal"), clock())
        if inbox is not None:
            for kind, detail, garment, peer in inbox.receive():
                ok, text = command(kind, detail, garment)
                report({True: "", False: "refused: "}.get(ok, "partly done: ") + text)
                inbox.acknowledge(peer, ok, kind, text)
            ignored = inbox.take_ignored()
            if ignored:
                report(f"control messages ignored: {ignored}")
        if stop.reloads != reloads_seen:  # SIGHUP: read the mapping file again now
            reloads_seen = stop.reloads
            if watcher is not None:
                apply(watcher.reload_now())
            else:
                report("reload asked for, but this garment has no mapping file")
        if watcher is not None:
            change = watcher.poll(clock())
            if change is not None:
                apply(change)
        for text in failures.poll(outputs, clock()):
            report(text)
        if pipeline.router is not None and pipeline.router.warnings:
            for w in pipeline.router.warnings:
                report(w)
            pipeline.router.warnings.clear()

    try:
        while not stop.stopped and not source.ended:
            poll()
            block = source.read()
            if watchdog is not None:
                now = watchdog.step(clock(), len(block), getattr(source, "connected", True))
                if now != reported:
                    if reported is not None and reported[0] == STREAMING and now[0] == NO_DATA:
                        stats.holds += 1  # hold outputs safe: let go of every posture, once
                        deliver(pipeline.stop(), clock())
                    if on_status and (reported is not None or now[0] == STREAMING or now[1] == "device gone"):
                        on_status(*now)
                    reported = now
            if len(block) == 0:
                continue
            events = pipeline.feed(block.freq_hz, early=lambda ev: deliver(ev, block.arrived_s))
            stats.blocks += 1
            stats.samples += len(block)
            deliver(events, block.arrived_s)
            if len(getattr(pipeline, "holds", ())) != holds_told:  # calibration and re-settling, said as the service says them
                holds_told = tell_holds(pipeline, holds_told, report, answered)
    finally:
        if stop.panics != panics_seen:
            deliver(pipeline.command("panic", "signal"), clock())
        deliver(pipeline.stop(), clock())
        send(pipeline.let_go())
    return stats
