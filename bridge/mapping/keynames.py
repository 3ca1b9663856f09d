"""Our own key names: the vocabulary a mapping file may use for keystrokes.

Names are lower case. Letters a–z, digits 0–9, f1–f24, a few editing and movement keys,
punctuation by name, and the modifiers ctrl, shift, alt, super. Each key output turns these
names into its own codes; a name missing here cannot be sent at all.
"""

from __future__ import annotations

import difflib
import string

MODIFIERS = ("ctrl", "shift", "alt", "super")

NAMED_KEYS = (
    "space", "enter", "escape", "tab", "backspace", "delete", "insert",
    "home", "end", "page_up", "page_down", "up", "down", "left", "right",
    "caps_lock", "print_screen", "pause", "menu",
)

PUNCTUATION = {  # our name -> the character it types on a US layout
    "minus": "-", "equal": "=", "comma": ",", "period": ".", "slash": "/",
    "semicolon": ";", "apostrophe": "'", "grave": "`", "backslash": "\\",
    "left_bracket": "[", "right_bracket": "]",
}

KEY_NAMES = frozenset(
    tuple(string.ascii_lowercase) + tuple(string.digits)
    + tuple(f"f{i}" for i in range(1, 25)) + NAMED_KEYS + MODIFIERS + tuple(PUNCTUATION)
)


def check_key_name(name) -> str | None:
    """None when ``name`` is a key we can send, else one line saying what to write instead."""
    if not isinstance(name, str):
        return f"a key name is a string (got {name!r})"
    if name in KEY_NAMES:
        return None
    lower = name.lower()
    if lower in KEY_NAMES:
        return f"key {name!r}: key names are lower case; write {lower!r}"
    near = difflib.get_close_matches(lower, sorted(KEY_NAMES), n=1)
    hint = f"; did you mean {near[0]!r}?" if near else \
        "; use a–z, 0–9, f1–f24, space, enter, escape, tab, arrows, page_up, ctrl, shift, alt, super"
    return f"unknown key {name!r}{hint}"
