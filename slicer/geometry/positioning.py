"""Survey geometry: where every trace of every line lies, from whatever the crew recorded.

A line's traces are placed (in this order of precedence) from

1. its row's ``positions`` column, else the survey's ``positions`` setting:

   ``table``
       evenly from the row's start to its end point, or, with a ``marks`` file, stretched
       piecewise-linearly between marks dropped at known distances
       (:func:`slicer.geometry.positions.stretch_by_marks`);
   ``headers``
       the file's trace-header coordinates
       (:func:`slicer.geometry.positions.positions_from_headers`);
   ``track``
       the row's GNSS ``track`` file, projected from ``track_crs`` to the survey CRS with pyproj
       and moved by the antenna offset (:func:`slicer.geometry.positions.positions_from_track`);

2. then, for a multi-channel swath (a ``channels`` table), each channel moved from the swath's
   reference point by its own offset, across and along the direction of travel;
3. then, with ``trace_spacing``, resampled to an even spacing
   (:func:`slicer.geometry.positions.resample_even`).

Line tables in local grid coordinates are mapped into the CRS before all this, when the
settings are loaded (:func:`slicer.geometry.localgrid.fit_control_points`).

:func:`prepare_survey` runs once before a build (start and end points from headers or tracks,
channels expanded, everything checked before any output is written); :func:`positioned` runs in
each line's task.

Multi-channel swaths: the traces of every channel are in one file, scan by scan. When the SEG-Y
trace headers number the traces within each ensemble (bytes 25-28, "trace number within the
ensemble", SEG-Y rev 1, Norris & Faichney 2002) with more than one value, those numbers are the
channel names; otherwise trace ``k`` belongs to the ``k % n``-th channel of the table.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import TRACE
from slicer.core.errors import InputFileError, SettingsError
from slicer.geometry.channels import _offset, _travel_direction, _with_positions, read_channel_table
from slicer.geometry.localgrid import _float_field, _read_table
from slicer.geometry.placement import ends_from_headers, place_line
from slicer.io.linetable import LineEntry, with_ends

if TYPE_CHECKING:
    import pyproj
    import xarray as xr

#: Path length (m) over which the direction of travel is taken for channel offsets.
SMOOTHING_M = 1.0


def source_of(entry: LineEntry, settings) -> str:
    """Where ``entry``'s positions come from: its own column, else the survey's setting."""
    return entry.positions or settings.positions


# --- once per survey ---------------------------------------------------------------------------


def prepare_survey(settings):
    """The settings with every line's start and end known in the survey CRS, swaths expanded.

    Parameters
    ----------
    settings : BuildSettings
        The build's settings; lines placed from ``headers`` or a ``track`` take their ends
        from their files, and a line with a channel table becomes one line per channel.

    Returns
    -------
    BuildSettings
        A copy (``settings.replace``) whose ``lines`` are the new entries, in table order.

    Raises
    ------
    InputFileError
        A file without header coordinates for ``headers``; a track that does not cover its
        line; a channel table that disagrees with its swath.
    SettingsError
        GNSS positions without a survey CRS.
    """
    entries = []
    for entry in settings.lines:
        source = source_of(entry, settings)
        if source == "headers":
            entry = ends_from_headers([entry])[0]
        elif source == "track":
            entry = _ends_from_track(entry, settings)
        entries.extend(expand_channels(entry))
    return settings.replace(lines=tuple(entries))


def track_crs(settings) -> pyproj.CRS:
    """The CRS of the GNSS fixes: ``track_crs``, else WGS 84 longitude/latitude."""
    import pyproj
    return pyproj.CRS.from_user_input(settings.track_crs or "EPSG:4326")


def _ends_from_track(entry: LineEntry, settings) -> LineEntry:
    import pyproj

    from slicer.geometry.positions import read_track
    from slicer.io.reading import line_info
    if settings.crs is None:
        raise SettingsError("positions from a GNSS track need the survey CRS to project into",
                            where="--crs")
    if entry.track is None:
        raise SettingsError(f"positions = track, but the line has no track file (column "
                            f"track) at {entry.where}", where="--positions")
    track = read_track(entry.track)
    last = channel_traces(entry, line_info(entry.file).n_traces) - 1
    if track.keys[0] > 0 or track.keys[-1] < last:
        raise InputFileError(f"the fixes cover traces {track.keys[0]:g} to {track.keys[-1]:g}, "
                             f"but {entry.file.name} runs from trace 0 to {last}; the track "
                             "must cover its first and last trace", where=str(entry.track))
    transformer = pyproj.Transformer.from_crs(track_crs(settings), settings.crs,
                                              always_xy=True)
    x, y = transformer.transform(np.interp([0, last], track.keys, track.first),
                                 np.interp([0, last], track.keys, track.second))
    return with_ends(entry, np.asarray(x), np.asarray(y))


def header_channels(path) -> np.ndarray | None:
    """Channel number of every trace from the SEG-Y headers (bytes 25-28), or None.

    None for a non-SEG-Y file or when the headers hold one value for every trace.
    """
    from slicer.io.reading import SEGY_SUFFIXES
    if path.suffix.lower() not in SEGY_SUFFIXES:
        return None
    from slicer.io.segy import segy_ensemble_numbers
    numbers = segy_ensemble_numbers(path)
    return numbers if np.unique(numbers).size > 1 else None


def expand_channels(entry: LineEntry) -> list[LineEntry]:
    """One entry per channel of a swath (the entry itself when it has no channel table).

    Raises
    ------
    InputFileError
        The table names other channels than the headers, or the traces do not divide evenly
        into the table's channels.
    """
    if entry.channels is None:
        return [entry]
    from slicer.geometry.channels import _match
    from slicer.io.reading import line_info
    table = read_channel_table(entry.channels)
    numbers = header_channels(entry.file)
    n_traces = line_info(entry.file).n_traces
    where = f"{entry.where} ({entry.file.name})"
    if numbers is not None:
        names = [str(v) for v in np.unique(numbers)]
        try:
            _match(names, table)
        except InputFileError as exc:
            raise InputFileError(f"{exc.message} (channels numbered in the trace headers of "
                                 f"{entry.file.name}, bytes 25-28)", where=table.where) from None
        counts = {name: int(np.sum(numbers == int(name))) for name in names}
        if len(set(counts.values())) > 1:
            listed = ", ".join(f"{k}: {v}" for k, v in counts.items())
            raise InputFileError(f"channels hold different numbers of traces ({listed}); a "
                                 "swath records every channel at every scan", where=where)
        order = list(table.channels)
    else:
        k = len(table.channels)
        if n_traces % k:
            raise InputFileError(f"{n_traces} traces do not divide into the {k} channels of "
                                 f"{table.where}; the channel table does not fit this file",
                                 where=where)
        order = list(table.channels)
    return [dataclasses.replace(entry, channel=name, channel_index=i, channel_count=len(order),
                                offset=table.offset(name)) for i, name in enumerate(order)]


def channel_traces(entry: LineEntry, n_traces: int) -> int:
    """Traces of ``entry``'s own channel in a file of ``n_traces`` (all when no channel)."""
    return n_traces // entry.channel_count if entry.channel is not None else n_traces


