"""What every step that takes a line checks first: a DataArray along ``twt`` that time can be
read from.

A line is an :class:`xarray.DataArray` with a ``twt`` dim and coordinate: two-way time in ns,
at least two samples, finite, evenly spaced and increasing. Steps read the sample interval from
its first two times and work along the ``twt`` dim by name; a line without that coordinate,
with reversed or uneven times, or in other units would give wrong answers quietly (sample
numbers taken for nanoseconds, a negative frequency), so :func:`checked_line` refuses it with
one :class:`~slicer.core.errors.SettingsError` naming the step.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import TRACE, TWT
from slicer.core.errors import SettingsError

if TYPE_CHECKING:
    import xarray as xr

#: How far a step between samples may differ from the first one (a share of it): rounding of
#: times written in decimals (0.1 ns steps at 100 ns), not an uneven record.
EVEN_TOLERANCE = 1e-3


def checked_line(line, *, step: str, traces: bool = False) -> xr.DataArray:
    """``line`` with its ``twt`` dim last, if it is a line ``step`` can take (with
    ``traces``, a line with a ``trace`` dim: a step across its traces).

    Raises
    ------
    SettingsError
        Not a DataArray; no ``twt`` dim or coordinate (or ``trace`` dim); ``twt`` not in ns,
        not finite, not increasing or not evenly spaced; fewer than two samples; no traces.
    """
    import xarray as xr
    if not isinstance(line, xr.DataArray):
        raise SettingsError(f"{step} takes a line: an xarray.DataArray with dims (trace, twt), "
                            f"not a {type(line).__name__}", where=step)
    where = str(line.attrs.get("source", line.attrs.get("line", step)))
    if TWT not in line.dims or TWT not in line.coords:
        raise SettingsError(f"{step} needs a 'twt' dim with a coordinate of two-way times "
                            f"(ns); the line has dims {tuple(map(str, line.dims))} and "
                            f"coordinates {tuple(map(str, line.coords))}", where=where)
    if traces and TRACE not in line.dims:
        raise SettingsError(f"{step} works across a line's traces: it needs a 'trace' dim; the "
                            f"line has dims {tuple(map(str, line.dims))}", where=where)
    units = line[TWT].attrs.get("units", "ns")
    if units != "ns":
        raise SettingsError(f"{step}: the line's twt is in {units!r}; give two-way times in "
                            "ns", where=where)
    twt = np.asarray(line[TWT].values)
    if twt.size < 2:
        raise SettingsError(f"{step}: a line needs at least two samples per trace",
                            where=where)
    if not np.issubdtype(twt.dtype, np.number):
        raise SettingsError(f"{step}: the line's twt holds {twt.dtype} values, not times in ns",
                            where=where)
    steps = np.diff(twt.astype(np.float64))
    if not (np.all(np.isfinite(twt)) and steps[0] > 0
            and np.all(np.abs(steps - steps[0]) <= EVEN_TOLERANCE * steps[0])):
        raise SettingsError(f"{step}: the line's twt must increase in even steps (finite ns); "
                            f"it runs {float(twt[0]):g}, {float(twt[1]):g} ... "
                            f"{float(twt[-1]):g}", where=where)
    if any(size == 0 for size in line.shape):
        raise SettingsError(f"{step}: the line has no traces (shape {line.shape})", where=where)
    return line if line.dims[-1] == TWT else line.transpose(..., TWT)


__all__ = ["checked_line"]
