"""The queue in front of every output: sending never waits, drops are counted, Release jumps
the queue, close releases and stops the worker. Behaviour of our own design; no outside source."""

import threading

from bridge.mapping.messages import OscMessage, Release
from bridge.outputs import Output, QueuedOutput


class Gate(Output):
    """A fake destination that blocks in _send until opened, and records what it got."""

    def __init__(self, fail_on=None):
        super().__init__("gate")
        self.open = threading.Event()
        self.entered = threading.Event()
        self.got = []
        self.closed = False
        self.fail_on = fail_on

    def _send(self, message):
        self.entered.set()
        self.open.wait()
        if self.fail_on is not None and message == self.fail_on:
            raise TypeError("refused")
        self.got.append(message)

    def close(self):
        self.got.append("closed")
        self.closed = True


def _send_all(out, messages, within_s=5.0):
    """Send from another thread; fail if that thread is still sending after within_s."""
    results = []
    t = threading.Thread(target=lambda: results.extend(out.send(m) for m in messages))
    t.start()
    t.join(within_s)
    assert not t.is_alive(), "send blocked behind a stuck destination"
    return results


def test_send_never_waits_for_a_stuck_destination_and_counts_drops():
    inner = Gate()
    out = QueuedOutput(inner, capacity=8)
    out.send(OscMessage("/first"))
    assert inner.entered.wait(5)  # the worker is now stuck inside the destination
    results = _send_all(out, [OscMessage("/n", (i,)) for i in range(100)])
    assert results.count(True) == 8 and results.count(False) == 92
    assert out.stats.dropped == 92 and out.stats.overflowed == 92
    assert "queue full" in out.stats.last_error
    inner.open.set()
    out.close()
    assert out.stats.sent == 9
    assert inner.got[-1] == "closed" and len(inner.got) == 10


def test_release_jumps_the_queue_and_discards_what_waits():
    inner = Gate()
    out = QueuedOutput(inner, capacity=50)
    out.send(OscMessage("/held"))
    assert inner.entered.wait(5)
    for i in range(10):
        out.send(OscMessage("/late", (i,)))
    out.send(Release())
    out.send(OscMessage("/after"))
    inner.open.set()
    out.close()
    assert inner.got == [OscMessage("/held"), Release(), OscMessage("/after"), "closed"]
    assert out.stats.dropped == 10


def test_a_failing_message_is_counted_and_the_worker_goes_on():
    inner = Gate(fail_on=OscMessage("/bad"))
    inner.open.set()
    out = QueuedOutput(inner)
    out.send(OscMessage("/bad"))
    out.send(OscMessage("/good"))
    out.close()
    assert out.stats.sent == 1 and out.stats.dropped == 1
    assert "TypeError" in out.stats.last_error
    assert inner.got == [OscMessage("/good"), "closed"]


def test_close_returns_even_when_the_destination_never_returns():
    inner = Gate()
    out = QueuedOutput(inner)
    out.send(OscMessage("/stuck"))
    assert inner.entered.wait(5)
    t = threading.Thread(target=out.close, kwargs={"drain_s": 0.1, "join_s": 0.2})
    t.start()
    t.join(5)
    assert not t.is_alive()
    assert "still busy" in out.stats.last_error
    assert out.send(OscMessage("/after-close")) is False
    inner.open.set()  # let the daemon thread finish; it closes the destination on its way out
    out._thread.join(5)
    assert inner.closed


def test_ticks_run_on_the_worker_when_asked():
    class Ticking(Output):
        def __init__(self):
            super().__init__("ticking")
            self.ticks = 0
            self.done = threading.Event()

        def _send(self, message):
            pass

        def tick(self, now_s):
            self.ticks += 1
            if self.ticks >= 5:
                self.done.set()
                return None
            return 0.001

    inner = Ticking()
    out = QueuedOutput(inner)
    out.send(OscMessage("/start"))
    assert inner.done.wait(5)
    out.close()
    assert inner.ticks == 5


def test_a_release_sent_just_before_close_is_still_delivered():
    inner = Gate()
    inner.open.set()
    out = QueuedOutput(inner)
    out.send(Release())
    out.close()
    assert inner.got == [Release(), "closed"]
