"""The output grid, and the neighbour weights that put traces onto it.

Trace positions do not change from slice to slice: the weights are one sparse matrix ``W``
(cells x traces, rows summing to 1), and every slice is ``W @ values``.

Sampling is dense along lines and sparse across them. Each trace's weight for a cell is the
product of two tents measured in that trace's own line frame: ``1 - |along| / h`` along its line
(``h`` about one cell) and ``1 - |across| / s`` across it, where ``s`` is taken on the cell's
side of the line: the distance to the next parallel line on that side
(:func:`slicer.gridding.neighbours.side_distances`). Between two parallel lines this is linear
interpolation across the lines of values averaged over about a cell along them, so neither line
is copied into the gap (no stripes), no line weighs in beyond its neighbour on either side, and
lines of another direction (an orthogonal set) weigh in through their own frame.

Gaps. Two lines at most ``max_gap`` apart (default :data:`MAX_GAP_SPACINGS` x the survey's line
spacing) are *bridged*: every cell between them is interpolated. On a side with no parallel line
within ``max_gap`` (a wider gap, the survey's edge) the tent reaches the search radius ``radius``
only, and cells no tent reaches stay NaN. So a wide gap is never filled by smearing the lines
beside it, and the box of cells each trace visits spans at most ``along + max(max_gap, radius)``
either way, whatever the layout.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse

from slicer.core.errors import SettingsError, warn
from slicer.gridding.cells import check_cell as check_cell  # re-exported
from slicer.gridding.neighbours import (
    line_directions,
    side_distances,
    survey_spacing,
    trace_spacing,
)
from slicer.gridding.neighbours import line_spacings as line_spacings  # re-exported


@dataclass(frozen=True)
class Grid:
    """A north-up grid of square cells.

    Attributes
    ----------
    west, north : float
        Coordinates of the grid's upper-left corner (m), whole multiples of ``cell``.
    cell : float
        Cell edge (m).
    nx, ny : int
        Columns (eastward) and rows (southward).
    """

    west: float
    north: float
    cell: float
    nx: int
    ny: int

    @property
    def x(self) -> np.ndarray:
        """Cell-centre eastings (m), ascending."""
        return self.west + self.cell * (np.arange(self.nx) + 0.5)

    @property
    def y(self) -> np.ndarray:
        """Cell-centre northings (m), descending."""
        return self.north - self.cell * (np.arange(self.ny) + 0.5)

    @property
    def size(self) -> int:
        return self.nx * self.ny


#: Cells :func:`grid_for` lays out at most, whatever else allows: a last guard (a build checks
#: the grid against its memory limit before any work, see :mod:`slicer.pipeline.bounds`).
MAX_GRID_CELLS = 200_000_000


def grid_for(x: np.ndarray, y: np.ndarray, *, cell: float, max_cells: int = MAX_GRID_CELLS,
             where: str = "--cell") -> Grid:
    """The smallest grid of whole cells (corner on a multiple of ``cell``) covering the points.

    Parameters
    ----------
    x, y : numpy.ndarray
        Point (trace) eastings and northings, m.
    cell : float
        Cell edge, m.
    max_cells : int
        Most cells allowed.
    where : str
        The option named in the message when there are too many cells or bad points.

    Returns
    -------
    Grid
        At least one cell each way.

    Raises
    ------
    SettingsError
        A bad cell, no points or non-finite ones, or more than ``max_cells`` cells (counted
        in floating point first, so no coordinate can make a huge integer or array; the
        message names ``where``).
    """
    cell = check_cell(cell)
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.size == 0 or y.size == 0:
        raise SettingsError("no trace positions to lay a grid over", where=where)
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        raise SettingsError("trace positions include NaN or infinite values", where=where)
    west, east = float(np.min(x)), float(np.max(x))
    south, north = float(np.min(y)), float(np.max(y))
    with np.errstate(over="ignore"):
        wide, high = (east - west) / cell + 2, (north - south) / cell + 2
    if not (math.isfinite(wide * high) and wide * high <= 4 * max_cells + 16):
        raise SettingsError(_too_many(cell, wide - 2, high - 2, east - west, north - south,
                                      max_cells), where=where)
    # a small tolerance keeps a point lying exactly on a cell edge from adding a row of cells
    i0 = math.floor(west / cell + 1e-9)
    i1 = math.ceil(east / cell - 1e-9)
    j0 = math.floor(south / cell + 1e-9)
    j1 = math.ceil(north / cell - 1e-9)
    nx, ny = max(i1 - i0, 1), max(j1 - j0, 1)
    if nx * ny > max_cells:
        raise SettingsError(_too_many(cell, nx, ny, east - west, north - south, max_cells),
                            where=where)
    return Grid(west=round(i0 * cell, 9), north=round(j1 * cell, 9), cell=cell, nx=nx, ny=ny)


def _too_many(cell: float, nx: float, ny: float, width: float, height: float,
              max_cells: int) -> str:
    return (f"a {cell:g} m cell gives {count_text(nx)} x {count_text(ny)} cells over the "
            f"traces' extent of {width:.4g} x {height:.4g} m, more than {count_text(max_cells)}; "
            "choose a larger cell, or check the trace coordinates")


def count_text(n: float) -> str:
    """A count for a message: whole digits up to 1e12, else three significant digits."""
    n = float(n)
    if not math.isfinite(n):
        return "countless"
    return f"{math.ceil(n - 1e-9):d}" if n < 1e12 else f"{n:.3g}"


@dataclass(frozen=True)
class Weights:
    """Neighbour weights of a grid: ``values_on_cells = matrix @ values_on_traces``.

    Attributes
    ----------
    matrix : scipy.sparse.csr_array
        Cells (row-major over ``(y, x)``) x traces, rows summing to 1 (or empty).
    empty : numpy.ndarray
        Boolean per cell: no weight, or neither bridged nor within the radius; these are NaN.
    radius, across, along : float
        Search radius, the survey's line spacing (the median distance between neighbouring
        lines) and along-line tent half-width (m).
    max_gap : float
        Widest gap between parallel lines that is bridged (m).
    """

    matrix: scipy.sparse.csr_array
    empty: np.ndarray
    radius: float
    across: float
    along: float
    max_gap: float = math.nan

    def apply(self, values: np.ndarray) -> np.ndarray:
        """Grid a ``(traces, slices)`` array into ``(slices, cells)``, NaN where empty.

        NaN trace values (a window a short record does not reach) are left out and the other
        weights of the cell renormalised.
        """
        values = np.asarray(values, dtype=np.float64)
        finite = np.isfinite(values)
        total = self.matrix @ np.where(finite, values, 0.0)
        if finite.all():
            out = total
        else:
            weight = self.matrix @ finite.astype(np.float64)
            with np.errstate(invalid="ignore", divide="ignore"):
                out = np.where(weight > 1e-12, total / weight, np.nan)
        out = out.T
        out[:, self.empty] = np.nan
        return out.astype(np.float32)


@dataclass(frozen=True)
class TraceFrame:
    """Every trace's position and line frame, and the lengths that shape the weights.

    Attributes
    ----------
    x, y : numpy.ndarray
        Trace positions (m).
    ux, uy : numpy.ndarray
        Unit vector along each trace's line.
    left, right : numpy.ndarray
        Across-line tent half-width of each trace on the left (a quarter turn anticlockwise
        from its line's direction) and on the right (m): the distance to the next parallel line
        on that side when it is at most ``max_gap``, else ``radius``.
    bridged_left, bridged_right : numpy.ndarray
        Boolean per trace: that side faces a parallel line at most ``max_gap`` away.
    along : float
        Along-line tent half-width (m).
    radius : float
        Search radius (m): cells that are not bridged and have no trace this close stay NaN.
    line_spacing : float
        Median line spacing (m).
    max_gap : float
        Widest gap between parallel lines that is bridged (m).
    """

    x: np.ndarray
    y: np.ndarray
    ux: np.ndarray
    uy: np.ndarray
    left: np.ndarray
    right: np.ndarray
    bridged_left: np.ndarray
    bridged_right: np.ndarray
    along: float
    radius: float
    line_spacing: float
    max_gap: float

    @property
    def reach(self) -> float:
        """Farthest a trace can be from a cell it weighs in (m)."""
        widest = max(float(self.left.max()), float(self.right.max())) if self.x.size else 0.0
        return max(self.radius, math.hypot(self.along, widest))

    def subset(self, index: np.ndarray) -> TraceFrame:
        """The frame of some traces only (same lengths)."""
        return TraceFrame(self.x[index], self.y[index], self.ux[index], self.uy[index],
                          self.left[index], self.right[index], self.bridged_left[index],
                          self.bridged_right[index], self.along, self.radius,
                          self.line_spacing, self.max_gap)


#: Default widest bridged gap, in line spacings (the median distance between neighbouring
#: lines): a single missing line (a gap of two spacings) is bridged, two or more are not.
MAX_GAP_SPACINGS = 2.5


def trace_frame(x: np.ndarray, y: np.ndarray, line: np.ndarray, *, cell: float,
                radius: float | None = None, along: float | None = None,
                max_gap: float | None = None) -> TraceFrame:
    """Line frames and gridding lengths of traces at ``(x, y)`` on lines ``line``.

    Parameters
    ----------
    x, y : numpy.ndarray
        Trace positions (m), grouped by line and in recording order within a line.
    line : numpy.ndarray
        Integer line id of every trace.
    cell : float
        Grid cell (m).
    radius : float, optional
        Cells that are not between two bridged lines and have no trace closer than this (m)
        stay NaN. Default 0.75 x the line spacing (the median distance between neighbouring
        lines, :func:`~slicer.gridding.neighbours.survey_spacing`), but at least one cell
        diagonal.
    along : float, optional
        Half-width (m) of the along-line tent. Default the larger of the cell and the trace
        spacing.
    max_gap : float, optional
        Widest gap (m) between parallel lines that is bridged by interpolation; a wider gap
        stays NaN beyond ``radius`` from its lines. Default :data:`MAX_GAP_SPACINGS` x the
        line spacing.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    line = np.asarray(line)
    if x.size == 0:
        raise SettingsError("no traces to grid")
    dx_step = trace_spacing(x, y, line)
    s_median = survey_spacing(x, y, line)
    if not math.isfinite(s_median):
        s_median = 20 * (dx_step if math.isfinite(dx_step) else cell)
        warn(f"no parallel neighbour lines found; assuming a line spacing of {s_median:.3g} m")
    if along is None:
        along = max(cell, dx_step if math.isfinite(dx_step) else cell)
    if radius is None:
        radius = max(0.75 * s_median, cell * math.sqrt(2))
    elif not math.isfinite(radius) or radius <= 0:
        raise SettingsError(f"search radius must be positive, got {radius:g} m",
                            where="--radius")
    if max_gap is None:
        max_gap = MAX_GAP_SPACINGS * s_median
    elif not math.isfinite(max_gap) or max_gap < 0:
        raise SettingsError(f"the widest bridged gap must be zero or more, got {max_gap:g} m",
                            where="--max-gap")
    left, right = side_distances(x, y, line, limit=max_gap, overhang=along)
    bridged_left, bridged_right = np.isfinite(left), np.isfinite(right)
    left[~bridged_left] = radius
    right[~bridged_right] = radius
    ux, uy = line_directions(x, y, line)
    _check_reach(float(along), max(float(np.max(left, initial=0.0)),
                                   float(np.max(right, initial=0.0))), cell)
    return TraceFrame(x, y, ux, uy, left, right, bridged_left, bridged_right, float(along),
                      float(radius), s_median, float(max_gap))


#: Most cells one trace's tents may reach (the box :func:`grid_weights` visits): 800 for a 5 cm
#: cell under tents 2 m across lines and 5 cm along.
MAX_REACH_CELLS = 1_000_000


def _check_reach(along: float, wide: float, cell: float) -> None:
    """Refuse a reach of more than :data:`MAX_REACH_CELLS` cells per trace (a 1e-7 m cell had
    asked for 19 TiB) or past any float (a cell or radius near 1e308 m)."""
    big, small = max(along, wide) / cell, min(along, wide) / cell
    if not math.isfinite(big):
        raise SettingsError(f"each trace's reach ({along:g} m along, {wide:g} m across) is "
                            "far too large for any survey", where="--cell, --radius")
    reach = (2 * math.ceil(big) + 1) * (2 * math.ceil(small) + 1)
    if reach > MAX_REACH_CELLS:
        least = max(along, wide) * min(along, wide) * 4 / MAX_REACH_CELLS
        raise SettingsError(f"a {cell:g} m cell puts {reach:.3g} cells within each trace's "
                            f"reach ({along:g} m along its line, {wide:g} m across); choose a "
                            f"cell of at least {math.sqrt(least):.2g} m", where="--cell")


def grid_weights(frame: TraceFrame, xc: np.ndarray, yc: np.ndarray, *, cell: float
                 ) -> tuple[scipy.sparse.csr_array, np.ndarray]:
    """Row-normalised weights (cells x traces of ``frame``) and the empty-cell mask.

    Each trace is spread onto the cells its tents reach (a box of cells around it, visited one
    offset at a time for all traces with the same box at once), which is much faster than
    asking a tree for every cell's neighbours. The box is as wide as the tents' rectangle
    seen from the grid's axes, so a line along an axis visits a thin box.

    Parameters
    ----------
    frame : TraceFrame
        The traces that may weigh in (all of them, or those near a tile).
    xc, yc : numpy.ndarray
        Cell-centre eastings (ascending) and northings (descending) of a regular block of
        cells, spaced by one cell (m). Rows of the result run over ``(y, x)`` row-major.
    cell : float
        The cell edge (m): given, as a block of one cell cannot tell it (one had been taken
        for 1 m, and a grid's last corner cell gridded with boxes of the wrong size).
    """
    ny, nx = yc.size, xc.size
    x, y, ux, uy = frame.x, frame.y, frame.ux, frame.uy
    col0 = np.rint((x - xc[0]) / cell).astype(np.int64)
    row0 = np.rint((yc[0] - y) / cell).astype(np.int64)
    # half-extents (in cells) of each trace's tent rectangle along the grid's axes
    wide = np.maximum(frame.left, frame.right)
    kx = np.ceil((np.abs(ux) * frame.along + np.abs(uy) * wide) / cell - 1e-9).astype(np.int64)
    ky = np.ceil((np.abs(uy) * frame.along + np.abs(ux) * wide) / cell - 1e-9).astype(np.int64)
    # traces whose box lies wholly outside the block visit nothing
    inside = (col0 + kx >= 0) & (col0 - kx < nx) & (row0 + ky >= 0) & (row0 - ky < ny)
    rows, cols, vals, bridged = [], [], [], []
    # the distinct (kx, ky) half-extents, by counting (np.unique(..., axis=0) sorted every
    # inside trace's pair: 15 % of a tile's time)
    span = int(ky.max(initial=0)) + 1
    keys = np.flatnonzero(np.bincount(kx[inside] * span + ky[inside]))
    boxes = np.column_stack([keys // span, keys % span])
    for bx, by in boxes:
        t = np.flatnonzero(inside & (kx == bx) & (ky == by))
        tx, ty, tux, tuy = x[t], y[t], ux[t], uy[t]
        t_left, t_right = frame.left[t], frame.right[t]
        t_bl, t_br = frame.bridged_left[t], frame.bridged_right[t]
        t_col, t_row = col0[t], row0[t]
        for dj in range(-by, by + 1):
            row = t_row + dj
            ok_row = (row >= 0) & (row < ny)
            if not ok_row.any():
                continue
            dyp = yc[np.clip(row, 0, ny - 1)] - ty
            for di in range(-bx, bx + 1):
                col = t_col + di
                ok = ok_row & (col >= 0) & (col < nx)
                if not ok.any():
                    continue
                # every trace of the group at once; those off the block are dropped below
                dxp = xc[np.clip(col, 0, nx - 1)] - tx
                a = np.abs(dxp * tux + dyp * tuy)
                b = dyp * tux - dxp * tuy  # left positive
                on_left = b >= 0
                w = np.clip(1 - a / frame.along, 0, None) * \
                    np.clip(1 - np.abs(b) / np.where(on_left, t_left, t_right), 0, None)
                keep = ok & (w > 0)
                rows.append(row[keep] * nx + col[keep])
                cols.append(t[keep])
                vals.append(w[keep])
                bridged.append(np.where(on_left, t_bl, t_br)[keep])
    if rows:
        rows, cols, vals = np.concatenate(rows), np.concatenate(cols), np.concatenate(vals)
        bridged = np.concatenate(bridged)
    else:
        rows = cols = np.zeros(0, dtype=np.int64)
        vals, bridged = np.zeros(0), np.zeros(0, dtype=bool)
    matrix = scipy.sparse.csr_array((vals, (rows, cols)), shape=(ny * nx, x.size))
    total = np.asarray(matrix.sum(axis=1)).ravel()
    between = np.bincount(rows[bridged], minlength=ny * nx) > 0  # between two bridged lines
    # A cell with no weight is empty, one between two bridged lines is not; only the others
    # ask whether a trace lies within the radius (the tree's query was 36 of a 400 x 400
    # tile's 86 ms when asked for every cell, and most cells are bridged)
    empty = total <= 0
    ask = np.flatnonzero(~empty & ~between)
    if ask.size:
        # imported here: the process that plans a build on worker processes never grids, and
        # scipy.spatial loads scipy's BLAS (0.13 s, and its threads' spin: benchmarks/README.md)
        from scipy.spatial import cKDTree
        tree = cKDTree(np.column_stack([x, y]))
        nearest, _ = tree.query(np.column_stack([xc[ask % nx], yc[ask // nx]]), k=1,
                                distance_upper_bound=frame.radius)
        empty[ask] = ~np.isfinite(nearest)
    scale = np.where(total > 0, 1.0 / np.where(total > 0, total, 1.0), 0.0)
    # each row by its scale, in place: the product diag(scale) @ matrix, without making one
    matrix.data *= np.repeat(scale, np.diff(matrix.indptr))
    return matrix, empty


def neighbour_weights(grid: Grid, x: np.ndarray, y: np.ndarray, line: np.ndarray, *,
                      radius: float | None = None, along: float | None = None,
                      max_gap: float | None = None) -> Weights:
    """Sparse weights from traces at ``(x, y)`` on lines ``line`` to every cell of ``grid``.

    See :func:`trace_frame` for the parameters; :func:`grid_tile` does the same for one tile.

    Parameters
    ----------
    grid : Grid
        The output grid; its ``cell`` is the one :func:`trace_frame` takes.
    x, y, line, radius, along, max_gap
        As :func:`trace_frame` (lengths in m).

    Returns
    -------
    Weights
        The sparse cells x traces matrix, the empty cells and the lengths used (m).
    """
    frame = trace_frame(x, y, line, cell=grid.cell, radius=radius, along=along,
                        max_gap=max_gap)
    matrix, empty = grid_weights(frame, grid.x, grid.y, cell=grid.cell)
    return Weights(matrix=matrix, empty=empty, radius=frame.radius, across=frame.line_spacing,
                   along=frame.along, max_gap=frame.max_gap)


@dataclass(frozen=True)
class TileJob:
    """One output tile to grid: its place, its cells and the traces near it (picklable)."""

    row0: int
    col0: int
    x: np.ndarray
    y: np.ndarray
    frame: TraceFrame
    values: np.ndarray
    cell: float


def grid_tile(job: TileJob) -> tuple[int, int, np.ndarray]:
    """Grid one tile: ``(row0, col0, block)`` with block ``(slices, len(y), len(x))``."""
    n_slices = job.values.shape[1]
    shape = (n_slices, job.y.size, job.x.size)
    if job.frame.x.size == 0:
        return job.row0, job.col0, np.full(shape, np.nan, dtype=np.float32)
    matrix, empty = grid_weights(job.frame, job.x, job.y, cell=job.cell)
    f = job.frame
    weights = Weights(matrix, empty, f.radius, f.line_spacing, f.along, f.max_gap)
    return job.row0, job.col0, weights.apply(job.values).reshape(shape)


def tile_jobs(grid: Grid, frame: TraceFrame, values: np.ndarray, *, tile: int = 256):
    """The tiles of ``grid`` (``tile`` x ``tile`` cells), each with only the traces near it.

    Yields
    ------
    TileJob
        Row-major over the tiles.
    """
    order = np.argsort(frame.x, kind="stable")
    xs = frame.x[order]
    margin = frame.reach + grid.cell
    gx_all, gy_all = grid.x, grid.y
    for row0 in range(0, grid.ny, tile):
        ys = gy_all[row0:row0 + tile]
        for col0 in range(0, grid.nx, tile):
            xc = gx_all[col0:col0 + tile]
            lo, hi = np.searchsorted(xs, [xc[0] - margin, xc[-1] + margin])
            near = order[lo:hi]
            near = near[(frame.y[near] >= ys[-1] - margin) & (frame.y[near] <= ys[0] + margin)]
            near.sort()
            yield TileJob(row0, col0, xc, ys, frame.subset(near), values[near], grid.cell)


def tile_count(grid: Grid, tile: int) -> int:
    """Number of tiles :func:`tile_jobs` yields."""
    return math.ceil(grid.ny / tile) * math.ceil(grid.nx / tile)
