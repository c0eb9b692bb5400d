"""Trace-header positions that repeat: a GNSS receiver that updates less often than the radar
records traces leaves runs of traces at one position (stairs), which put several traces on
one spot and none between, and left migration no trace spacing to work with."""

from __future__ import annotations

import numpy as np

#: Fraction of repeated consecutive header positions above which they are taken for stairs.
REPEAT_SHARE = 0.1


def spread_repeats(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """Header positions with runs of repeats spread between the fixes; and how many repeated.

    When more than :data:`REPEAT_SHARE` of the steps between consecutive traces are zero,
    each new position is taken as the fix at the first trace showing it, and the traces are
    placed by linear interpolation on the trace index between fixes (beyond the last fix at
    the last pair's rate per trace), as a receiver that holds its last fix reports them.
    Otherwise (a cart that paused) the positions are returned as they are.
    """
    steps = np.hypot(np.diff(x), np.diff(y))
    repeats = int(np.count_nonzero(steps == 0))
    fixes = np.flatnonzero(np.concatenate([[True], steps > 0]))
    if repeats <= REPEAT_SHARE * steps.size or fixes.size < 2:
        return x, y, repeats
    index = np.arange(x.size, dtype=np.float64)
    out = []
    for values in (x, y):
        spread = np.interp(index, fixes, values[fixes])
        last, before = fixes[-1], fixes[-2]
        rate = (values[last] - values[before]) / (last - before)
        tail = index > last
        spread[tail] = values[last] + rate * (index[tail] - last)
        out.append(spread)
    return out[0], out[1], repeats


__all__ = ["REPEAT_SHARE", "spread_repeats"]
