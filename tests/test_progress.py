"""The progress helper: a bar on a terminal, nothing on a pipe (logs and `| head` stay clean)."""

import io

from bridge.progress import progress_bar


class FakeTerminal(io.StringIO):
    def isatty(self):
        return True


def test_no_bar_when_piped():
    out = io.StringIO()  # not a terminal, like a pipe or a file
    with progress_bar("fitting linear", stream=out) as step:
        for i in range(5):
            step(i + 1, 5)
    assert out.getvalue() == ""


def test_bar_on_a_terminal_shows_done_of_total():
    out = FakeTerminal()
    with progress_bar("evaluating", stream=out, unit="take") as step:
        step(3, 7)
        assert "evaluating" in out.getvalue() and "3/7" in out.getvalue()
