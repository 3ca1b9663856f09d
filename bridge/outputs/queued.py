"""A bounded queue and a worker thread in front of any output, so sending never waits.

The pipeline calls ``send`` from its own thread; it only appends to a queue (or counts a
drop when the queue is full) and returns. The worker thread does the slow part: sockets,
MIDI ports, key presses, fades. A dead or slow destination therefore costs dropped
messages, never a late decision.

A ``Release`` jumps the queue: what is still waiting is discarded (counted as dropped)
and the output releases everything it holds before anything sent later.

Every worker is stopped before the interpreter goes: an output still open when the process
exits (an exception past the caller's ``close``, a script that never called it) is closed
by an exit hook, so it releases what it holds and its worker is joined while the interpreter
is whole, rather than frozen mid-call in a library (MIDI port, X connection) at shutdown.
"""

from __future__ import annotations

import atexit
import threading
import time
from collections import deque

from ..mapping.messages import Release
from .base import Output


# Outputs whose worker still runs (the worker holds its output anyway; it leaves this set as
# it ends, so the set keeps nothing alive longer).
_running: set = set()
_running_lock = threading.Lock()


@atexit.register
def _close_at_exit() -> None:
    """Close every output still open when the interpreter exits (runs before finalisation,
    while the daemon workers can still finish). Short waits: exit must not hang on a dead
    destination."""
    with _running_lock:
        still = list(_running)
    for out in still:
        out.close(drain_s=0.2, join_s=2.0)


class QueuedOutput(Output):
    """Wraps ``inner``; ``send`` never blocks. ``stats`` counts what the worker delivered."""

    def __init__(self, inner: Output, capacity: int = 256, clock=time.monotonic):
        if capacity < 1:
            raise ValueError("queue capacity must be at least 1")
        super().__init__(inner.name)
        self.inner = inner
        self.capacity = capacity
        self._clock = clock
        self._items: deque = deque()
        self._cond = threading.Condition()
        self._release: Release | None = None
        self._accepting = True
        self._stopping = False
        self._busy = False
        # A daemon thread, so a forgotten close never blocks exit; _close_at_exit stops it first.
        self._thread = threading.Thread(target=self._work, name=f"output-{inner.name}", daemon=True)
        with _running_lock:
            _running.add(self)
        self._thread.start()

    # -- the pipeline's side -------------------------------------------------------------
    def send(self, message) -> bool:
        """Queue one message; False when it was dropped (queue full or output closing)."""
        with self._cond:
            if not self._accepting:
                self._drop("output closed")
                return False
            if isinstance(message, Release):
                self._release = Release(disarm=message.disarm or (self._release is not None and self._release.disarm))
                discarded = len(self._items)
                self._items.clear()
                self.stats.dropped += discarded
                self._cond.notify()
                return True
            if len(self._items) >= self.capacity:
                self.stats.overflowed += 1
                self._drop(f"queue full ({self.capacity} waiting)")
                return False
            self._items.append(message)
            self._cond.notify()
            return True

    def pending(self) -> int:
        """Messages waiting in the queue (not counting one being sent)."""
        with self._cond:
            return len(self._items)

    def close(self, drain_s: float = 0.5, join_s: float = 3.0) -> None:
        """Let the queue drain for up to ``drain_s`` seconds, then release everything held,
        close the output and stop the worker (waiting at most ``join_s`` for it)."""
        with self._cond:
            if not self._stopping:  # a second close only waits for the worker again
                self._accepting = False
                deadline = self._clock() + drain_s
                while (self._items or self._release or self._busy) and self._thread.is_alive():
                    left = deadline - self._clock()
                    if left <= 0:
                        break
                    self._cond.wait(min(left, 0.05))
                self._stopping = True
                self._cond.notify()
        self._thread.join(join_s)
        if self._thread.is_alive():
            self.stats.last_error = f"worker still busy after {drain_s + join_s:.1f} s; left running as a daemon thread"

    # -- the worker's side ---------------------------------------------------------------
    def _drop(self, why: str) -> None:
        self.stats.dropped += 1
        self.stats.last_error = why

    def _deliver(self, message) -> None:
        try:
            ok = self.inner.send(message)
            err = self.inner.stats.last_error
        except Exception as exc:  # a bug or a refused message must not kill the worker
            ok, err = False, f"{type(exc).__name__}: {exc}"
        with self._cond:
            if ok:
                self.stats.sent += 1
            else:
                self._drop(err)

    def _tick(self) -> float | None:
        now = self._clock()
        try:
            wait = self.inner.tick(now)
        except Exception as exc:
            with self._cond:
                self.stats.last_error = f"{type(exc).__name__}: {exc}"
            return 0.5
        return None if wait is None else now + max(0.0, wait)

    def _work(self) -> None:
        due: float | None = None
        try:
            while True:
                with self._cond:
                    while not (self._items or self._release or self._stopping):
                        timeout = None if due is None else due - self._clock()
                        if timeout is not None and timeout <= 0:
                            break
                        self._cond.wait(timeout)
                    release, self._release = self._release, None
                    if self._stopping and release is None:
                        self.stats.dropped += len(self._items)
                        self._items.clear()
                        break
                    message = None
                    if release is None and self._items:
                        message = self._items.popleft()
                    self._busy = release is not None or message is not None
                if release is not None:
                    self._deliver(release)
                elif message is not None:
                    self._deliver(message)
                due = self._tick()
                with self._cond:
                    self._busy = False
                    self._cond.notify_all()
        finally:
            try:
                self.inner.close()  # every output releases what it holds when closed
            except Exception as exc:
                self.stats.last_error = f"closing: {type(exc).__name__}: {exc}"
            with self._cond:
                self._busy = False
                self._cond.notify_all()
            with _running_lock:
                _running.discard(self)
