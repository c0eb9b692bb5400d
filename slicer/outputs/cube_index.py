"""Selecting cube slices by depth or time: an xarray index over the slice windows.

A cube's slice coordinate holds window centres, so xarray's default index answers
``cube.sel(depth=v, method="nearest")`` with the nearest centre, which for windows of unequal
thickness is not always the window holding ``v`` (and at the midpoint between two centres it
is a tie). :class:`WindowIndex` replaces that index on the slice dim: it keeps the centres as
the coordinate (what files store, see :mod:`slicer.outputs.cf`) and looks labels up in a
:class:`pandas.IntervalIndex` of the windows ``[top, bottom)``.

Rules of ``cube.sel(depth=v)`` (the same for ``twt``; for ``elevation``, whose windows count up,
the window is ``(bottom, top]``, so a shared edge again belongs to the deeper window):

* the slice whose window contains ``v``; windows are half-open (common practice, and the
  same ``[top, bottom)`` over which :func:`slicer.gridding.windows.reduce_to_windows`
  averages), so a depth shared by two touching windows belongs to the deeper one;
* where windows overlap and several contain ``v``, the one whose centre is nearest ``v``
  (the shallower on a tie);
* no window contains ``v``: :class:`NoWindowError` (a ``KeyError``, as xarray raises),
  unless ``method="nearest"``, which picks the window nearest ``v`` (distance to its nearer
  edge; the shallower on a tie), within ``tolerance`` if one is given;
* a list or array of values gives one slice per value by the same rules;
* a slice ``slice(a, b)`` keeps the windows whose centres lie in ``[a, b]``, as before.

Files cannot store an interval index: writers keep centres and bounds, and readers rebuild
the index (:func:`index_windows`).
"""

from __future__ import annotations

from collections.abc import Hashable, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from xarray.core.indexing import IndexSelResult
from xarray.indexes import Index, PandasIndex

from slicer.core.errors import SettingsError


class NoWindowError(SettingsError, KeyError):
    """No slice window holds the value asked for (a ``KeyError``, as xarray's ``sel``)."""

    def __str__(self) -> str:  # KeyError would quote the message
        return self.message if self.where is None else f"{self.where}: {self.message}"


def _windows(top, bottom) -> pd.IntervalIndex:
    top, bottom = np.asarray(top, dtype=np.float64), np.asarray(bottom, dtype=np.float64)
    if top.size and np.all(top > bottom):  # elevation: (bottom, top], the lower edge
        return pd.IntervalIndex.from_arrays(bottom, top, closed="right")  # the deeper window's
    return pd.IntervalIndex.from_arrays(top, bottom, closed="left")


