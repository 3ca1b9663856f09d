"""Keystrokes: our key names pressed through a small keyboard backend.

Cautions. Keys go to whatever window has the focus at that moment, which may not be the
one you meant; keep the show computer's focus fixed and give the wearer a way to disarm
(a mapping's ``[safety] arm_posture``; disarming sends ``Release(disarm=True)`` here). Keys are pressed only for gestures of the wearer: no network
input ever reaches this output. Every key held down is let go on ``up``, on ``Release``,
on close and when pressing fails half-way.

Backends: "x11" uses pynput (extra ``keys``) and needs a display (DISPLAY); "uinput" uses
python-evdev (extra ``uinput``) and /dev/uinput, writing at the Linux input layer so it
works without a display but needs permission on /dev/uinput.
"""

from __future__ import annotations

import os
import sys

from ..mapping.keynames import KEY_NAMES, MODIFIERS, PUNCTUATION
from ..mapping.messages import Arm, KeyAction, Release
from .base import Output, OutputUnavailable, _refuse


class Keyboard:
    """A keyboard backend: press and release one key by our name. Override both."""

    def press(self, key: str) -> None:
        raise NotImplementedError

    def release(self, key: str) -> None:
        raise NotImplementedError

    def close(self) -> None:
        """Let go of the device."""


class Disarmed(PermissionError):
    """Key actions are ignored until an ``Arm``."""


class KeyOutput(Output):
    """Taps, combinations and held keys; keeps the list of keys it holds down."""

    def __init__(self, name: str, keyboard: Keyboard, armed: bool = True, reopen=None):
        """``reopen()``: a new keyboard of the same backend, tried at the next key action after
        the keyboard failed (an X server restarted: the old connection is dead for good)."""
        super().__init__(name)
        self.keyboard = keyboard
        self.armed = armed
        self.reopen = reopen
        self.held: list[str] = []  # in the order pressed
        self._closed = False
        self._broken = False       # the keyboard failed: open a new one before the next key

    def _press_all(self, keys) -> list[str]:
        """Press keys not already held, in order; on failure let go of those just pressed."""
        pressed = []
        try:
            for k in keys:
                if k in self.held or k in pressed:
                    continue
                self.keyboard.press(k)
                pressed.append(k)
        except BaseException:
            self._let_go(pressed)
            raise
        return pressed

    def _let_go(self, keys) -> None:
        """Release keys in reverse order; keep going past a failure, then report the first."""
        first = None
        for k in reversed(list(keys)):
            try:
                self.keyboard.release(k)
            except Exception as exc:
                first = first or exc
            if k in self.held:
                self.held.remove(k)
        if first is not None:
            raise first

    def _send(self, message) -> None:
        if isinstance(message, Release):
            self.release_all()
            if message.disarm:
                self.armed = False
            return
        if isinstance(message, Arm):
            self.armed = True
            return
        if not isinstance(message, KeyAction):
            _refuse(self.name, message)
        if not self.armed:
            raise Disarmed(f"keys {self.name!r} are disarmed; send Arm to use them again")
        if self._broken and self.reopen is not None:
            self._reopen()
        try:
            self._act(message)
        except ValueError:   # a key this keymap lacks: the keyboard itself is fine
            raise
        except Exception:
            self._broken = True
            raise

    def _reopen(self) -> None:
        """A new keyboard in place of one that failed; what the old one held went with its server."""
        try:
            keyboard = self.reopen()
        except OutputUnavailable as exc:
            raise OSError(f"keyboard still unavailable: {exc}") from None
        try:
            self.keyboard.close()
        except Exception:
            pass
        self.keyboard, self.held, self._broken = keyboard, [], False

    def _act(self, message: KeyAction) -> None:
        if message.action == "tap":
            pressed = self._press_all(message.keys)
            self._let_go(pressed)
        elif message.action == "down":
            pressed = self._press_all(message.keys)
            self.held.extend(pressed)
        else:  # up
            self._let_go([k for k in message.keys if k in self.held])

    def release_all(self) -> None:
        """Every key held down goes up, last pressed first."""
        self._let_go(list(self.held))

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        held = len(self.held)
        try:
            self.release_all()
            self.stats.on_close = f"{held} held key{'' if held == 1 else 's'} released"
        finally:
            self.keyboard.close()


