"""Tests of slicer.core.progress: progress bars drawn on a terminal only, and cleared on error."""

import io

import pytest

from slicer.core.progress import bar_for, progress_bar


class FakeTerminal(io.StringIO):
    def isatty(self):
        return True


def test_bar_drawn_on_a_terminal_only():
    tty, log = FakeTerminal(), io.StringIO()
    for _ in progress_bar(range(3), file=tty, desc="work"):
        pass
    for _ in progress_bar(range(3), file=log, desc="work"):
        pass
    for _ in progress_bar(range(3), file=FakeTerminal(), enabled=False):
        pass
    assert "work" in tty.getvalue() and "3/3" in tty.getvalue()
    assert log.getvalue() == ""


def test_bar_cleared_on_error():
    tty = FakeTerminal()
    with pytest.raises(ValueError), bar_for(file=tty, total=10, desc="reading") as bar:
        bar.update(4)
        raise ValueError("bad file")
    # tqdm erases a bar that does not leave: the last thing written returns the cursor
    assert bar.leave is False
    assert tty.getvalue().endswith("\r") and "reading" in tty.getvalue()