def line_name(entry: LineEntry) -> str:
    """The entry's line name: its file stem, with ``-ch<channel>`` for a swath's channel."""
    stem = entry.file.stem
    return f"{stem}-ch{entry.channel}" if entry.channel is not None else stem


# --- in each line's task -----------------------------------------------------------------------


def select_channel(line: xr.DataArray, entry: LineEntry) -> xr.DataArray:
    """The traces of ``entry``'s channel, renumbered 0, 1, ... (one per scan)."""
    if entry.channel is None:
        return line
    numbers = header_channels(entry.file)
    if numbers is not None:
        index = np.flatnonzero(numbers == int(entry.channel))
    else:
        index = np.arange(entry.channel_index, line.sizes[TRACE], entry.channel_count)
    out = line.isel({TRACE: index})
    out = out.assign_coords({TRACE: (TRACE, np.arange(index.size, dtype=np.int64),
                                     line[TRACE].attrs)})
    out.attrs["line"] = line_name(entry)
    out.attrs["channel"] = entry.channel
    return out


def positioned(line: xr.DataArray, entry: LineEntry, settings) -> xr.DataArray:
    """``line`` with per-trace ``x``, ``y``, ``distance`` (m), from the entry and settings.

    See the module docstring for the order of the steps.
    """
    from slicer.geometry.positions import (
        positions_from_headers,
        positions_from_track,
        resample_even,
        stretch_by_marks,
    )
    line = select_channel(line, entry)
    source = source_of(entry, settings)
    if source == "headers":
        line = positions_from_headers(line)
    elif source == "track":
        line = positions_from_track(line, entry.track, track_crs=track_crs(settings),
                                    survey_crs=settings.crs,
                                    offset_along=float(settings.antenna_along or 0.0),
                                    offset_across=float(settings.antenna_across or 0.0))
    elif entry.marks is not None:
        line = stretch_by_marks(line, read_marks(entry.marks), start=entry.start,
                                end=entry.end, where=str(entry.marks))
    else:
        line = place_line(line, entry)
    if entry.channel is not None and any(entry.offset):
        line = offset_channel(line, *entry.offset)
    if settings.trace_spacing is not None:
        line = resample_even(line, spacing=float(settings.trace_spacing))
    return line


def offset_channel(line: xr.DataArray, across: float, along: float) -> xr.DataArray:
    """Move a placed line ``across`` m right of and ``along`` m ahead of its travel."""
    x, y = (np.asarray(line[c].values, dtype=np.float64) for c in ("x", "y"))
    ux, uy = _travel_direction(x, y, smoothing=SMOOTHING_M, where=str(line.attrs.get("line")))
    x, y = _offset(x, y, ux, uy, along, across)
    note = line.attrs.get("positioning", "")
    return _with_positions(line, x, y, note=f"{note}; channel {across:g} m right, {along:g} m "
                                            "ahead of the reference point".lstrip("; "))


def read_marks(path) -> list[tuple[int, float]]:
    """Distance marks from a CSV ``trace,distance`` (trace index from 0, distance in m).

    Parameters
    ----------
    path : path-like
        The marks file; other columns are ignored, blank rows skipped.

    Returns
    -------
    list of (int, float)
        ``(trace, distance)`` of every row, in file order; distance in m.

    Raises
    ------
    InputFileError
        Missing file or columns, an empty or non-numeric field or a fractional trace index
        (naming ``file:row``).
    """
    path, _, rows = _read_table(path, "distance marks", ("trace", "distance"))
    marks = []
    for number, fields in rows:
        where = f"{path}:{number}"
        trace = _float_field(fields, "trace", where)
        if trace != math.floor(trace):
            raise InputFileError(f"column trace: {fields['trace']!r} is not a whole trace "
                                 "index", where=where)
        marks.append((int(trace), _float_field(fields, "distance", where)))
    return marks


def describe_entries(entries: Sequence[LineEntry], settings) -> dict:
    """How many lines were placed from each source, for the build record."""
    counts: dict[str, int] = {}
    for e in entries:
        key = source_of(e, settings) + (" + marks" if e.marks is not None else "")
        counts[key] = counts.get(key, 0) + 1
    channels = sum(1 for e in entries if e.channel is not None)
    return {"positions": counts, "channel_lines": channels,
            "blocks": sorted({e.block for e in entries if e.block is not None})}
