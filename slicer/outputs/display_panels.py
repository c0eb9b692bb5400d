"""What an overview panel shows: which cells of a slice are drawn, and where they lie.

A panel of a large slice is decimated (every k-th row and column) to no more cells than its
pixels can show; colour limits come from a regular subsample of those cells; coordinates as
large as UTM ones are given relative to the grid's south-west corner.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import TWT, UNITS
from slicer.outputs.cube import cube_transform, slice_axis
from slicer.outputs.display import MAX_SHEET_CELLS

if TYPE_CHECKING:
    import xarray as xr

#: Panel edge of the overview, inches, along the longer side of the grid.
PANEL_INCHES = 3.0

#: Most panels on a page of the overview. 4 x 3 panels of 3 inches make a page of about
#: 16 x 12 inches, 2450 x 1800 pixels at 150 dpi: A3 landscape at full size, or a screen at
#: about 80 %, with every panel 450 pixels across and its labels still 7-9 points.
PER_PAGE = 12

#: Coordinates at least this large (m) are plotted relative to the grid corner.
_RELATIVE_FROM = 10_000.0

#: Longest side of a panel as drawn, cells; larger slices are decimated (every k-th cell).
MAX_PANEL_CELLS = 1000


#: Cells drawn per pixel of a saved panel at most: more would be averaged away by the
#: renderer, at the cost of memory and time.
_CELLS_PER_PIXEL = 2

#: Most values the shared colour limits are computed from (a strided subsample beyond).
MAX_SAMPLE_VALUES = 1_000_000


def page_paths(path: str | os.PathLike, n_pages: int) -> list[Path]:
    """The files of an overview of ``n_pages`` pages written to ``path``.

    One page is ``path`` itself; more are numbered after its stem with at least two digits,
    so they sort in page order: ``overview-01.png``, ``overview-02.png``, ...
    """
    path = Path(path)
    if n_pages == 1:
        return [path]
    width = max(2, len(str(n_pages)))
    return [path.with_name(f"{path.stem}-{i:0{width}d}{path.suffix}")
            for i in range(1, n_pages + 1)]


def _decimals(values: np.ndarray, low: int, high: int) -> int:
    # Fewest decimals (within [low, high]) that show every value exactly.
    for d in range(low, high + 1):
        if np.allclose(np.round(values, d), values, rtol=0, atol=1e-9):
            return d
    return high


def panel_stride(cube: xr.DataArray, *, dpi: float | None = None) -> int:
    """Return the decimation k of the overview panels of ``cube`` (every k-th row and column).

    The long side of a panel keeps at most :data:`MAX_PANEL_CELLS` cells, all panels of the
    sheet together at most :data:`MAX_SHEET_CELLS`, and, when ``dpi`` is given, at most two
    cells per pixel of the saved panel (3 inches on its long side).
    """
    n, ny, nx = cube.shape
    longest = min(MAX_PANEL_CELLS, math.isqrt(MAX_SHEET_CELLS // max(n, 1)))
    if dpi is not None:
        longest = min(longest, math.ceil(_CELLS_PER_PIXEL * PANEL_INCHES * float(dpi)))
    return max(1, math.ceil(max(ny, nx) / max(longest, 1)))


def sample_count_stride(n_values: int) -> int:
    # Stride along both plan axes that brings n_values down to MAX_SAMPLE_VALUES or fewer.
    return max(1, math.ceil(math.sqrt(n_values / MAX_SAMPLE_VALUES)))


def drawn_cells(cube: xr.DataArray, index: int, stride: int) -> np.ndarray:
    # Strided selection of one slice: a dask-backed cube computes this slice's chunks only.
    return np.asarray(cube.data[index, ::stride, ::stride], dtype=np.float32)


def sample_stride(cube: xr.DataArray, *, dpi: float | None = None) -> int:
    """Return the plan stride s of the colour-limit subsample ``cube[:, ::s, ::s]``.

    s is the panel stride (:func:`panel_stride`, with the same ``dpi``) times the smallest
    whole number that leaves at most :data:`MAX_SAMPLE_VALUES` of the drawn cells, so the
    sample is a subset of the cells drawn; s is 1 (every value) for small cubes.
    """
    d = panel_stride(cube, dpi=dpi)
    n, ny, nx = cube.shape
    k = sample_count_stride(n * math.ceil(ny / d) * math.ceil(nx / d))
    return d * k


def range_labels(cube: xr.DataArray) -> list[str]:
    """Return one label per slice with its window, e.g. ``"0.30-0.40 m"`` or ``"10.0-12.5 ns"``."""
    axis = slice_axis(cube)
    tops = cube[f"{axis}_top"].values
    bottoms = cube[f"{axis}_bottom"].values
    low, high = (1, 3) if axis == TWT else (2, 4)
    d = _decimals(np.concatenate([tops, bottoms]), low, high)
    return [f"{t:.{d}f}-{b:.{d}f} {UNITS[axis]}" for t, b in zip(tops, bottoms, strict=True)]


class Frame:
    """Plot extent of a cube, relative to its south-west corner when coordinates are large.

    UTM coordinates have six or seven digits; ticks relative to the corner stay short and the
    corner goes into the axis label instead.
    """

    def __init__(self, cube: xr.DataArray):
        t = cube_transform(cube)
        self.ny, self.nx = ny, nx = cube.shape[1:]
        self.cell = t.a
        self.width = nx * self.cell
        self.height = ny * self.cell
        west, south = t.c, t.f - ny * self.cell
        large = max(abs(west), abs(south), abs(west + self.width), abs(t.f)) >= _RELATIVE_FROM
        self.x0, self.y0 = (west, south) if large else (0.0, 0.0)
        self.extent = (west - self.x0, west - self.x0 + self.width,
                       south - self.y0, south - self.y0 + self.height)

    @staticmethod
    def _label(word: str, origin: float) -> str:
        return f"{word} - {origin:.10g} (m)" if origin else f"{word} (m)"

    def xlabel(self) -> str:
        return self._label("easting", self.x0)

    def ylabel(self) -> str:
        return self._label("northing", self.y0)


__all__ = ["MAX_PANEL_CELLS", "MAX_SAMPLE_VALUES", "MAX_SHEET_CELLS", "Frame", "panel_stride",
           "range_labels", "sample_stride"]
