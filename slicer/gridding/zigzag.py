"""Bidirectional (zigzag) lag: measuring and removing the along-line shift of two-way lines.

A survey wheel or a trigger that fires a little before the trace is recorded puts every trace a
fixed distance behind the place it really shows, along the direction of travel. On lines walked
one way that only moves the whole plan; on lines walked both ways, every other line is displaced
the opposite way, and a straight feature crossing the lines is drawn as a saw-tooth.

Convention: the *shift* ``d`` (m) is how far each trace's ground lies ahead of its recorded
position, along its own line's direction of travel (first trace to last). Correcting moves every
trace ``d`` forward along its line. Two neighbouring lines walked in opposite directions then
see the same feature ``2 d`` apart, in either line's frame.

Estimate (:func:`estimate_zigzag_shift`), on the trace x slice table before gridding:

1. Each line's nearest parallel neighbour on each side is found (lines within
   :data:`~slicer.gridding.neighbours.PARALLEL_DEGREES` of each other, overlapping along
   their length). Only neighbours walked the other way take part.
2. For each such pair, both lines' values are resampled on a common along-line axis in the
   first line's frame (steps of a quarter of the trace spacing) over the stretch both cover;
   each slice is standardised per line and the cross-correlation
   (:func:`scipy.signal.correlate`) of the two lines is summed over slices. The lag of its
   peak, refined by a parabola through the three best lags, is the pair's displacement.
3. A feature that crosses the lines obliquely adds a displacement proportional to the across-line
   offset of the neighbour, with the sign of that offset; a line with opposite-direction
   neighbours on both sides takes the combination of its two pair displacements in which that
   term cancels (linear interpolation to zero offset). Lines with one such neighbour only use
   it as it is, when no line has two.
4. The survey's shift is half the median of the lines' displacements; its spread is half their
   median absolute deviation scaled to a standard deviation (x 1.4826, a normal distribution's
   factor; common practice).

Limits: the estimate needs features that vary along the lines (a uniform slice has no lag to
find) and a shift under :data:`MAX_SHIFT`. A feature crossing the lines at less than about 27
degrees moves between neighbouring lines by more than the search reaches (twice the line
spacing beyond the lag) and biases the pairs it dominates; the median over lines limits that.
A real feature that zigzags with the line spacing cannot be told from a lag.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
import scipy.signal
import xarray as xr

from slicer.core.conventions import TRACE, X, Y
from slicer.core.errors import SettingsError
from slicer.gridding.neighbours import _Lines, table_arrays, trace_spacing

#: Largest shift (m) looked for by :func:`estimate_zigzag_shift` by default (pair displacements up
#: to twice it), and no more than :data:`MAX_SHIFT_TRACES` trace spacings: a wheel or trigger lag
#: is a few traces, centimetres to a few decimetres on a cart survey (common practice).
MAX_SHIFT = 0.5
MAX_SHIFT_TRACES = 10
#: A pair's lag search reaches this many times the lines' offset beyond ``2 * max_shift``: a
#: feature crossing the lines at ``atan(1 / OBLIQUE_REACH)`` (27 degrees) or more stays in reach.
OBLIQUE_REACH = 2.0
#: Least length (m) two lines share at the largest lag looked for, for a pair to count.
MIN_OVERLAP = 2.0


@dataclass(frozen=True)
class ZigzagEstimate:
    """What :func:`estimate_zigzag_shift` found.

    Attributes
    ----------
    shift_m : float
        The shift ``d`` (m) along each line's direction of travel.
    spread_m : float
        Robust standard deviation (m) of the per-line estimates of ``d``; NaN with one line.
    lines : int
        Number of lines whose displacement entered the median.
    pairs : int
        Number of opposite-direction line pairs correlated.
    """

    shift_m: float
    spread_m: float
    lines: int
    pairs: int

    def to_record(self) -> dict:
        """A JSON-ready dict, values rounded to 0.1 mm."""
        out = asdict(self)
        for key in ("shift_m", "spread_m"):
            out[key] = None if math.isnan(out[key]) else round(out[key], 4)
        return out


def _standardise(v: np.ndarray) -> np.ndarray:
    """Each column minus its mean, divided by its standard deviation (0 where flat)."""
    v = v - v.mean(axis=0)
    sd = v.std(axis=0)
    return np.divide(v, sd, out=np.zeros_like(v), where=sd > 0)


def _pair_lag(along_a, values_a, along_b, values_b, step: float, reach: float) -> float:
    """Displacement (m) of line b's pattern relative to line a's, both on a's along axis.

    Positive when a feature sits farther along on b than on a. NaN when the two lines overlap
    too little or carry no pattern.
    """
    lo = max(along_a.min(), along_b.min())
    hi = min(along_a.max(), along_b.max())
    if hi - lo < reach + MIN_OVERLAP:  # at the largest lag in reach, MIN_OVERLAP in common
        return math.nan
    s = np.arange(lo, hi, step)
    fa = _standardise(np.column_stack([np.interp(s, along_a, c) for c in values_a.T]))
    order = np.argsort(along_b)
    fb = _standardise(np.column_stack([np.interp(s, along_b[order], c[order])
                                       for c in values_b.T]))
    if not (fa.any() and fb.any()):
        return math.nan
    # correlate(fb, fa)[k] peaks where fb(s) ~ fa(s - lag): b's pattern lies `lag` ahead
    full = sum(scipy.signal.correlate(fb[:, j], fa[:, j], mode="full", method="fft")
               for j in range(fa.shape[1]))
    lags = np.arange(-(len(s) - 1), len(s))
    # look twice as far as the reach: a best match beyond it is a lag out of reach, not one
    # to be replaced by the best within it
    keep = np.abs(lags) * step <= 2 * reach
    corr, lags = full[keep], lags[keep]
    k = int(np.argmax(corr))
    if abs(lags[k]) * step > reach or k == 0 or k == len(corr) - 1:
        return math.nan
    y0, y1, y2 = corr[k - 1], corr[k], corr[k + 1]
    denominator = y0 - 2 * y1 + y2
    frac = 0.5 * (y0 - y2) / denominator if denominator < 0 else 0.0
    return float((lags[k] + frac) * step)


def _nearest_neighbours(lines: _Lines, mid: np.ndarray, half: np.ndarray, k: int):
    """Line ``k``'s nearest overlapping parallel line on its left and right: (index, offset)."""
    along, across = lines.frame(k, mid)
    along, across = along - along[k], across - across[k]
    ok = lines.parallel(k) & (np.abs(along) < half + half[k]) & (np.abs(across) > 1e-9)
    out = []
    for side in (across > 0, across < 0):
        candidates = np.flatnonzero(ok & side)
        if candidates.size:
            j = candidates[np.argmin(np.abs(across[candidates]))]
            out.append((int(j), float(across[j])))
    return out


