"""Trace-header positions that repeat: a GNSS receiver that updates less often than the radar
records traces leaves runs of traces at one position (stairs), which put several traces on
one spot and none between, and left migration no trace spacing to work with."""

from __future__ import annotations

import numpy as np

from slicer.core.errors import warn

#: Fraction of repeated consecutive header positions above which they may be stairs.
REPEAT_SHARE = 0.1


def spread_repeats(x: np.ndarray, y: np.ndarray, *, where: str) -> tuple[np.ndarray,
                                                                          np.ndarray]:
    """:func:`stairs_spread` of a line's header positions, with a warning naming ``where``
    when traces repeat their position: spread (stairs) or kept (a pause)."""
    sx, sy, repeats = stairs_spread(x, y)
    if sx is not x:
        warn(f"{where}: {repeats} of {x.size} traces repeat the previous trace's header "
             "position (coordinates updated less often than traces?); they are spread "
             "evenly between the fixes, by trace (a GNSS track with times places them better)")
    elif repeats > REPEAT_SHARE * (x.size - 1):
        warn(f"{where}: {repeats} of {x.size} traces repeat the previous trace's header "
             "position (the radar stood still?); they are kept where recorded")
    return sx, sy


def stairs_spread(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """Header positions with runs of repeats spread between the fixes; and how many repeated.

    Stairs are told from a pause by their runs: more than :data:`REPEAT_SHARE` of the steps
    between consecutive traces are zero and the typical (median) run holds two traces or
    more. Each new position is then taken as the fix at the first trace showing it, and the
    traces are placed by linear interpolation on the trace index between fixes; after the
    last fix, one typical run on at the last pair's rate per trace, a longer last run (the
    crew stood still at the end) holding there. Otherwise (every trace its own fix, with a
    pause or two) the positions are returned as they are.
    """
    steps = np.hypot(np.diff(x), np.diff(y))
    repeats = int(np.count_nonzero(steps == 0))
    fixes = np.flatnonzero(np.concatenate([[True], steps > 0]))
    runs = np.diff(np.append(fixes, x.size))
    typical = int(np.median(runs))
    if repeats <= REPEAT_SHARE * steps.size or fixes.size < 2 or typical < 2:
        return x, y, repeats
    index = np.arange(x.size, dtype=np.float64)
    last, before = fixes[-1], fixes[-2]
    tail = index > last
    ahead = np.minimum(index[tail] - last, typical - 1)
    out = []
    for values in (x, y):
        spread = np.interp(index, fixes, values[fixes])
        spread[tail] = values[last] + (values[last] - values[before]) / (last - before) * ahead
        out.append(spread)
    return out[0], out[1], repeats


__all__ = ["REPEAT_SHARE", "spread_repeats", "stairs_spread"]
