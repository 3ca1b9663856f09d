"""A small X11 window titled "keyrec" that prints each key press and release it receives.

Lines: "ready <window id>", then "press <keysym>" / "release <keysym>". Run under Xvfb by
tests/test_keys.py; python-xlib only.
"""

import sys

from Xlib import X, XK, display

NAMES = {}
for n in sorted(dir(XK)):  # the first name wins where several share a keysym (F12 before L2)
    if n.startswith("XK_"):
        NAMES.setdefault(getattr(XK, n), n[3:])
d = display.Display()
screen = d.screen()
w = screen.root.create_window(10, 10, 200, 100, 0, screen.root_depth, X.InputOutput, X.CopyFromParent,
                              background_pixel=screen.white_pixel,
                              event_mask=X.KeyPressMask | X.KeyReleaseMask | X.ExposureMask)
w.set_wm_name("keyrec")
w.map()
d.sync()
print(f"ready {w.id}", flush=True)
while True:
    e = d.next_event()
    if e.type in (X.KeyPress, X.KeyRelease):
        sym = d.keycode_to_keysym(e.detail, 0)
        name = NAMES.get(sym, hex(sym))
        print(f"{'press' if e.type == X.KeyPress else 'release'} {name}", flush=True)
        if sym == XK.string_to_keysym("F12") and e.type == X.KeyRelease:  # sentinel tap used by the test to mark the end
            sys.exit(0)
