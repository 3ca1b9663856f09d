"""Noticing a saved mapping file and reloading it, polled by the live loop (no thread).

The watcher compares the file's modification time, size and inode at most every
``interval_s``: an editor that saves in place changes the first two, one that writes a
temporary file and renames it over the old one changes the inode. A changed file is
used only once it has looked the same on two polls in a row (an in-place save, an
`echo ... > file` or a copy caught in the middle are not applied half-written); it is
then read and checked in full, and only a file without errors replaces the running
mapping, so a half-finished edit leaves the last good mapping running. A broken file is
reported then, and again only after it changes.

A file with no destinations and no rules (empty, or cut off before its first table) is
refused with the reason, unless the running mapping was empty too: applying it would close
every output in the middle of a show (lights to their safe look, sACN terminated).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from .loader import MappingError, load_mapping
from .rules import Mapping


@dataclass(frozen=True)
class Reload:
    """What a poll found: a new good mapping, or the problems of a broken file."""

    mapping: Mapping | None
    problems: tuple[str, ...] = ()


class MappingWatcher:
    """``poll(now_s)`` returns a Reload when the file changed, else None.

    ``mapping`` is the last good mapping (the one loaded first, then each good reload).
    """

    def __init__(self, path: str | Path, classes=None, kinds=None, channel_names=None,
                 interval_s: float = 0.1, mapping: Mapping | None = None):
        self.path = Path(path)
        self.classes, self.kinds, self.channel_names = classes, kinds, channel_names
        self.interval_s = interval_s
        self._sig = self._signature()
        self.mapping = mapping if mapping is not None else self._load()
        self._next_s = float("-inf")
        self._broken_sig = None    # signature of a broken file waiting to be reported
        self._reported_sig = None  # signature of the broken file last reported
        self._seen = self._sig     # signature at the last poll: a change is used once it holds
        self._problems: list = []

    def _load(self) -> Mapping:
        return load_mapping(self.path, self.classes, self.kinds, self.channel_names)

    def _signature(self):
        try:
            st = os.stat(self.path)
        except OSError:
            return "missing"  # e.g. between an editor's unlink and rename: reported if it stays so
        return (st.st_mtime_ns, st.st_size, st.st_ino)

    def poll(self, now_s: float) -> Reload | None:
        if now_s < self._next_s - 1e-9:
            return None
        self._next_s = now_s + self.interval_s
        sig = self._signature()
        settled = sig == self._seen   # the same as at the last poll
        self._seen = sig
        if sig == self._sig or not settled:
            return None               # unchanged, or still changing: look again next poll
        self._sig = sig
        try:
            mapping = self._load()
        except MappingError as exc:
            self._broken_sig, self._problems = sig, exc.problems
            if sig == self._reported_sig:
                return None
            self._reported_sig = sig
            return Reload(None, tuple(self._problems))
        self._broken_sig = self._reported_sig = None
        empty = refuse_empty(mapping, self.mapping, self.path)
        if empty:
            self._problems = [empty]
            self._reported_sig = sig
            return Reload(None, (empty,))
        self.mapping = mapping
        return Reload(mapping)

    def reload_now(self) -> Reload:
        """Read the file again whether or not it changed (a reload asked for by a signal or
        a control message): the new mapping, or the problems (the last good one stays)."""
        self._sig, self._next_s, self._reported_sig = None, float("-inf"), None
        self._seen = self._signature()  # asked for: no need to wait for a second look
        found = self.poll(float("-inf"))
        if found is None:
            return Reload(None, tuple(self._problems))
        return found


def nothing_to_send(mapping: Mapping | None, path) -> str:
    """A warning for a mapping that sends nothing ("" when it sends something): at start, and
    from ``drape check``, an empty file must not pass for one that works."""
    if mapping is None or mapping.destinations or mapping.rules or mapping.controls:
        return ""
    return (f"{path}: no destinations and no rules: nothing will be sent until the file has some "
            "(saved while running, it is read again)")


def refuse_empty(new: Mapping, old: Mapping | None, path) -> str:
    """Why ``new`` is refused ("" when it is not): no destinations and no rules where the
    running mapping had some."""
    if new.destinations or new.rules:
        return ""
    if old is None or not (old.destinations or old.rules):
        return ""
    return (f"{path}: the file has no destinations and no rules (empty, or cut off while being written?); "
            "refused, the last good mapping keeps running. Save the whole file again; to run without "
            "outputs on purpose, leave one destination in it")
