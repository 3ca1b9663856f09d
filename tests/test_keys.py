"""Keystrokes: key names, press/release order, letting go on every path, and real X11 key
events received by a window under Xvfb (the X server as the independent peer)."""

import importlib.util
import os
import select
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from bridge.mapping.keynames import KEY_NAMES, check_key_name
from bridge.mapping.messages import Arm, Destination, KeyAction, Release
from bridge.outputs import OutputUnavailable, open_output
from bridge.outputs.keys import Keyboard, KeyOutput, PynputKeyboard, uinput_code_names

HELPERS = Path(__file__).parent / "helpers"
REPO = Path(__file__).parent.parent


class Recorder(Keyboard):
    def __init__(self, fail_on_press=None):
        self.events = []
        self.fail_on_press = fail_on_press
        self.closed = False

    def press(self, key):
        if key == self.fail_on_press:
            raise OSError("device gone")
        self.events.append(("press", key))

    def release(self, key):
        self.events.append(("release", key))

    def close(self):
        self.closed = True


def test_key_names_are_checked_with_a_hint():
    assert check_key_name("f24") is None and check_key_name("page_up") is None and check_key_name("super") is None
    assert "write 'enter'" in check_key_name("Enter")
    assert "'page_up'" in check_key_name("pageup")
    assert check_key_name("f25") is not None and check_key_name(3) is not None
    with pytest.raises(ValueError):
        KeyAction(("ctrl", "sss"))
    with pytest.raises(ValueError):
        KeyAction(("a",), "hold")


def test_combination_presses_in_order_and_releases_in_reverse():
    # Common practice, no source: a shortcut is modifiers down, key down, then up in reverse order.
    kb = Recorder()
    out = KeyOutput("k", kb)
    out.send(KeyAction(("ctrl", "shift", "s")))
    assert kb.events == [("press", "ctrl"), ("press", "shift"), ("press", "s"),
                         ("release", "s"), ("release", "shift"), ("release", "ctrl")]
    assert out.held == []


def test_held_keys_survive_taps_and_go_up_on_release_and_close():
    kb = Recorder()
    out = KeyOutput("k", kb)
    out.send(KeyAction(("shift",), "down"))
    out.send(KeyAction(("shift", "a")))          # shift is held: the tap must not let it go
    out.send(KeyAction(("space", "alt"), "down"))
    assert out.held == ["shift", "space", "alt"]
    out.send(KeyAction(("space",), "up"))
    out.send(Release())
    assert kb.events[-3:] == [("release", "space"), ("release", "alt"), ("release", "shift")]
    out.send(KeyAction(("ctrl",), "down"))
    out.close()
    assert kb.events[-1] == ("release", "ctrl") and kb.closed and out.held == []


def test_a_failing_press_lets_go_of_what_it_pressed():
    kb = Recorder(fail_on_press="c")
    out = KeyOutput("k", kb)
    assert out.send(KeyAction(("a", "b", "c"), "down")) is False
    assert kb.events == [("press", "a"), ("press", "b"), ("release", "b"), ("release", "a")]
    assert out.held == [] and "device gone" in out.stats.last_error


class DeadServer(Keyboard):
    """A keyboard whose display went away: every press and release fails, as pynput's does."""

    def press(self, key):
        raise ConnectionError("Display connection closed by server")

    release = press


def test_a_keyboard_whose_display_went_away_is_opened_anew_at_the_next_key():
    """A switch whose X server restarted (a logout and login) must work again without
    restarting drape: the next key action opens a new keyboard; until one opens, each key
    fails and is counted."""
    opened, fresh = [], Recorder()

    def reopen():
        opened.append(1)
        if len(opened) == 1:
            raise OutputUnavailable("keys: cannot open the display")   # not back yet
        return fresh
    out = KeyOutput("k", DeadServer(), reopen=reopen)
    assert out.send(KeyAction(("space",))) is False                    # the display just went
    assert out.send(KeyAction(("space",))) is False and "still unavailable" in out.stats.last_error
    assert out.send(KeyAction(("enter",))) is True                     # back: a new connection
    assert fresh.events == [("press", "enter"), ("release", "enter")] and len(opened) == 2
    out.send(KeyAction(("a",)))
    assert len(opened) == 2                                            # a working keyboard is kept


def test_disarm_ignores_keys_until_armed():
    kb = Recorder()
    out = KeyOutput("k", kb)
    out.send(KeyAction(("x",), "down"))
    out.send(Release(disarm=True))
    assert out.send(KeyAction(("y",))) is False and "disarmed" in out.stats.last_error
    out.send(Arm())
    out.send(KeyAction(("z",)))
    assert kb.events == [("press", "x"), ("release", "x"), ("press", "z"), ("release", "z")]


def test_no_display_is_a_clear_error(monkeypatch):
    if not sys.platform.startswith("linux"):
        pytest.skip("DISPLAY matters on Linux only")
    monkeypatch.delenv("DISPLAY", raising=False)
    with pytest.raises(OutputUnavailable, match="DISPLAY"):
        open_output(Destination("keys", "keys"))


def test_uinput_names_exist_in_the_kernel_table():
    # Reference: python-evdev's ecodes, generated from Linux include/uapi/linux/input-event-codes.h.
    ecodes = pytest.importorskip("evdev.ecodes", reason="python-evdev (extra 'uinput') is not installed")
    table = uinput_code_names()
    assert set(table) == KEY_NAMES
    assert all(hasattr(ecodes, v) for v in table.values())
    # From memory of input-event-codes.h: KEY_ENTER 28, KEY_LEFTCTRL 29, KEY_A 30, KEY_F24 194.
    assert [getattr(ecodes, table[k]) for k in ("enter", "ctrl", "a", "f24")] == [28, 29, 30, 194]


