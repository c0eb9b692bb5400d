"""Progress bars (tqdm), shown on an interactive terminal only.

A bar that is not on a terminal (a log file, a test capturing stderr, CI) would only add noise
around the one line an error prints, so bars are drawn only when stderr is a TTY.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator

from tqdm import tqdm


def progress_bar(iterable=None, *, enabled: bool = True, **kwargs) -> tqdm:
    """A tqdm bar that is off when ``enabled`` is false or stderr is not a terminal."""
    return tqdm(iterable, disable=None if enabled else True, **kwargs)


@contextlib.contextmanager
def bar_for(*, enabled: bool = True, **kwargs) -> Iterator[tqdm]:
    """A bar as a context: on an error the bar is cleared, so the error line stands alone."""
    bar = progress_bar(enabled=enabled, **kwargs)
    try:
        yield bar
    except BaseException:
        bar.leave = False
        raise
    finally:
        bar.close()
