"""Checks of trace positions before a build: wild positions, degrees given as metres, and
positions that no place in the survey CRS has.

Every trace's position is worked out as the line tasks will place it (:func:`trace_positions`),
reading header coordinates, tracks, marks and channel tables but no sample. A damaged
trace-header coordinate or GNSS fix (one flipped bit moves a position kilometres) is found by
:func:`far_from_line` and refused naming the file and trace, or the track and row, before it
can stretch the grid; longitude/latitude numbers read as metres are refused by
:func:`check_not_degrees`, and x and y swapped or given in other units by
:func:`check_in_crs_area`. :mod:`slicer.pipeline.bounds` runs them before any line is read.
"""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np
import pyproj
import xarray as xr

from slicer.core.conventions import TRACE, TWT, X, Y
from slicer.core.errors import InputFileError, SettingsError, SlicerWarning, warn
from slicer.geometry.placement import even_positions
from slicer.geometry.positioning import positioned, source_of, track_crs
from slicer.io.linetable import LineEntry
from slicer.io.reading import header_positions

#: A position is far from its line when it lies more than this many median trace steps from
#: the median position of its neighbours (and is an outlier by the modified z-score). At
#: traces 5 cm apart that is 5 m: far beyond GNSS noise (centimetres) or the wobble of a
#: walked line, while one flipped bit of a coordinate stored in centimetres moves a position
#: 2**k cm, 82 m or more from bit 13 upward.
FAR_STEPS = 100
#: Neighbours (including the trace) whose median position a trace is compared with.
NEIGHBOURS = 21
#: Iglewicz & Hoaglin (1993) modified z-score threshold, and the MAD-to-sigma factor 0.6745.
MODIFIED_Z = 3.5
MAD_SIGMA = 0.6745
#: Positions within +-180 by +-90 spanning less than this (in both directions) look like
#: degrees: 0.05 degrees of latitude is 5.6 km, wider than a radar grid, but 0.05 m is
#: narrower than any radar antenna.
DEGREES_SPAN = 0.05
#: Far positions named one by one in a message before "and N more".
NAMED = 5
#: Degrees of longitude or latitude beyond its CRS's area of use that a survey may lie. Whole
#: countries keep to one zone's grid well outside it (mainland Norway spans 4.5-31 degrees E
#: in UTM zone 33, whose area is 12-18 E, from memory), while x and y swapped in a UTM zone put
#: a survey tens of degrees from the zone, and coordinates in centimetres nowhere at all.
AREA_MARGIN = 20.0


# --- positions far from their line -------------------------------------------------------------