class WindowIndex(Index):
    """An xarray index over the slice dim of a cube, selecting by window (module docstring).

    Build it with :func:`index_windows`; directly, ``cube.set_xindex(axis, WindowIndex,
    top=..., bottom=...)`` with the window bounds in the coordinate's units.

    Parameters
    ----------
    centres : xarray.indexes.PandasIndex
        The default index of the window centres (the coordinate values).
    windows : pandas.IntervalIndex
        The windows ``[top, bottom)``, one per centre, in the same order.
    """

    def __init__(self, centres: PandasIndex, windows: pd.IntervalIndex):
        if len(windows) != len(centres.index):
            raise SettingsError(f"{len(centres.index)} slice centres but {len(windows)} "
                                "windows", where="top/bottom")
        self.centres = centres
        self.windows = windows

    @property
    def dim(self) -> Hashable:
        return self.centres.dim

    @classmethod
    def from_variables(cls, variables: Mapping[Any, xr.Variable], *,
                       options: Mapping[str, Any]) -> WindowIndex:
        if "top" not in options or "bottom" not in options:
            raise SettingsError("a window index needs top= and bottom= (the window bounds)",
                                where="top/bottom")
        centres = PandasIndex.from_variables(variables, options={})
        return cls(centres, _windows(options["top"], options["bottom"]))

    @classmethod
    def concat(cls, indexes: Sequence[WindowIndex], dim: Hashable,
               positions=None) -> WindowIndex:
        centres = PandasIndex.concat([i.centres for i in indexes], dim, positions)
        windows = indexes[0].windows.append([i.windows for i in indexes[1:]])
        if positions is not None:
            windows = windows.take(np.argsort(np.concatenate(positions)))
        return cls(centres, windows)

    def create_variables(self, variables=None):
        return self.centres.create_variables(variables)

    def to_pandas_index(self) -> pd.Index:
        return self.centres.index

    def _subset(self, positions) -> WindowIndex:
        positions = np.asarray(positions)
        return type(self)(self.centres._replace(self.centres.index[positions]),
                          self.windows[positions])

    def isel(self, indexers) -> WindowIndex | None:
        if self.centres.isel(indexers) is None:
            return None  # a scalar or a new dimension: the index goes, as PandasIndex's
        indexer = indexers[self.dim]
        indexer = indexer.data if isinstance(indexer, xr.Variable) else indexer
        return self._subset(np.arange(len(self.windows))[indexer])

    def __getitem__(self, indexer) -> WindowIndex:
        return self._subset(np.arange(len(self.windows))[indexer])

    def sel(self, labels: dict[Any, Any], method=None, tolerance=None) -> IndexSelResult:
        (name, label), = labels.items()
        if isinstance(label, slice):
            return self.centres.sel(labels, method=method, tolerance=tolerance)
        if method not in (None, "nearest"):
            raise SettingsError(f"slice selection by window takes method None or 'nearest', "
                                f"not {method!r}", where=str(name))
        values = np.asarray(label.values if isinstance(label, xr.DataArray | xr.Variable)
                            else label)
        if values.dtype.kind == "b":
            positions = values
        else:
            flat = [self._position(float(v), name, method, tolerance) for v in values.ravel()]
            positions = np.asarray(flat, dtype=np.intp).reshape(values.shape)
            if positions.ndim == 0:
                positions = int(positions)
        if isinstance(label, xr.Variable):
            positions = xr.Variable(label.dims, positions)
        elif isinstance(label, xr.DataArray):
            positions = xr.DataArray(positions, coords=label._coords, dims=label.dims)
        return IndexSelResult({self.dim: positions})

    def _position(self, value: float, name, method, tolerance) -> int:
        """Position of the window for ``value`` by the rules of the module docstring."""
        centres = np.asarray(self.centres.index, dtype=np.float64)
        inside = np.flatnonzero(self.windows.contains(value))
        if inside.size:
            return int(inside[np.argmin(np.abs(centres[inside] - value))])
        if method == "nearest" and np.isfinite(value):
            tops = np.asarray(self.windows.left, dtype=np.float64)
            bottoms = np.asarray(self.windows.right, dtype=np.float64)
            distance = np.maximum(tops - value, value - bottoms)  # > 0 or = 0 at a bottom
            best = int(np.argmin(distance))
            if tolerance is None or distance[best] <= tolerance:
                return best
            raise NoWindowError(f"no slice window lies within {tolerance} of {value}",
                                where=str(name))
        raise NoWindowError(f"no slice window contains {value} (windows are [top, bottom); "
                            "method='nearest' picks the nearest one)", where=str(name))

    def equals(self, other: Index, *, exclude=None) -> bool:
        return (isinstance(other, WindowIndex) and self.centres.equals(other.centres)
                and self.windows.equals(other.windows))

    def _table(self) -> pd.DataFrame:
        return pd.DataFrame({"centre": np.asarray(self.centres.index, dtype=np.float64),
                             "top": self.windows.left, "bottom": self.windows.right})

    def join(self, other: WindowIndex, how: str = "inner") -> WindowIndex:
        # Alignment of two cubes: windows are matched by their bounds, never by centre alone.
        mine, theirs = self._table(), other._table()
        if how == "outer":
            table = pd.concat([mine, theirs]).drop_duplicates(["top", "bottom"])
        else:
            table = mine.merge(theirs[["top", "bottom"]], on=["top", "bottom"])
        table = table.sort_values("centre", kind="stable")
        centres = pd.Index(table["centre"].to_numpy(), name=self.centres.index.name)
        return type(self)(self.centres._replace(centres), _windows(table["top"],
                                                                   table["bottom"]))

    def reindex_like(self, other: WindowIndex, method=None, tolerance=None):
        keys = pd.MultiIndex.from_arrays([self.windows.left, self.windows.right])
        wanted = pd.MultiIndex.from_arrays([other.windows.left, other.windows.right])
        return {self.dim: keys.get_indexer(wanted)}

    def rename(self, name_dict, dims_dict) -> WindowIndex:
        return type(self)(self.centres.rename(name_dict, dims_dict), self.windows)

    def _copy(self, deep: bool = True, memo=None) -> WindowIndex:
        return type(self)(self.centres._copy(deep=deep, memo=memo), self.windows.copy())

    def __repr__(self) -> str:
        return f"WindowIndex({self.windows!r})"


def index_windows(cube: xr.DataArray) -> xr.DataArray:
    """Return ``cube`` with a :class:`WindowIndex` on its slice dim (a new object).

    The windows come from the ``<axis>_top``/``<axis>_bottom`` coordinates; the coordinate
    values (window centres) and everything else stay as they are.
    """
    axis = str(cube.dims[0])
    top, bottom = cube[f"{axis}_top"].values, cube[f"{axis}_bottom"].values
    return cube.set_xindex(axis, WindowIndex, top=top, bottom=bottom)
