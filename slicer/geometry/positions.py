"""Trace positions from what was recorded in the field, instead of an even start-to-end spacing.

Ways to give every trace of a Line its per-trace ``x``, ``y`` (survey CRS) and ``distance``
(path length from the first trace), all in metres, as
:func:`slicer.geometry.placement.place_line` does for a straight, evenly walked line:

- :func:`positions_from_headers`: the coordinates stored in the radar file's trace headers;
- :func:`positions_from_track`: a CSV of GNSS (or total-station) fixes keyed by trace or time,
  projected and interpolated to every trace, the antenna's offset applied along and across;
- :func:`stretch_by_marks`: marker traces dropped at known distances along a straight line;
  :func:`resample_even` afterwards resamples traces at uneven spacing to an even one.

Offsets are in the frame of travel: *along* positive forward, *across* positive to the
**right** (seen from above, facing forward); the direction of travel at a trace is the chord
of the track over ``smoothing`` m of path centred on it (:mod:`slicer.geometry.channels`).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyproj
import xarray as xr
from pyproj.exceptions import CRSError

from slicer.core.conventions import DISTANCE, TRACE, X, Y
from slicer.core.errors import InputFileError, SettingsError, warn
from slicer.geometry.channels import (
    _finite_option,
    _line_where,
    _offset,
    _travel_direction,
    _with_positions,
)
from slicer.geometry.localgrid import _float_field, _read_table
from slicer.geometry.repeats import spread_repeats

#: Track key columns and what they match on the line.
TRACK_KEYS = ("trace", "time")
#: Per-trace time coordinate (s) that ``key="time"`` matches against the track's ``time``.
TIME = "time"

#: Iglewicz & Hoaglin (1993) modified z-score threshold, and the MAD-to-sigma factor 0.6745.
_MODIFIED_Z, _MAD_SIGMA = 3.5, 0.6745
#: A step is a jump only if also this many times the median step rate (guards a tiny MAD);
#: jumps named individually in a warning before "and N more".
_JUMP_FLOOR, _NAMED = 3.0, 8


def _report_jumps(steps: np.ndarray, spans: np.ndarray, labels: list[str], *, where: str,
                  max_rate: float | None, unit: str) -> np.ndarray:
    """Warn about steps between consecutive positions that look like jumps; return their indices.

    ``steps`` are step lengths (m), ``spans`` the key difference of each step (s or traces),
    ``labels[i]`` names step ``i``.  With ``max_rate`` a step is a jump when ``steps / spans``
    exceeds it; otherwise when its rate has a modified z-score above 3.5 (Iglewicz & Hoaglin
    1993, using the median absolute deviation of the moving steps) and is also more than three
    times the median rate.
    """
    rate = steps / spans
    if max_rate is not None:
        bad = np.flatnonzero(rate > max_rate)
        rule = f"faster than max_speed {max_rate:g} m/{unit}"
    else:
        moving = rate[rate > 0]
        if moving.size < 3:
            return np.array([], dtype=int)
        median = float(np.median(moving))
        mad = float(np.median(np.abs(moving - median)))
        limit = max(_JUMP_FLOOR * median, median + _MODIFIED_Z * mad / _MAD_SIGMA)
        bad = np.flatnonzero(rate > limit)
        rule = (f"more than {limit:.3g} m/{unit} where the median is {median:.3g} m/{unit} "
                "(modified z-score above 3.5)")
    if bad.size:
        named = ", ".join(labels[i] for i in bad[:_NAMED])
        more = f" and {bad.size - _NAMED} more" if bad.size > _NAMED else ""
        warn(f"{where}: {bad.size} jump(s) between consecutive positions, {rule}: {named}{more}; "
             "check these fixes")
    return bad


# --- positions from the file's own trace headers ----------------------------------------------


def positions_from_headers(line: xr.DataArray) -> xr.DataArray:
    """Place traces at the coordinates stored in the radar file's trace headers.

    The readers attach these as ``header_x`` / ``header_y`` (m), already scaled by the SEG-Y
    coordinate scalar (SEG-Y rev 1: positive multiplies, negative divides; rev 2: 0 means 1).
    Jumps between consecutive traces are reported (warning), not removed. Runs of traces
    at one position (a receiver slower than the radar) are spread between the fixes
    (:func:`slicer.geometry.repeats.spread_repeats`, warning).

    Parameters
    ----------
    line : xarray.DataArray
        A Line, dims ``(trace, twt)``, with per-trace ``header_x``, ``header_y`` (m).

    Returns
    -------
    xarray.DataArray
        The line with per-trace ``x``, ``y`` (m, survey CRS = the file's) and ``distance``
        (m, cumulative path length from the first trace).

    Raises
    ------
    InputFileError
        The line has fewer than two traces, no header coordinates, non-finite ones, or every
        trace at the same position (naming the file).
    """
    where = _line_where(line)
    if "header_x" not in line.coords or "header_y" not in line.coords:
        raise InputFileError("the file holds no trace-header coordinates; give the line's "
                             "start and end points or a GNSS track", where=where)
    x = np.asarray(line["header_x"].values, dtype=np.float64)
    y = np.asarray(line["header_y"].values, dtype=np.float64)
    if x.size < 2:
        raise InputFileError(f"a line needs at least two traces, found {x.size}", where=where)
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        raise InputFileError("trace-header coordinates include NaN or infinite values",
                             where=where)
    if np.ptp(x) == 0 and np.ptp(y) == 0:
        raise InputFileError(f"every trace header holds the same position ({x[0]:.3f}, "
                             f"{y[0]:.3f}); the line cannot be placed from its headers",
                             where=where)
    x, y = spread_repeats(x, y, where=where)
    steps = np.hypot(np.diff(x), np.diff(y))
    index = line[TRACE].values
    _report_jumps(steps, np.ones_like(steps), [f"traces {a}-{b}" for a, b in
                                               zip(index[:-1], index[1:], strict=True)],
                  where=where, max_rate=None, unit="trace")
    return _with_positions(line, x, y, note="trace headers")


# --- positions from a GNSS track ---------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Track:
    """The fixes of a track CSV, as read (not yet projected).

    ``keys`` (trace index or s, strictly increasing) are the ``key`` column; ``first``,
    ``second`` are ``lon``, ``lat`` (degrees) when ``geographic``, else ``x``, ``y``; ``height``
    (m) is optional; ``rows`` are the CSV row numbers of the fixes (the header is row 1).
    """

    path: Path
    key: str
    keys: np.ndarray
    first: np.ndarray
    second: np.ndarray
    geographic: bool
    height: np.ndarray | None = None
    rows: tuple[int, ...] = field(default=())


def read_track(path: str | os.PathLike, *, key: str = "trace") -> Track:
    """Read a track CSV of position fixes.

    Parameters
    ----------
    path : path-like
        The track file. Columns (header required, extra columns ignored): the key, either
        ``lon``, ``lat`` (degrees) or ``x``, ``y`` (easting, northing in the track CRS), and
        optionally ``height`` (m).
    key : {"trace", "time"}
        The key column: ``trace`` (the line's ``trace`` coordinate: 0 is the first trace in
        the file; fractions allowed) or ``time`` (s, on the clock of the line's ``time``).

    Returns
    -------
    Track
        The fixes in file order, with their CSV row numbers.

    Raises
    ------
    InputFileError
        Missing file or columns, both or neither coordinate pair, an empty or non-numeric field,
        a latitude beyond +-90 degrees or a key that does not increase (naming ``file:row``),
        fewer than two fixes.
    SettingsError
        ``key`` is not ``"trace"`` or ``"time"``.
    """
    if key not in TRACK_KEYS:
        raise SettingsError(f"must be one of {', '.join(TRACK_KEYS)}, got {key!r}", where="key")
    path, header, rows = _read_table(path, "track", (key,))
    geographic = "lon" in header and "lat" in header
    projected = "x" in header and "y" in header
    if geographic == projected:
        state = "both" if geographic else "neither"
        raise InputFileError(f"a track needs either lon,lat or x,y columns, it has {state}",
                             where=str(path))
    has_height = "height" in header
    columns = [key, *(("lon", "lat") if geographic else ("x", "y"))] + ["height"] * has_height
    fixes, numbers = [], []
    for number, fields in rows:
        where = f"{path}:{number}"
        fix = [_float_field(fields, c, where) for c in columns]
        if fixes and fix[0] <= fixes[-1][0]:
            raise InputFileError(f"{key} {fix[0]:g} does not increase on the previous fix "
                                 f"({fixes[-1][0]:g}); fixes must be in {key} order, without "
                                 "repeats", where=where)
        if geographic and not -90 <= fix[2] <= 90:
            raise InputFileError(f"lat {fix[2]:g} is outside -90..90 degrees (lon and lat "
                                 "swapped?)", where=where)
        fixes.append(fix)
        numbers.append(number)
    if len(fixes) < 2:
        raise InputFileError(f"a track needs at least two fixes, found {len(fixes)}",
                             where=str(path))
    table = np.array(fixes, dtype=np.float64)
    return Track(path=path, key=key, keys=table[:, 0], first=table[:, 1], second=table[:, 2],
                 geographic=geographic, height=table[:, 3] if has_height else None,
                 rows=tuple(numbers))


def _crs(value, name: str) -> pyproj.CRS:
    try:
        return pyproj.CRS.from_user_input(value)
    except CRSError as exc:
        raise SettingsError(f"not a coordinate reference system pyproj knows ({exc})",
                            where=name) from None


def _survey_crs(value) -> pyproj.CRS:
    crs = _crs(value, "survey_crs")
    units = {a.unit_name for a in crs.axis_info[:2]}
    if not crs.is_projected or not units <= {"metre", "meter"}:
        raise SettingsError(f"the survey CRS must be projected with axes in metres; "
                            f"{crs.name} is not", where="survey_crs")
    return crs


def _line_keys(line: xr.DataArray, key: str) -> np.ndarray:
    if key == "trace":
        return np.asarray(line[TRACE].values, dtype=np.float64)
    coord = line.coords.get(TIME)
    if coord is None or coord.dims != (TRACE,) or not np.issubdtype(coord.dtype, np.number):
        raise InputFileError("key='time' needs a per-trace numeric 'time' coordinate (s) on the "
                             "line; it has none (use key='trace')", where=_line_where(line))
    return np.asarray(coord.values, dtype=np.float64)


def positions_from_track(line: xr.DataArray, track: str | os.PathLike | Track, *, track_crs,
                         survey_crs, key: str = "trace", offset_along: float = 0.0,
                         offset_across: float = 0.0, max_speed: float | None = None,
                         smoothing: float = 1.0) -> xr.DataArray:
    """Place traces by interpolating a track of position fixes (GNSS receiver) to every trace.

    Fixes are projected from ``track_crs`` to ``survey_crs`` with pyproj (``always_xy=True``:
    longitude/easting first), interpolated linearly in the survey CRS at every trace's key,
    then moved from the receiver to the radar antenna by the offset.

    Parameters
    ----------
    line : xarray.DataArray
        A Line, dims ``(trace, twt)``; with ``key="time"`` it needs a per-trace ``time`` (s).
    track : path-like or Track
        The track CSV (see :func:`read_track`) or a track already read.
    track_crs, survey_crs : str, int or pyproj.CRS
        CRS of the fixes (geographic for ``lon``/``lat`` columns, projected for ``x``/``y``) and
        of the survey (projected, metres). Heights are not transformed.
    key : {"trace", "time"}
        Match fixes to traces by trace index or by time (s).
    offset_along, offset_across : float
        Position of the antenna centre relative to the receiver (m): ``offset_along``
        positive forward along the direction of travel, ``offset_across`` positive to the
        right of it (seen from above, facing forward).
    max_speed : float, optional
        Report steps between consecutive fixes faster than this (m/s with ``key="time"``, m per
        trace with ``key="trace"``); without it, a robust rule on step rates (median absolute
        deviation) reports jumps. Reported fixes are kept.
    smoothing : float
        Path length (m) over which the direction of travel is taken (a centred chord).

    Returns
    -------
    xarray.DataArray
        The line with per-trace ``x``, ``y`` (m, survey CRS), ``distance`` (m, cumulative path
        length of the antenna from the first trace) and, if the track has heights, ``height``.

    Raises
    ------
    InputFileError
        A bad track file (naming ``file:row``), fewer than two fixes, all fixes at one place,
        fixes that do not cover the line's first and last trace, or no ``time`` coordinate.
    SettingsError
        A bad key, offset, speed, smoothing or CRS, or columns that do not fit ``track_crs``.
    """
    along = _finite_option(offset_along, "offset_along")
    across = _finite_option(offset_across, "offset_across")
    smoothing = _finite_option(smoothing, "smoothing", positive=True)
    if max_speed is not None:
        max_speed = _finite_option(max_speed, "max_speed", positive=True)
    src, dst = _crs(track_crs, "track_crs"), _survey_crs(survey_crs)
    if not isinstance(track, Track):
        track = read_track(track, key=key)
    elif track.key != key:
        raise SettingsError(f"the track is keyed by {track.key}, not {key}", where="key")
    where = str(track.path)
    if track.geographic != src.is_geographic:
        cols = "lon,lat" if track.geographic else "x,y"
        kind = "geographic" if src.is_geographic else "projected"
        raise SettingsError(f"{where} has {cols} columns but the track CRS {src.name} is "
                            f"{kind}", where="track_crs")
    wanted = _line_keys(line, key)
    if wanted.size < 2:
        raise InputFileError(f"a line needs at least two traces, found {wanted.size}",
                             where=_line_where(line))
    lo, hi = float(wanted.min()), float(wanted.max())
    if lo < track.keys[0] or hi > track.keys[-1]:
        raise InputFileError(
            f"the fixes cover {key} {track.keys[0]:g} to {track.keys[-1]:g}, but the line "
            f"{_line_where(line)} runs from {key} {lo:g} to {hi:g}; the track must cover its "
            "first and last trace", where=where)
    transformer = pyproj.Transformer.from_crs(src, dst, always_xy=True)
    east, north = (np.asarray(v, dtype=np.float64)
                   for v in transformer.transform(track.first, track.second))
    bad = ~(np.isfinite(east) & np.isfinite(north))
    if bad.any():
        raise InputFileError(f"the fix cannot be projected into {dst.name}",
                             where=f"{where}:{track.rows[int(np.flatnonzero(bad)[0])]}")
    if np.ptp(east) == 0 and np.ptp(north) == 0:
        raise InputFileError("every fix is at the same position; the track cannot place a line",
                             where=where)
    steps = np.hypot(np.diff(east), np.diff(north))
    labels = [f"rows {track.rows[i]}-{track.rows[i + 1]}" for i in range(steps.size)]
    _report_jumps(steps, np.diff(track.keys), labels, where=where, max_rate=max_speed,
                  unit="s" if key == "time" else "trace")
    x, y = np.interp(wanted, track.keys, east), np.interp(wanted, track.keys, north)
    if along or across:
        ux, uy = _travel_direction(x, y, smoothing=smoothing, where=where)
        x, y = _offset(x, y, ux, uy, along, across)
    note = (f"track {track.path.name} ({src.name} -> {dst.name}), antenna offset "
            f"{along:g} m along, {across:g} m right")
    out = _with_positions(line, x, y, note=note)
    if track.height is not None:
        out = out.assign_coords(height=(TRACE, np.interp(wanted, track.keys, track.height),
                                        {"units": "m", "long_name": "height from the track"}))
    return out


# --- marks along a straight line, and even resampling -----------------------------------------


def stretch_by_marks(line: xr.DataArray, marks, *, start, end,
                     where: str = "marks") -> xr.DataArray:
    """Place traces along a straight line from marker traces dropped at known distances.

    The distance of every trace is piecewise linear in trace index between consecutive marks;
    before the first and after the last mark it continues at the rate of the neighbouring
    segment (so it can be negative or exceed the start-to-end length).

    Parameters
    ----------
    line : xarray.DataArray
        A Line, dims ``(trace, twt)``.
    marks : sequence of (int, float)
        ``(trace index, distance from start in m)``, at least two, both strictly increasing;
        the index counts traces of ``line`` from 0.
    start, end : (float, float)
        ``(x, y)`` of distance 0 and of the line's far end (m, survey CRS); they set the
        direction only.
    where : str
        Names the marks' origin (``file:row`` or option) in errors.

    Returns
    -------
    xarray.DataArray
        The line with per-trace ``x``, ``y`` and ``distance`` (m from ``start``).

    Raises
    ------
    SettingsError
        Fewer than two marks, a non-integer or out-of-range trace index, indices or distances
        that do not increase, non-finite values, or ``start`` equal to ``end``.
    """
    n = line.sizes[TRACE]
    try:
        pairs = [(m[0], float(m[1])) for m in marks]
    except (TypeError, ValueError, IndexError):
        raise SettingsError("marks must be (trace index, distance m) pairs",
                            where=where) from None
    if len(pairs) < 2:
        raise SettingsError(f"at least two marks are needed, got {len(pairs)}", where=where)
    index = []
    for i, (t, d) in enumerate(pairs):
        label = f"mark {i + 1}"
        try:
            whole = not isinstance(t, bool) and float(t).is_integer()
        except (TypeError, ValueError):
            whole = False
        if not whole or not math.isfinite(d):
            raise SettingsError(f"{label}: ({t!r}, {d!r}) needs a whole trace index and a "
                                "finite distance", where=where)
        t = int(float(t))
        if not 0 <= t < n:
            raise SettingsError(f"{label}: trace {t} is outside the line's traces 0..{n - 1} "
                                f"({_line_where(line)})", where=where)
        if i and (t <= index[-1] or d <= pairs[i - 1][1]):
            raise SettingsError(f"{label} (trace {t}, {d:g} m) does not increase on mark {i} "
                                f"(trace {index[-1]}, {pairs[i - 1][1]:g} m) in both trace and "
                                "distance", where=where)
        index.append(t)
    ti, dist = np.array(index, dtype=np.float64), np.array([d for _, d in pairs])
    (sx, sy), (ex, ey) = (float(v) for v in start), (float(v) for v in end)
    length = math.hypot(ex - sx, ey - sy)
    if not (math.isfinite(length) and length > 0):
        raise SettingsError("start and end must be distinct finite points", where=where)
    traces = np.arange(n, dtype=np.float64)
    d = np.interp(traces, ti, dist)
    first_rate = (dist[1] - dist[0]) / (ti[1] - ti[0])
    last_rate = (dist[-1] - dist[-2]) / (ti[-1] - ti[-2])
    d = np.where(traces < ti[0], dist[0] + (traces - ti[0]) * first_rate, d)
    d = np.where(traces > ti[-1], dist[-1] + (traces - ti[-1]) * last_rate, d)
    ux, uy = (ex - sx) / length, (ey - sy) / length
    return _with_positions(line, sx + d * ux, sy + d * uy, distance=d,
                           note=f"{len(pairs)} distance marks")


def _resample_traces(data: np.ndarray, old: np.ndarray, new: np.ndarray) -> np.ndarray:
    """Linear interpolation along the last axis from positions ``old`` to ``new``.

    ``old`` must be strictly increasing with at least two values; ``new`` within its range.
    """
    i = np.clip(np.searchsorted(old, new, side="right") - 1, 0, old.size - 2)
    w = (new - old[i]) / (old[i + 1] - old[i])
    out = data[..., i] * (1.0 - w) + data[..., i + 1] * w
    return out.astype(data.dtype, copy=False)


def resample_even(line: xr.DataArray, *, spacing: float) -> xr.DataArray:
    """Resample the traces to an even spacing along ``distance``.

    Every sample of a new trace is interpolated linearly between the two neighbouring traces;
    ``x``, ``y`` (and other float per-trace coordinates) likewise, so a curved path keeps its
    shape; other per-trace coordinates are dropped. New traces start at the first trace's
    distance and stop at or before the last's. Traces repeating the previous distance (the
    radar standing still) are dropped first, keeping the first of each run (warning).

    Parameters
    ----------
    line : xarray.DataArray
        A placed Line, dims ``(trace, twt)``, with per-trace ``x``, ``y``, ``distance`` (m).
    spacing : float
        The new trace spacing (m).

    Returns
    -------
    xarray.DataArray
        The resampled line, ``trace`` renumbered from 0, ``history`` extended.

    Raises
    ------
    SettingsError
        ``spacing`` not a positive number.
    InputFileError
        The line is not placed, its distance decreases, or it spans less than two traces.
    """
    spacing = _finite_option(spacing, "spacing", positive=True)
    where = _line_where(line)
    if any(c not in line.coords for c in (X, Y, DISTANCE)):
        raise InputFileError("the line has no x, y and distance coordinates; place it first",
                             where=where)
    d = np.asarray(line[DISTANCE].values, dtype=np.float64)
    step = np.diff(d)
    if not np.isfinite(d).all() or (step < 0).any():
        raise InputFileError("distance along the line must be finite and never decrease",
                             where=where)
    keep = np.concatenate([[True], step > 0])
    if not keep.all():
        warn(f"{where}: {int((~keep).sum())} trace(s) at the same distance as the trace before "
             "them dropped before resampling")
        line, d = line.isel({TRACE: np.flatnonzero(keep)}), d[keep]
    if d.size < 2:
        raise InputFileError("the line needs traces at two or more distances to resample",
                             where=where)
    count = int(math.floor((d[-1] - d[0]) / spacing + 1e-9)) + 1
    new = d[0] + spacing * np.arange(count)
    line = line.transpose(TRACE, ...)
    out = xr.apply_ufunc(
        _resample_traces, line.drop_vars([c for c in line.coords if TRACE in line[c].dims]),
        input_core_dims=[[TRACE]], output_core_dims=[[TRACE]], exclude_dims={TRACE},
        kwargs={"old": d, "new": new}, dask="parallelized", output_dtypes=[line.dtype],
        dask_gufunc_kwargs={"output_sizes": {TRACE: count}}, keep_attrs=True,
    ).transpose(*line.dims)
    coords = {TRACE: (TRACE, np.arange(count, dtype=np.int64), dict(line[TRACE].attrs))}
    for name, coord in line.coords.items():
        if name != TRACE and coord.dims == (TRACE,) and np.issubdtype(coord.dtype, np.floating):
            coords[name] = (TRACE, np.interp(new, d, coord.values), dict(coord.attrs))
    coords[DISTANCE] = (TRACE, new, dict(line[DISTANCE].attrs))
    out = out.assign_coords(coords)
    history = str(out.attrs.get("history", ""))
    step_note = f"resampled to even trace spacing {spacing:g} m"
    out.attrs["history"] = f"{history}; {step_note}" if history else step_note
    return out
