"""Noticing a saved mapping file and reloading it, polled by the live loop (no thread).

The watcher compares the file's modification time, size and inode at most every
``interval_s``: an editor that saves in place changes the first two, one that writes a
temporary file and renames it over the old one changes the inode. A changed file is
read and checked in full; only a file without errors replaces the running mapping, so a
half-finished edit leaves the last good mapping running. A broken file is reported once
it has stayed the same for one more poll (an editor caught in the middle of writing is
not reported), and again only after it changes.
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
        if sig == self._sig:
            if self._broken_sig is not None and sig == self._broken_sig and sig != self._reported_sig:
                self._reported_sig = sig
                return Reload(None, tuple(self._problems))
            return None
        self._sig = sig
        try:
            mapping = self._load()
        except MappingError as exc:
            self._broken_sig, self._problems = sig, exc.problems
            return None
        self._broken_sig = self._reported_sig = None
        self.mapping = mapping
        return Reload(mapping)

    def reload_now(self) -> Reload:
        """Read the file again whether or not it changed (a reload asked for by a signal or
        a control message): the new mapping, or the problems (the last good one stays)."""
        self._sig, self._next_s, self._reported_sig = None, float("-inf"), None
        found = self.poll(float("-inf"))
        if found is None:  # broken: poll keeps the problems for the next look; say them now
            self._reported_sig = self._sig
            return Reload(None, tuple(self._problems))
        return found