# -- X11 through pynput -----------------------------------------------------------------

class PynputKeyboard(Keyboard):
    """Key events through pynput: XTest on X11, the native calls on macOS and Windows."""

    def __init__(self):
        if sys.platform.startswith("linux") and not os.environ.get("DISPLAY"):
            raise OutputUnavailable(
                "keys: no X display (DISPLAY is not set). Run drape inside the desktop session "
                "that should receive the keys, or give the destination keys = \"uinput\" (Linux, needs /dev/uinput)")
        try:
            from pynput import keyboard
        except ImportError as exc:
            if "pynput" in str(exc) and "No module" in str(exc):
                raise OutputUnavailable("keys: pynput is not installed; pip install 'drape-bridge[keys]'") from None
            raise OutputUnavailable(f"keys: cannot reach the display {os.environ.get('DISPLAY', '')!r}: "
                                    f"{str(exc).strip().splitlines()[0]}") from None
        try:
            self._controller = keyboard.Controller()
        except Exception as exc:
            raise OutputUnavailable(f"keys: cannot open the display: {type(exc).__name__}: {exc}") from None
        self._codes = self._table(keyboard)
        self._x_display = getattr(self._controller, "_display", None) if sys.platform.startswith("linux") else None
        self._usable: dict[str, bool] = {}

    @staticmethod
    def _table(keyboard) -> dict:
        K = keyboard.Key
        special = {
            "space": K.space, "enter": K.enter, "escape": K.esc, "tab": K.tab, "backspace": K.backspace,
            "delete": K.delete, "home": K.home, "end": K.end, "page_up": K.page_up, "page_down": K.page_down,
            "up": K.up, "down": K.down, "left": K.left, "right": K.right, "caps_lock": K.caps_lock,
            "ctrl": K.ctrl, "shift": K.shift, "alt": K.alt, "super": K.cmd,
        }
        for name in ("insert", "print_screen", "pause", "menu"):
            if hasattr(K, name):
                special[name] = getattr(K, name)
        codes = {}
        for name in KEY_NAMES:
            if name in special:
                codes[name] = special[name]
            elif len(name) == 1:
                codes[name] = keyboard.KeyCode.from_char(name)
            elif name in PUNCTUATION:
                codes[name] = keyboard.KeyCode.from_char(PUNCTUATION[name])
            elif name.startswith("f") and name[1:].isdigit():
                n = int(name[1:])
                if hasattr(K, name):
                    codes[name] = getattr(K, name)
                elif sys.platform.startswith("linux"):
                    codes[name] = keyboard.KeyCode.from_vk(0xFFBE + n - 1)  # X11 keysym XK_F1 + n − 1
        return codes

    def _code(self, key: str):
        if key not in self._codes:
            raise ValueError(f"key {key!r} cannot be sent on this platform")
        code = self._codes[key]
        if self._x_display is not None and not self._on_keymap(key, code):
            # pynput would otherwise rewrite the server's keymap to borrow a keycode
            raise ValueError(f"key {key!r} has no keycode in this X server's keymap; it cannot be sent here")
        return code

    def _on_keymap(self, key: str, code) -> bool:
        """Whether the X server's keymap has a keycode for this key (looked up once)."""
        if key not in self._usable:
            vk = getattr(getattr(code, "value", code), "vk", None)
            char = getattr(code, "char", None)
            keysym = vk if vk is not None else (ord(char) if char and 0x20 <= ord(char) < 0x7F else None)
            try:
                self._usable[key] = keysym is None or self._x_display.keysym_to_keycode(keysym) != 0
            except Exception:
                self._usable[key] = True  # cannot tell: let pynput try
        return self._usable[key]

    def press(self, key: str) -> None:
        self._controller.press(self._code(key))

    def release(self, key: str) -> None:
        self._controller.release(self._code(key))

    def close(self) -> None:
        # Close the X connection now, while the server is surely there, not whenever the
        # controller happens to be collected (perhaps after the X server has gone).
        controller, self._controller, self._x_display = self._controller, None, None
        display = getattr(controller, "_display", None) if sys.platform.startswith("linux") else None
        if display is not None:
            del controller._display  # pynput's finaliser would close it a second time
            try:
                display.close()
            except Exception:  # the X server went first: nothing left to let go of
                pass


