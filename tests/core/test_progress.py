"""Tests of slicer.core.progress: progress bars drawn on a terminal only, and cleared on error."""

import io

import pytest

from slicer.core.progress import QuietBar, bar_for, progress_bar


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


def test_quiet_bar_off_a_terminal_counts_as_tqdm_would():
    log = io.StringIO()
    bar = progress_bar(iter("abc"), file=log, desc="work")
    assert isinstance(bar, QuietBar) and list(bar) == ["a", "b", "c"] and bar.n == 3
    with pytest.raises(ValueError), bar_for(file=log, total=10) as quiet:
        quiet.update(4)
        quiet.update(2.5)
        raise ValueError("bad file")
    assert (quiet.n, quiet.total, quiet.leave) == (6.5, 10, False)
    assert log.getvalue() == ""
    off = progress_bar(range(2), file=FakeTerminal(), enabled=False)
    assert isinstance(off, QuietBar) and list(off) == [0, 1]


def test_a_closed_or_odd_file_is_not_a_terminal():
    closed = io.StringIO()
    closed.close()  # isatty() on a closed file raises ValueError
    assert isinstance(progress_bar(range(1), file=closed), QuietBar)
    assert isinstance(progress_bar(range(1), file=object()), QuietBar)
