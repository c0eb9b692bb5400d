"""Where lines of a survey cross: the crossing points and the nearest trace of each line there.

Used by the ties (:mod:`slicer.processing.ties`), which compare the two lines' traces at each
crossing.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import scipy.spatial
import xarray as xr

from slicer.core.conventions import TRACE, X, Y
from slicer.core.errors import SettingsError, warn

#: Dimension of a crossing (tie) table.
CROSSING = "crossing"


def _named(lines: Sequence[xr.DataArray]) -> dict[str, xr.DataArray]:
    """The lines by ``attrs["line"]`` name; refuse repeated names and lines without positions."""
    out: dict[str, xr.DataArray] = {}
    for i, line in enumerate(lines):
        name = str(line.attrs.get("line", f"lines[{i}]"))
        if name in out:
            raise SettingsError(f"two lines are named {name!r}; ties need unique line names",
                                where="lines")
        if any(c not in line.coords or line[c].dims != (TRACE,) for c in (X, Y)):
            raise SettingsError("the line has no per-trace 'x' and 'y' coordinates", where=name)
        out[name] = line
    return out


def _require(table: xr.Dataset, names: Sequence[str], where: str) -> None:
    missing = [n for n in names if n not in table]
    if missing:
        raise SettingsError(f"the table has no {', '.join(map(repr, missing))}", where=where)


def _cross(u: np.ndarray, v: np.ndarray) -> np.ndarray:
    return u[..., 0] * v[..., 1] - u[..., 1] * v[..., 0]


def _intersections(pa: np.ndarray, pb: np.ndarray, sa: np.ndarray, sb: np.ndarray):
    """Intersections of segments ``sa`` of polyline ``pa`` with segments ``sb`` of ``pb``:
    fractional trace positions on each line, the points, and the sines of the angles."""
    r = (pa[sa + 1] - pa[sa])[:, None, :]
    s = (pb[sb + 1] - pb[sb])[None, :, :]
    denom = _cross(r, s)
    qp = pb[sb][None, :, :] - pa[sa][:, None, :]
    with np.errstate(invalid="ignore", divide="ignore"):
        t, u = _cross(qp, s) / denom, _cross(qp, r) / denom
    e = 1e-9
    ia, ib = np.nonzero((np.abs(denom) > 1e-15) & (t >= -e) & (t <= 1 + e) & (u >= -e)
                        & (u <= 1 + e))
    t, u = np.clip(t[ia, ib], 0, 1), np.clip(u[ia, ib], 0, 1)
    point = pa[sa[ia]] + t[:, None] * r[ia, 0]
    sine = np.abs(denom[ia, ib]) / (np.hypot(*r[ia, 0].T) * np.hypot(*s[0, ib].T))
    return sa[ia] + t, sb[ib] + u, point, sine


def _pair_crossings(pa, pb, ka, kb, sin_min):
    """Crossings of two lines, from their trace pairs ``(ka, kb)`` that lie close together:
    ``(position_a, position_b, point, sine)`` for each."""
    found = []
    if len(pa) > 1 and len(pb) > 1:
        seg_a = np.unique(np.clip(np.concatenate([ka - 1, ka]), 0, len(pa) - 2))
        seg_b = np.unique(np.clip(np.concatenate([kb - 1, kb]), 0, len(pb) - 2))
        fa, fb, point, sine = _intersections(pa, pb, seg_a, seg_b)
        for k in np.argsort(fa):
            if sine[k] < sin_min:
                continue
            # an intersection through a trace shows on the segments either side of it
            if found and abs(found[-1][0] - fa[k]) <= 1.5 and abs(found[-1][1] - fb[k]) <= 1.5:
                continue
            found.append((fa[k], fb[k], point[k], sine[k]))
    if not found:  # lines that stop short of each other: their closest pair of traces
        best = int(np.argmin(np.hypot(*(pa[ka] - pb[kb]).T)))
        a, b = int(ka[best]), int(kb[best])
        da = pa[min(a + 1, len(pa) - 1)] - pa[max(a - 1, 0)]
        db = pb[min(b + 1, len(pb) - 1)] - pb[max(b - 1, 0)]
        norm = float(np.hypot(*da) * np.hypot(*db))
        sine = abs(float(_cross(da, db))) / norm if norm > 0 else 0.0
        if sine >= sin_min:
            found.append((float(a), float(b), (pa[a] + pb[b]) / 2, sine))
    return found


def find_crossings(lines: Sequence[xr.DataArray], *, max_distance: float | None = None,
                   min_angle: float = 30.0) -> xr.Dataset:
    """Where lines of different directions cross.

    Each line is a polyline through its traces. Two lines cross where a segment of one
    intersects a segment of the other at an angle of at least ``min_angle``; the crossing's
    traces are the nearest trace of each line to the intersection. Lines that stop just short
    of each other have no intersection; for them the closest pair of traces counts as a
    crossing. Either way the two traces must lie within ``max_distance``. Lines of one
    direction (repeat or parallel lines) never tie.

    Parameters
    ----------
    lines : sequence of xarray.DataArray
        Lines (DEVELOPERS.md) with per-trace ``x``, ``y`` (m) and unique ``attrs["line"]``.
    max_distance : float, optional
        Largest distance (m) between the two traces of a crossing. Default, for each pair of
        lines, the larger of their median trace spacings (the traces nearest a true
        intersection are at most about 0.7 of that apart).
    min_angle : float
        Smallest angle (degrees) between two lines at a crossing.

    Returns
    -------
    xarray.Dataset
        Dim ``crossing``: ``line_a``, ``line_b`` (names, ``line_a`` earlier in ``lines``),
        ``trace_a``, ``trace_b`` (the nearest traces, as positions along each line's
        ``trace`` dim, for ``isel``), ``position_a``, ``position_b`` (the crossing as
        fractional trace positions), ``x``, ``y`` (the crossing point, m), ``gap_m`` (distance
        between the two traces, m) and ``angle`` (degrees).
    """
    named = _named(lines)
    if max_distance is not None and not (math.isfinite(max_distance) and max_distance > 0):
        raise SettingsError(f"must be a positive distance in m, got {max_distance!r}",
                            where="max_distance")
    if not 0 < min_angle <= 90:
        raise SettingsError(f"must lie in (0, 90] degrees, got {min_angle!r}",
                            where="min_angle")
    names = list(named)
    pos = [np.column_stack([np.asarray(named[n][c].values, dtype=np.float64) for c in (X, Y)])
           for n in names]
    steps = []
    for p in pos:
        d = np.hypot(*np.diff(p, axis=0).T)
        steps.append(float(np.median(d[d > 0])) if (d > 0).any() else math.nan)
    steps = np.array(steps)
    if max_distance is None and not np.isfinite(steps).any():
        raise SettingsError("no line has two distinct trace positions", where="lines")
    step_max = float(np.nanmax(steps)) if np.isfinite(steps).any() else 0.0
    owner = np.concatenate([np.full(len(p), i) for i, p in enumerate(pos)])
    local = np.concatenate([np.arange(len(p)) for p in pos])
    # one tree over every trace finds the few pairs of traces close enough to be a crossing,
    # without testing every pair of lines
    reach = (max_distance if max_distance is not None else step_max) + step_max
    pairs = scipy.spatial.cKDTree(np.concatenate(pos)).query_pairs(reach, output_type="ndarray")
    pairs = np.sort(pairs[owner[pairs[:, 0]] != owner[pairs[:, 1]]], axis=1)  # earlier line 1st
    sin_min = math.sin(math.radians(min_angle)) - 1e-12
    rows = []
    for i, j in sorted({(int(owner[a]), int(owner[b])) for a, b in pairs}):
        sel = pairs[(owner[pairs[:, 0]] == i) & (owner[pairs[:, 1]] == j)]
        limit = max_distance if max_distance is not None else float(np.nanmax(steps[[i, j]]))
        for u, v, pt, s in _pair_crossings(pos[i], pos[j], local[sel[:, 0]], local[sel[:, 1]],
                                           sin_min):
            a, b = int(round(u)), int(round(v))
            gap = float(np.hypot(*(pos[i][a] - pos[j][b])))
            if gap <= limit * (1 + 1e-9):
                rows.append((names[i], names[j], a, b, float(u), float(v), float(pt[0]),
                             float(pt[1]), gap, math.degrees(math.asin(min(float(s), 1.0)))))
    if not rows:
        warn("no crossings found between lines of different directions")
    columns = list(zip(*rows, strict=True)) if rows else [()] * 10
    spec = [("line_a", str, {}), ("line_b", str, {}), ("trace_a", np.int64, {}),
            ("trace_b", np.int64, {}),
            ("position_a", np.float64, {"units": "1", "long_name": "crossing on line_a"}),
            ("position_b", np.float64, {"units": "1", "long_name": "crossing on line_b"}),
            ("x", np.float64, {"units": "m"}), ("y", np.float64, {"units": "m"}),
            ("gap_m", np.float64, {"units": "m", "long_name": "distance between the traces"}),
            ("angle", np.float64, {"units": "degree"})]
    return xr.Dataset({name: (CROSSING, np.array(col, dtype=kind), attrs)
                       for (name, kind, attrs), col in zip(spec, columns, strict=True)},
                      coords={CROSSING: np.arange(len(rows))})
