"""Progress bars for long offline work (fit, evaluate, tune).

One small helper: a callback ``step(done, total)`` that long functions already accept as
``progress=``, drawing a bar on standard error when that is a terminal and drawing nothing
when it is piped or redirected (so logs and ``| head`` stay clean).
"""

from __future__ import annotations

import sys


class Progress:
    """``step(done, total)`` draws a bar; ``close()`` removes it. Also a context manager.

    desc: the words before the bar ("fitting linear"). stream: where the bar goes (default
    standard error). unit: what one step is ("take", "fold"). enabled: None shows the bar only
    when ``stream`` is a terminal, True always, False never. Drawn by hand, one line rewritten
    in place, so that a progress bar costs no dependency.
    """

    WIDTH = 24  # characters of the bar itself

    def __init__(self, desc: str, stream=None, unit: str = "step", enabled: bool | None = None):
        self.stream = sys.stderr if stream is None else stream
        if enabled is None:
            enabled = bool(getattr(self.stream, "isatty", lambda: False)())
        self.enabled, self.desc, self.unit = enabled, desc, unit
        self._width = 0  # characters last drawn, to blank them on close

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled:
            return
        frac = min(max(done / total, 0.0), 1.0) if total > 0 else 0.0
        filled = int(round(frac * self.WIDTH))
        line = (f"{self.desc} [{'#' * filled}{'.' * (self.WIDTH - filled)}] "
                f"{done}/{total} {self.unit}{'' if total == 1 else 's'} {frac:4.0%}")
        self.stream.write("\r" + line.ljust(self._width))
        self.stream.flush()
        self._width = max(self._width, len(line))

    def close(self) -> None:
        if self.enabled and self._width:
            self.stream.write("\r" + " " * self._width + "\r")
            self.stream.flush()
        self._width = 0

    def __enter__(self) -> "Progress":
        return self

    def __exit__(self, *_exc) -> None:
        self.close()


def progress_bar(desc: str, stream=None, unit: str = "step", enabled: bool | None = None) -> Progress:
    """A :class:`Progress` for ``desc``: pass it as ``progress=`` and close it when done."""
    return Progress(desc, stream, unit, enabled)
