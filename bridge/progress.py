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
    when ``stream`` is a terminal, True always, False never.
    """

    def __init__(self, desc: str, stream=None, unit: str = "step", enabled: bool | None = None):
        from tqdm import tqdm

        stream = sys.stderr if stream is None else stream
        if enabled is None:
            enabled = bool(getattr(stream, "isatty", lambda: False)())
        self.enabled = enabled
        self._bar = tqdm(desc=desc, file=stream, leave=False, disable=not enabled, unit=unit)

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled:
            return
        self._bar.total = total
        self._bar.n = done
        self._bar.refresh()

    def close(self) -> None:
        self._bar.close()

    def __enter__(self) -> "Progress":
        return self

    def __exit__(self, *_exc) -> None:
        self.close()


def progress_bar(desc: str, stream=None, unit: str = "step", enabled: bool | None = None) -> Progress:
    """A :class:`Progress` for ``desc``: pass it as ``progress=`` and close it when done."""
    return Progress(desc, stream, unit, enabled)
