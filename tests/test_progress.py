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


def test_the_bar_grows_and_close_blanks_its_line():
    out = FakeTerminal()
    step = progress_bar("fitting", stream=out, unit="fold")
    step(0, 4)
    step(4, 4)
    drawn = out.getvalue().split("\r")
    assert "0/4 folds" in drawn[1] and "#" not in drawn[1]
    assert "4/4 folds" in drawn[2] and "100%" in drawn[2] and "." not in drawn[2].split("]")[0]
    step.close()
    assert out.getvalue().endswith("\r") and out.getvalue().split("\r")[-2].strip() == ""
