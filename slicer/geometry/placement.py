"""Straight lines: traces spaced evenly between a line's start and end points, which come from
the line table or from the file's own first and last trace-header positions."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import DISTANCE, TRACE, X, Y
from slicer.core.errors import InputFileError
from slicer.io.linetable import LineEntry, with_ends
from slicer.io.reading import header_positions

if TYPE_CHECKING:
    import xarray as xr


def place_line(line: xr.DataArray, entry: LineEntry) -> xr.DataArray:
    """Give every trace its ground position, spaced evenly from the entry's start to its end.

    Adds per-trace coordinates ``x``, ``y`` (m, survey CRS) and ``distance`` (m from start).

    Parameters
    ----------
    line : xarray.DataArray
        A line with a ``trace`` dim of at least two traces.
    entry : LineEntry
        Its line-table row: ``start`` and ``end`` points (m) and ``length``.

    Returns
    -------
    xarray.DataArray
        A copy of ``line`` with the three coordinates; the first trace at the start, the last
        at the end.

    Raises
    ------
    InputFileError
        Fewer than two traces.
    """
    x, y, distance = even_positions(entry, line.sizes[TRACE])
    return line.assign_coords({
        X: (TRACE, x, {"units": "m", "long_name": "easting"}),
        Y: (TRACE, y, {"units": "m", "long_name": "northing"}),
        DISTANCE: (TRACE, distance, {"units": "m", "long_name": "distance along line"}),
    })


def even_positions(entry: LineEntry, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``x``, ``y`` and ``distance`` (m) of ``n`` traces spaced evenly from the entry's start
    to its end: what :func:`place_line` gives them.

    Raises
    ------
    InputFileError
        Fewer than two traces.
    """
    if n < 2:
        raise InputFileError(f"a line needs at least two traces, found {n}",
                             where=str(entry.file))
    frac = np.arange(n) / (n - 1)
    (sx, sy), (ex, ey) = entry.start, entry.end
    return sx + frac * (ex - sx), sy + frac * (ey - sy), frac * entry.length


def ends_from_headers(entries: Sequence[LineEntry]) -> list[LineEntry]:
    """Entries whose start and end are their files' first and last trace-header positions.

    Raises
    ------
    InputFileError
        A file holds no trace coordinates.
    """
    out = []
    for e in entries:
        xy = header_positions(e.file)
        if xy is None:
            raise InputFileError("the file holds no trace coordinates for --positions "
                                 "headers (SEG-Y: CDP or source X/Y are all zero)",
                                 where=str(e.file))
        out.append(with_ends(e, *xy))
    return out
