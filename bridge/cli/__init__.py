"""The `drape` command. ``parser`` reads the command line and calls one function per verb;
the verbs live in ``live`` (demo, start, watch, send, ports), ``data`` (capture, simulate,
range, replay, check), ``models`` (fit, evaluate, tune) and ``tools`` (bench), and what they
share in ``common``. Nothing in the rest of ``bridge`` imports this package."""

from .common import _stop_on_signals, replay_events  # noqa: F401  (the helpers below: tests drive them)
from .live import _close_outputs, _open_outputs, _print_event, cmd_start  # noqa: F401
from .parser import build_parser, main

__all__ = ["build_parser", "main", "replay_events"]