def far_from_line(x: np.ndarray, y: np.ndarray, *, neighbours: int = NEIGHBOURS,
                  far_steps: float = FAR_STEPS) -> tuple[np.ndarray, np.ndarray, float]:
    """Positions that lie far from the run of positions around them.

    Each position is compared with the median position (x and y apart) of the ``neighbours``
    positions around it (the window slides inward at the ends of the line, so the first
    and last positions are judged like the others). A position is far when its distance
    from that median exceeds ``far_steps`` times the line's median step between
    consecutive distinct positions and is an outlier among all such distances by the
    modified z-score (above 3.5, Iglewicz & Hoaglin 1993; any distance counts when their
    median absolute deviation is zero). The median of the neighbours ignores a few wild
    positions among them, follows a curved path and steps across a gap where the walk
    resumed elsewhere, so only isolated wild positions (up to ``neighbours // 2`` in a row)
    are found.

    Returns
    -------
    index : numpy.ndarray
        Indices of the far positions.
    distance : numpy.ndarray
        Their distances from the median of their neighbours (m).
    step : float
        The median step (m), NaN when there are too few positions to judge (fewer than 5).
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n = x.size
    none = np.array([], dtype=int)
    steps = np.hypot(np.diff(x), np.diff(y))
    moving = steps[steps > 0]
    if n < 5 or moving.size < 2:
        return none, np.array([]), math.nan
    step = float(np.median(moving))
    w = min(neighbours, n)
    w -= 1 - w % 2  # odd
    start = np.clip(np.arange(n) - w // 2, 0, n - w)
    mx = np.median(np.lib.stride_tricks.sliding_window_view(x, w), axis=1)[start]
    my = np.median(np.lib.stride_tricks.sliding_window_view(y, w), axis=1)[start]
    dev = np.hypot(x - mx, y - my)
    centre = float(np.median(dev))
    mad = float(np.median(np.abs(dev - centre)))
    outlier = (dev > centre) if mad == 0 else (MAD_SIGMA * (dev - centre) / mad > MODIFIED_Z)
    index = np.flatnonzero(outlier & (dev > far_steps * step))
    return index, dev[index], step


def check_far_positions(settings) -> None:
    """Refuse trace-header positions and GNSS fixes far from their line (see
    :func:`far_from_line`), naming the file and trace index, or the track and row.

    Lines placed from the line table are straight between their ends and cannot stray.
    """
    seen: set[Path] = set()
    for entry in settings.lines:
        source = source_of(entry, settings)
        if source == "headers" and entry.file not in seen:
            seen.add(entry.file)
            xy = header_positions(entry.file)
            if xy is not None:
                _refuse_far(*xy, where=str(entry.file), name="trace", labels=None,
                            what="trace-header coordinate")
        elif source == "track" and entry.track is not None and entry.track not in seen:
            seen.add(entry.track)
            east, north, rows = _projected_fixes(entry.track, settings)
            _refuse_far(east, north, where=str(entry.track), name="row",
                        labels=rows, what="GNSS fix")


def _projected_fixes(path: Path, settings) -> tuple[np.ndarray, np.ndarray, tuple[int, ...]]:
    from slicer.geometry.positions import read_track
    track = read_track(path)
    transformer = pyproj.Transformer.from_crs(track_crs(settings), settings.crs,
                                              always_xy=True)
    east, north = (np.asarray(v, dtype=np.float64)
                   for v in transformer.transform(track.first, track.second))
    ok = np.isfinite(east) & np.isfinite(north)  # an unprojectable fix is refused later
    return east[ok], north[ok], tuple(np.asarray(track.rows)[ok].tolist())


def _refuse_far(x, y, *, where: str, name: str, labels, what: str) -> None:
    index, dev, step = far_from_line(x, y)
    if not index.size:
        return
    order = np.argsort(-dev)
    named = [str(int(index[k]) if labels is None else labels[int(index[k])])
             for k in order[:NAMED]]
    if index.size == 1:
        subject = f"{name} {named[0]} lies"
    else:
        more = f" and {index.size - NAMED} more" if index.size > NAMED else ""
        subject = f"{name}s {', '.join(named)}{more} lie up to"
    raise InputFileError(
        f"{subject} {float(dev.max()):.4g} m from the positions around it on the line, where "
        f"consecutive positions are {step:.3g} m apart; a damaged {what}? correct it, or "
        "place the line from its start and end in the line table", where=where)


# --- the positions of every trace, without reading a sample ------------------------------------


class _Unresampled:
    """Settings as the line tasks see them, but without resampling (it keeps positions on
    the same path; the number of traces it makes is checked apart)."""

    trace_spacing = None

    def __init__(self, settings):
        self._settings = settings

    def __getattr__(self, name):
        return getattr(self._settings, name)


def trace_positions(entry: LineEntry, settings, n_traces: int) -> tuple[np.ndarray, np.ndarray]:
    """The ``x``, ``y`` (m) of every trace of ``entry`` as the line task will place them.

    The line's own placement (:func:`slicer.geometry.positioning.positioned`) runs on a line
    of the right number of traces but no samples, so only header coordinates, tracks, marks
    and channel tables are read. Its warnings are left to the line task.

    ``n_traces`` counts the entry's own traces (its channel's, for a swath).
    """
    if source_of(entry, settings) == "table" and entry.marks is None and entry.channel is None:
        # placed from its table row alone: place_line's own arithmetic, without a stub line
        # (xarray's coordinates took 0.45 s of a 1 M-trace survey's 316 lines)
        x, y, _ = even_positions(entry, n_traces)
        return x, y
    placed = placed_stub(entry, settings, n_traces)
    return (np.asarray(placed[X].values, dtype=np.float64),
            np.asarray(placed[Y].values, dtype=np.float64))


def placed_stub(entry: LineEntry, settings, n_traces: int) -> xr.DataArray:
    """The line of :func:`trace_positions` as placed: no samples, every trace coordinate
    (``x``, ``y``, and ``height`` from a GNSS track that has one)."""
    file_traces = n_traces * (entry.channel_count if entry.channel is not None else 1)
    coords = {TRACE: (TRACE, np.arange(file_traces, dtype=np.int64))}
    if source_of(entry, settings) == "headers":
        xy = header_positions(entry.file)
        if xy is not None:
            coords.update(header_x=(TRACE, xy[0]), header_y=(TRACE, xy[1]))
            file_traces = xy[0].size
            coords[TRACE] = (TRACE, np.arange(file_traces, dtype=np.int64))
    stub = xr.DataArray(np.zeros((file_traces, 0), dtype=np.float32), dims=(TRACE, TWT),
                        coords=coords, attrs={"line": entry.file.stem,
                                              "source": str(entry.file)})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SlicerWarning)
        return positioned(stub, entry, _Unresampled(settings))


# --- degrees given as metres --------------------------------------------------------------------


def check_not_degrees(x: np.ndarray, y: np.ndarray, settings) -> None:
    """Refuse positions that look like longitude and latitude rather than metres.

    Every ``|x| <= 180`` and ``|y| <= 90`` over less than :data:`DEGREES_SPAN` in both
    directions: as degrees a survey a few hundred metres across, as metres one narrower
    than an antenna.
    """
    if not (np.all(np.abs(x) <= 180) and np.all(np.abs(y) <= 90)):
        return
    width, height = float(np.ptp(x)), float(np.ptp(y))
    if max(width, height) >= DEGREES_SPAN:
        return
    first = settings.lines[0]
    source = source_of(first, settings)
    where = str(first.file) if source == "headers" else first.where
    crs = (f"the survey CRS {settings.crs} is in metres" if settings.crs is not None
           else "positions are read as metres")
    raise SettingsError(
        f"trace positions look like longitude/latitude degrees (x {np.min(x):.9g} to "
        f"{np.max(x):.9g}, y {np.min(y):.9g} to {np.max(y):.9g}), but {crs}: the survey would "
        f"be {width:.2g} x {height:.2g} m; give projected coordinates in metres, or give the "
        "fixes as a GNSS track (--positions track) with --track-crs", where=where)


def check_in_crs_area(x: np.ndarray, y: np.ndarray, settings) -> None:
    """Refuse positions that lie nowhere in the survey CRS, or far outside its area of use.

    The survey's median position is taken to longitude and latitude on the CRS's own datum
    (pyproj): the median, so that one stray line (named by the grid's checks) does not move
    it. No such place (the projection's inverse fails: coordinates 100 times too large), or
    one more than :data:`AREA_MARGIN` degrees outside the area the CRS is defined for (x and y
    swapped), is refused naming the first line; a CRS without an area of use is only checked
    for the first.
    """
    if settings.crs is None or not len(x):
        return
    crs = pyproj.CRS.from_user_input(settings.crs)
    geodetic = crs.geodetic_crs
    if geodetic is None:
        return
    every = max(1, len(x) // 4096)  # a few thousand positions are plenty for a median
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lon, lat = pyproj.Transformer.from_crs(crs, geodetic, always_xy=True).transform(
            float(np.median(x[::every])), float(np.median(y[::every])), errcheck=False)
    area, problem = crs.area_of_use, None
    if not (math.isfinite(lon) and math.isfinite(lat)):
        problem = "are no place in it"
    elif area is not None:
        west, south, east, north = area.bounds
        # the area's width and the middle's place east of its west edge, round the globe
        # (an area may cross 180 E: its west edge then lies east of its east edge)
        width = east - west if east >= west else east - west + 360.0
        east_of = (lon - west) % 360.0
        off_lon = 0.0 if east_of <= width else min(east_of - width, 360.0 - east_of)
        off_lat = max(south - lat, lat - north, 0.0)
        if max(off_lon, off_lat) > AREA_MARGIN:
            problem = (f"put the survey at {lon:.1f} E, {lat:.1f} N, far outside the "
                       f"area it is made for ({west:g} to {east:g} E, {south:g} to "
                       f"{north:g} N)")
    if problem is None:
        return
    first = settings.lines[0]
    source = source_of(first, settings)
    where = str(first.file) if source == "headers" else first.where
    raise SettingsError(
        f"trace positions (x {np.min(x):.9g} to {np.max(x):.9g}, y {np.min(y):.9g} to "
        f"{np.max(y):.9g}) in the survey CRS {settings.crs} {problem}: are x and y swapped, or "
        "the coordinates not in metres?", where=where)


__all__ = ["check_far_positions", "check_in_crs_area", "check_not_degrees", "far_from_line",
           "placed_stub", "trace_positions"]


# --- a line whose traces lie much farther apart, or closer, than the others' ---------------------

#: A line's mean trace step this many times the survey's median, or less than its inverse, is
#: named: a start or end mistyped by a digit stretches (or squeezes) one line's traces, and
#: the grid, without anything else looking wrong.
ODD_SPACING = 3.0


def warn_odd_spacing(settings, positions) -> None:
    """Warn (one message) of lines whose traces are :data:`ODD_SPACING` times farther apart,
    or closer, than the survey's median line (three lines or more)."""
    steps = np.array([float(np.hypot(np.diff(x), np.diff(y)).sum()) / max(x.size - 1, 1)
                      for x, y in positions])
    if steps.size < 3:
        return
    typical = float(np.median(steps))
    odd = [k for k, s in enumerate(steps)
           if not typical / ODD_SPACING <= s <= ODD_SPACING * typical]
    if not typical > 0 or not odd:
        return
    named = ", ".join(f"{settings.lines[k].where} ({steps[k]:.3g} m)" for k in odd[:5])
    more = f" and {len(odd) - 5} more" if len(odd) > 5 else ""
    warn(f"traces lie {typical:.3g} m apart on most lines but not on {named}{more}: a start or "
         "end point mistyped, or a line recorded at another trace interval?")