def estimate_zigzag_shift(table: xr.DataArray, *, max_shift: float | None = None
                          ) -> ZigzagEstimate:
    """Estimate the along-line shift of a survey walked in both directions.

    Parameters
    ----------
    table : xarray.DataArray
        The trace x slice table (dims ``trace``, ``slice``; per-trace ``x``, ``y`` in m and
        ``line``), traces of each line in recording order.
    max_shift : float, optional, keyword-only
        Largest shift (m) to look for; default :data:`MAX_SHIFT` or :data:`MAX_SHIFT_TRACES`
        trace spacings, whichever is less.

    Returns
    -------
    ZigzagEstimate

    Raises
    ------
    SettingsError
        If no line has a parallel neighbour walked the other way, or no pair of such lines
        shows a pattern to correlate (``where="--zigzag-shift"``).
    """
    values, x, y, line = table_arrays(table)
    spacing = trace_spacing(x, y, line)
    if max_shift is None:
        max_shift = min(MAX_SHIFT, MAX_SHIFT_TRACES * spacing)
    if not (math.isfinite(max_shift) and max_shift > 0):
        raise SettingsError(f"must be a positive number of metres, got {max_shift!r}",
                            where="max_shift")
    values = np.where(np.isfinite(values), values, 0.0)
    lines = _Lines.of(x, y, line)
    n = len(lines.members)
    mid = np.array([[x[m].mean(), y[m].mean()] for m in lines.members]).reshape(-1, 2)
    half = np.hypot(*(lines.end - lines.start).T) / 2 if n else np.zeros(0)
    step = spacing / 4
    points = np.column_stack([x, y])
    cache: dict[tuple[int, int], float] = {}
    both, single, opposite_seen = [], [], False
    for k in range(n):
        found = []
        for j, offset in _nearest_neighbours(lines, mid, half, k):
            if lines.direction[j] @ lines.direction[k] >= 0:
                continue  # walked the same way: no lag between them
            opposite_seen = True
            if (k, j) not in cache:
                a, b = lines.members[k], lines.members[j]
                u = lines.direction[k]
                # reach: the lag plus the displacement of a feature crossing at 27 degrees
                reach = 2 * max_shift + OBLIQUE_REACH * abs(offset)
                cache[(k, j)] = _pair_lag(points[a] @ u, values[a], points[b] @ u, values[b],
                                          step, reach)
            if math.isfinite(cache[(k, j)]):
                found.append((cache[(k, j)], offset))
        if len(found) == 2:
            (lag_l, off_l), (lag_r, off_r) = found
            # the oblique-feature term is proportional to the offset; interpolate to zero
            both.append((lag_l * -off_r + lag_r * off_l) / (off_l - off_r))
        elif len(found) == 1:
            single.append(found[0][0])
    if not opposite_seen:
        raise SettingsError("cannot estimate a zigzag shift: no line has a parallel neighbour "
                            "walked the other way; give a shift in metres or leave it off",
                            where="--zigzag-shift")
    used = np.array(both if both else single)
    if used.size == 0:
        raise SettingsError("cannot estimate a zigzag shift: no pair of neighbouring lines "
                            f"walked both ways shows a common pattern within {max_shift:g} m; "
                            "give a shift in metres", where="--zigzag-shift")
    median = float(np.median(used))
    spread = (float(1.4826 * np.median(np.abs(used - median))) / 2 if used.size > 1
              else math.nan)
    return ZigzagEstimate(shift_m=median / 2, spread_m=spread, lines=int(used.size),
                          pairs=sum(math.isfinite(v) for v in cache.values()))


def shift_along_lines(table: xr.DataArray, *, shift: float) -> xr.DataArray:
    """Move every trace ``shift`` metres along its line's direction of travel.

    Parameters
    ----------
    table : xarray.DataArray
        The trace x slice table (see :func:`estimate_zigzag_shift`).
    shift : float, keyword-only
        Distance (m), positive forward (first trace towards last).

    Returns
    -------
    xarray.DataArray
        The same table with new ``x`` and ``y``; values unchanged.
    """
    _, x, y, line = table_arrays(table)
    if not math.isfinite(shift):
        raise SettingsError(f"must be a finite number of metres, got {shift!r}",
                            where="--zigzag-shift")
    lines = _Lines.of(x, y, line)
    dx, dy = np.zeros_like(x), np.zeros_like(y)
    for k, m in enumerate(lines.members):
        dx[m], dy[m] = shift * lines.direction[k]
    return table.assign_coords({X: (TRACE, x + dx, table[X].attrs),
                                Y: (TRACE, y + dy, table[Y].attrs)})


__all__ = ["MAX_SHIFT", "MAX_SHIFT_TRACES", "ZigzagEstimate", "estimate_zigzag_shift",
           "shift_along_lines"]