# -- Linux uinput through python-evdev (not tested on our machines: no /dev/uinput) ------

UINPUT_NAMES = {
    "space": "KEY_SPACE", "enter": "KEY_ENTER", "escape": "KEY_ESC", "tab": "KEY_TAB",
    "backspace": "KEY_BACKSPACE", "delete": "KEY_DELETE", "insert": "KEY_INSERT", "home": "KEY_HOME",
    "end": "KEY_END", "page_up": "KEY_PAGEUP", "page_down": "KEY_PAGEDOWN", "up": "KEY_UP",
    "down": "KEY_DOWN", "left": "KEY_LEFT", "right": "KEY_RIGHT", "caps_lock": "KEY_CAPSLOCK",
    "print_screen": "KEY_SYSRQ", "pause": "KEY_PAUSE", "menu": "KEY_COMPOSE",
    "ctrl": "KEY_LEFTCTRL", "shift": "KEY_LEFTSHIFT", "alt": "KEY_LEFTALT", "super": "KEY_LEFTMETA",
    "minus": "KEY_MINUS", "equal": "KEY_EQUAL", "comma": "KEY_COMMA", "period": "KEY_DOT",
    "slash": "KEY_SLASH", "semicolon": "KEY_SEMICOLON", "apostrophe": "KEY_APOSTROPHE",
    "grave": "KEY_GRAVE", "backslash": "KEY_BACKSLASH", "left_bracket": "KEY_LEFTBRACE",
    "right_bracket": "KEY_RIGHTBRACE",
}


def uinput_code_names() -> dict[str, str]:
    """Our key name → the Linux input event code name (KEY_…), for every key we know."""
    out = dict(UINPUT_NAMES)
    for name in KEY_NAMES:
        if name not in out:
            out[name] = f"KEY_{name.upper()}"  # letters, digits, f1–f24
    return out


class UinputKeyboard(Keyboard):
    """A virtual keyboard at the Linux input layer (python-evdev). Needs write access to /dev/uinput."""

    def __init__(self, device_name: str = "drape keys"):
        try:
            from evdev import UInput, ecodes
        except ImportError:
            raise OutputUnavailable("keys: python-evdev is not installed; pip install 'drape-bridge[uinput]'") from None
        self._ecodes = ecodes
        self._codes = {k: getattr(ecodes, v) for k, v in uinput_code_names().items()}
        try:
            self._device = UInput({ecodes.EV_KEY: sorted(set(self._codes.values()))}, name=device_name)
        except OSError as exc:
            raise OutputUnavailable(
                f"keys: cannot open /dev/uinput ({exc}); load the module (modprobe uinput) and give "
                "this user write access to /dev/uinput") from None

    def _event(self, key: str, value: int) -> None:
        self._device.write(self._ecodes.EV_KEY, self._codes[key], value)
        self._device.syn()

    def press(self, key: str) -> None:
        self._event(key, 1)

    def release(self, key: str) -> None:
        self._event(key, 0)

    def close(self) -> None:
        self._device.close()


def open_keyboard(backend: str = "x11") -> Keyboard:
    """The keyboard backend by name: "x11" (pynput) or "uinput" (python-evdev)."""
    if backend == "x11":
        return PynputKeyboard()
    if backend == "uinput":
        return UinputKeyboard()
    raise ValueError(f"key backend is 'x11' or 'uinput' (got {backend!r})")

