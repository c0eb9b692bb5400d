"""Progress bars (tqdm), shown on an interactive terminal only.

A bar that is not on a terminal (a log file, a test capturing stderr, CI) would only add noise
around the one line an error prints, so bars are drawn only when their file (stderr by
default) is a TTY. Otherwise a :class:`QuietBar` stands in, and tqdm is not imported at all:
its import looks up its own installed version (``importlib.metadata``), 56-62 ms of every
process of a build that shows no bar (``python -X importtime``, 2026-12-03).
"""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Iterable, Iterator


class QuietBar:
    """A bar that draws nothing: the part of tqdm's interface that slicer uses (iterate,
    ``update``, ``close``, ``leave``), counting as tqdm would."""

    def __init__(self, iterable: Iterable | None = None, **kwargs):
        self.iterable, self.n, self.total = iterable, 0, kwargs.get("total")
        self.leave = kwargs.get("leave", True)

    def __iter__(self):
        for item in self.iterable:
            yield item
            self.n += 1

    def update(self, n: float = 1) -> None:
        self.n += n

    def close(self) -> None:
        pass


def _on_terminal(file) -> bool:
    file = sys.stderr if file is None else file
    try:
        return bool(file.isatty())
    except (AttributeError, ValueError):  # no isatty, or a closed file
        return False


def progress_bar(iterable=None, *, enabled: bool = True, **kwargs):
    """A tqdm bar, or a :class:`QuietBar` when ``enabled`` is false or its file (``file=``,
    default stderr) is not a terminal."""
    if not enabled or not _on_terminal(kwargs.get("file")):
        return QuietBar(iterable, **kwargs)
    from tqdm import tqdm
    return tqdm(iterable, **kwargs)


@contextlib.contextmanager
def bar_for(*, enabled: bool = True, **kwargs) -> Iterator:
    """A bar as a context: on an error the bar is cleared, so the error line stands alone."""
    bar = progress_bar(enabled=enabled, **kwargs)
    try:
        yield bar
    except BaseException:
        bar.leave = False
        raise
    finally:
        bar.close()