# -- real key events under Xvfb ---------------------------------------------------------

def start_xvfb():
    """A new Xvfb: (process, display name such as ":3"), once it accepts connections.

    Xvfb picks a free display itself (its lock files make that safe against another run
    doing the same at the same moment, where choosing a number by looking for a free lock
    file first is not) and writes the number once it accepts connections: no polling for a
    socket file that exists a moment before connections are accepted."""
    r, w = os.pipe()
    proc = subprocess.Popen(["Xvfb", "-displayfd", str(w), "-screen", "0", "1024x768x24", "-nolisten", "tcp"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, pass_fds=(w,))
    os.close(w)
    try:
        got = b""
        end = time.monotonic() + 10
        while not got.endswith(b"\n"):
            ready, _, _ = select.select([r], [], [], max(0.0, end - time.monotonic()))
            chunk = os.read(r, 16) if ready else b""
            if not chunk:
                proc.kill()
                proc.wait()
                pytest.fail("Xvfb did not start within 10 s")
            got += chunk
    finally:
        os.close(r)
    return proc, f":{int(got)}"


@pytest.fixture
def xvfb(monkeypatch):
    if shutil.which("Xvfb") is None:
        pytest.skip("Xvfb is not installed (Debian package xvfb); no X server to receive keys")
    pytest.importorskip("Xlib", reason="python-xlib is not installed")
    if importlib.util.find_spec("pynput") is None:  # importing it needs the display below
        pytest.skip("pynput (extra 'keys') is not installed")
    proc, name = start_xvfb()
    d = None
    try:
        monkeypatch.setenv("DISPLAY", name)
        from Xlib import display
        d = display.Display(name)
        yield d
    finally:
        if d is not None:
            d.close()  # our connection goes before the server does
        proc.terminate()
        try:
            proc.wait(5)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def _keys_down(d):
    """Keycodes the X server has down now (python-xlib query_keymap: a 256-bit map)."""
    return [i * 8 + b for i, byte in enumerate(d.query_keymap()) for b in range(8) if byte >> b & 1]


def _focus(d, window_id):
    from Xlib import X
    w = d.create_resource_object("window", window_id)
    end = time.monotonic() + 5
    while time.monotonic() < end:
        w.set_input_focus(X.RevertToParent, X.CurrentTime)
        d.sync()
        if d.get_input_focus().focus.id == window_id:
            return
        time.sleep(0.05)
    pytest.fail("could not focus the recording window")


def test_keys_reach_the_focused_window_in_order(xvfb):
    rec = subprocess.Popen([sys.executable, str(HELPERS / "keyrec.py")], stdout=subprocess.PIPE, text=True)
    try:
        ready = rec.stdout.readline().split()
        assert ready and ready[0] == "ready"
        _focus(xvfb, int(ready[1]))
        out = open_output(Destination("keys", "keys"))
        for m in (KeyAction(("ctrl", "shift", "s")), KeyAction(("a",), "down"), KeyAction(("b",)),
                  KeyAction(("a",), "up"), KeyAction(("enter",)), KeyAction(("alt",), "down")):
            out.send(m)
        end = time.monotonic() + 5
        while out.pending() and time.monotonic() < end:  # a Release would discard what still waits
            time.sleep(0.01)
        for m in (Release(), KeyAction(("f24",)), KeyAction(("f12",))):
            out.send(m)
        out.close()
        rec.wait(10)
        lines = rec.stdout.read().split("\n")
    finally:
        rec.kill()
    # Reference: the X server's key events as the window received them (python-xlib keysym names).
    assert [line for line in lines if line] == [
        "press Control_L", "press Shift_L", "press s", "release s", "release Shift_L", "release Control_L",
        "press a", "press b", "release b", "release a", "press Return", "release Return",
        "press Alt_L", "release Alt_L", "press F12", "release F12"]
    assert _keys_down(xvfb) == []
    # f24 is refused: Xvfb's keymap has no F13–F24, and the output never rewrites the keymap
    assert out.stats.sent == 8 and out.stats.dropped == 1 and "f24" in out.stats.last_error


def test_sigterm_to_a_process_holding_keys_leaves_none_down(xvfb):
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.Popen([sys.executable, str(HELPERS / "hold_key.py")], stdout=subprocess.PIPE, text=True, env=env)
    try:
        assert proc.stdout.readline().strip() == "holding"
        assert len(_keys_down(xvfb)) == 2          # shift and ctrl are down: the check can fail
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(10) == 0
        assert proc.stdout.read().strip() == "released after SIGTERM"
    finally:
        proc.kill()
    assert _keys_down(xvfb) == []


def test_f21_to_f24_use_the_x11_keysyms(xvfb):
    # Reference: python-xlib's keysym table (X11 keysymdef.h): XK_F21 … XK_F24.
    from pynput import keyboard
    from Xlib import XK
    codes = PynputKeyboard._table(keyboard)
    for n in (21, 24):
        c = codes[f"f{n}"]
        vk = c.value.vk if hasattr(c, "value") else c.vk
        assert vk == XK.string_to_keysym(f"F{n}")


def test_a_process_ending_with_a_key_held_lets_it_go(xvfb):
    # The script holds shift and ends without closing its output: the key must still go up.
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.Popen([sys.executable, "-X", "faulthandler", str(HELPERS / "busy_exit.py"), "keys"], env=env,
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "busy"
        assert len(_keys_down(xvfb)) == 1          # shift is down: the check can fail
        out, err = proc.communicate("exit\n", timeout=30)
    finally:
        proc.kill()
    assert "Fatal Python error" not in err and "could not acquire lock" not in err, err[-3000:]
    assert proc.returncode == 0, err[-3000:]
    assert _keys_down(xvfb) == []
