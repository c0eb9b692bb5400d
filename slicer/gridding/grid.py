"""The output grid, and the neighbour weights that put traces onto it.

Trace positions do not change from slice to slice, so the weights are computed once as a sparse
matrix ``W`` (cells x traces, rows summing to 1) and every slice is ``W @ values``.

Sampling is dense along lines and sparse across them. Each trace's weight for a cell is the
product of two tents measured in that trace's own line frame: ``1 - |along| / h`` along its line
(``h`` about one cell) and ``1 - |across| / s`` across it (``s`` the spacing to the neighbouring
line). Between two parallel lines this is linear interpolation across the lines of values
averaged over about a cell along them, so neither line is copied into the gap (no stripes); lines
of another direction (an orthogonal set) weigh in through their own frame. A cell whose nearest
trace is farther than the search radius, or that no tent reaches, stays NaN.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse
import scipy.spatial

from slicer.core.errors import SettingsError, warn


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


def check_cell(cell: float, *, where: str = "--cell") -> float:
    """Return the cell size (m) if it is a positive finite number."""
    try:
        c = float(cell)
    except (TypeError, ValueError):
        raise SettingsError(f"cell size must be a number of metres, got {cell!r}",
                            where=where) from None
    if not math.isfinite(c) or c <= 0:
        raise SettingsError(f"cell size must be positive, got {c:g} m", where=where)
    return c


def grid_for(x: np.ndarray, y: np.ndarray, *, cell: float, max_cells: int = 200_000_000) -> Grid:
    """The smallest grid of whole cells (corner on a multiple of ``cell``) covering the points."""
    cell = check_cell(cell)
    # a small tolerance keeps a point lying exactly on a cell edge from adding a row of cells
    i0 = math.floor(float(np.min(x)) / cell + 1e-9)
    i1 = math.ceil(float(np.max(x)) / cell - 1e-9)
    j0 = math.floor(float(np.min(y)) / cell + 1e-9)
    j1 = math.ceil(float(np.max(y)) / cell - 1e-9)
    nx, ny = max(i1 - i0, 1), max(j1 - j0, 1)
    if nx * ny > max_cells:
        raise SettingsError(
            f"a {cell:g} m cell gives {nx} x {ny} cells over the survey; choose a larger cell",
            where="--cell")
    return Grid(west=round(i0 * cell, 9), north=round(j1 * cell, 9), cell=cell, nx=nx, ny=ny)


def line_spacings(x: np.ndarray, y: np.ndarray, line: np.ndarray) -> np.ndarray:
    """Spacing (m) from each line to its parallel neighbours, one value per line id.

    For each line, the perpendicular offsets of the other lines' midpoints that run within
    15 degrees of it and overlap it along its length are found on both sides; the line's
    spacing is the larger of the nearest offsets on each side (the gap it must bridge).
    Lines with no parallel neighbour get the median of the others.
    """
    ids = np.unique(line)
    mid, direction, half = [], [], []
    for i in ids:
        sel = line == i
        px, py = x[sel], y[sel]
        d = np.array([px[-1] - px[0], py[-1] - py[0]])
        length = float(np.hypot(*d))
        direction.append(d / length if length > 0 else np.array([1.0, 0.0]))
        mid.append(np.array([px.mean(), py.mean()]))
        half.append(length / 2)
    mid, direction, half = np.array(mid), np.array(direction), np.array(half)
    spacing = np.full(len(ids), np.nan)
    for k in range(len(ids)):
        u = direction[k]
        parallel = np.abs(direction @ u) > math.cos(math.radians(15))
        rel = mid - mid[k]
        along = rel @ u
        across = rel @ np.array([-u[1], u[0]])
        ok = parallel & (np.abs(along) < half + half[k]) & (np.abs(across) > 1e-9)
        sides = [np.abs(across[ok & (across > 0)]), np.abs(across[ok & (across < 0)])]
        nearest = [s.min() for s in sides if s.size]
        if nearest:
            spacing[k] = max(nearest)
    if np.isnan(spacing).all():
        return spacing
    spacing[np.isnan(spacing)] = np.nanmedian(spacing)
    return spacing


def trace_spacing(x: np.ndarray, y: np.ndarray, line: np.ndarray) -> float:
    """Median distance (m) between consecutive traces of the same line."""
    same = line[1:] == line[:-1]
    steps = np.hypot(np.diff(x), np.diff(y))[same]
    steps = steps[steps > 0]
    return float(np.median(steps)) if steps.size else math.nan


@dataclass(frozen=True)
class Weights:
    """Neighbour weights of a grid: ``values_on_cells = matrix @ values_on_traces``.

    Attributes
    ----------
    matrix : scipy.sparse.csr_array
        Cells (row-major over ``(y, x)``) x traces, rows summing to 1 (or empty).
    empty : numpy.ndarray
        Boolean per cell: no trace within the radius, or no weight; these cells are NaN.
    radius, across, along : float
        Search radius, across-line tent half-width (the line spacing, median over lines) and
        along-line tent half-width (m).
    """

    matrix: scipy.sparse.csr_array
    empty: np.ndarray
    radius: float
    across: float
    along: float

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
    spacing : numpy.ndarray
        Across-line tent half-width of each trace: its line's spacing to its neighbours (m).
    along : float
        Along-line tent half-width (m).
    radius : float
        Search radius (m): cells with no trace this close stay NaN.
    line_spacing : float
        Median line spacing (m).
    """

    x: np.ndarray
    y: np.ndarray
    ux: np.ndarray
    uy: np.ndarray
    spacing: np.ndarray
    along: float
    radius: float
    line_spacing: float

    @property
    def reach(self) -> float:
        """Farthest a trace can be from a cell it weighs in (m)."""
        return max(self.radius, math.hypot(self.along, float(self.spacing.max())))

    def subset(self, index: np.ndarray) -> TraceFrame:
        """The frame of some traces only (same lengths)."""
        return TraceFrame(self.x[index], self.y[index], self.ux[index], self.uy[index],
                          self.spacing[index], self.along, self.radius, self.line_spacing)


def trace_frame(x: np.ndarray, y: np.ndarray, line: np.ndarray, *, cell: float,
                radius: float | None = None, along: float | None = None) -> TraceFrame:
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
        Cells with no trace closer than this (m) stay NaN. Default 0.75 x the median line
        spacing, but at least one cell diagonal.
    along : float, optional
        Half-width (m) of the along-line tent. Default the larger of the cell and the trace
        spacing.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    line = np.asarray(line)
    if x.size == 0:
        raise SettingsError("no traces to grid")
    dx_step = trace_spacing(x, y, line)
    spacing_per_line = line_spacings(x, y, line)
    ids, index = np.unique(line, return_inverse=True)
    if np.isnan(spacing_per_line).all():
        fallback = 20 * (dx_step if math.isfinite(dx_step) else cell)
        warn(f"no parallel neighbour lines found; assuming a line spacing of {fallback:.3g} m")
        spacing_per_line = np.full(len(ids), fallback)
    s_median = float(np.median(spacing_per_line))
    if along is None:
        along = max(cell, dx_step if math.isfinite(dx_step) else cell)
    if radius is None:
        radius = max(0.75 * s_median, cell * math.sqrt(2))
    elif not math.isfinite(radius) or radius <= 0:
        raise SettingsError(f"search radius must be positive, got {radius:g} m",
                            where="--radius")
    ux, uy = _line_directions(x, y, line)
    return TraceFrame(x, y, ux, uy, spacing_per_line[index], float(along), float(radius),
                      s_median)


def grid_weights(frame: TraceFrame, xc: np.ndarray, yc: np.ndarray
                 ) -> tuple[scipy.sparse.csr_array, np.ndarray]:
    """Row-normalised weights (cells x traces of ``frame``) and the empty-cell mask.

    Each trace is spread onto the cells its tents reach (a small box of cells around it,
    visited one offset at a time for all traces at once), which is much faster than asking a
    tree for every cell's neighbours.

    Parameters
    ----------
    frame : TraceFrame
        The traces that may weigh in (all of them, or those near a tile).
    xc, yc : numpy.ndarray
        Cell-centre eastings (ascending) and northings (descending) of a regular block of
        cells, spaced by one cell (m). Rows of the result run over ``(y, x)`` row-major.
    """
    ny, nx = yc.size, xc.size
    cell = float(xc[1] - xc[0]) if nx > 1 else float(yc[0] - yc[1]) if ny > 1 else 1.0
    x, y, ux, uy, s = frame.x, frame.y, frame.ux, frame.uy, frame.spacing
    reach = math.hypot(frame.along, float(s.max())) if x.size else 0.0
    k = int(math.ceil(reach / cell))
    col0 = np.rint((x - xc[0]) / cell).astype(np.int64)
    row0 = np.rint((yc[0] - y) / cell).astype(np.int64)
    rows, cols, vals = [], [], []
    trace_index = np.arange(x.size)
    for dj in range(-k, k + 1):
        row = row0 + dj
        ok_row = (row >= 0) & (row < ny)
        for di in range(-k, k + 1):
            col = col0 + di
            ok = ok_row & (col >= 0) & (col < nx)
            if not ok.any():
                continue
            t = trace_index[ok]
            dxp = xc[col[ok]] - x[t]
            dyp = yc[row[ok]] - y[t]
            a = np.abs(dxp * ux[t] + dyp * uy[t])
            b = np.abs(dyp * ux[t] - dxp * uy[t])
            w = np.clip(1 - a / frame.along, 0, None) * np.clip(1 - b / s[t], 0, None)
            keep = w > 0
            rows.append(row[ok][keep] * nx + col[ok][keep])
            cols.append(t[keep])
            vals.append(w[keep])
    if rows:
        rows, cols, vals = np.concatenate(rows), np.concatenate(cols), np.concatenate(vals)
    else:
        rows = cols = np.zeros(0, dtype=np.int64)
        vals = np.zeros(0)
    matrix = scipy.sparse.csr_array((vals, (rows, cols)), shape=(ny * nx, x.size))
    total = np.asarray(matrix.sum(axis=1)).ravel()
    if x.size:
        gx, gy = np.meshgrid(xc, yc)
        tree = scipy.spatial.cKDTree(np.column_stack([x, y]))
        nearest, _ = tree.query(np.column_stack([gx.ravel(), gy.ravel()]), k=1,
                                distance_upper_bound=frame.radius)
        empty = ~np.isfinite(nearest) | (total <= 0)
    else:
        empty = np.ones(ny * nx, dtype=bool)
    scale = np.where(total > 0, 1.0 / np.where(total > 0, total, 1.0), 0.0)
    return (scipy.sparse.diags_array(scale) @ matrix).tocsr(), empty


def neighbour_weights(grid: Grid, x: np.ndarray, y: np.ndarray, line: np.ndarray, *,
                      radius: float | None = None, along: float | None = None) -> Weights:
    """Sparse weights from traces at ``(x, y)`` on lines ``line`` to every cell of ``grid``.

    See :func:`trace_frame` for the parameters; :func:`grid_tile` does the same for one tile.
    """
    frame = trace_frame(x, y, line, cell=grid.cell, radius=radius, along=along)
    matrix, empty = grid_weights(frame, grid.x, grid.y)
    return Weights(matrix=matrix, empty=empty, radius=frame.radius, across=frame.line_spacing,
                   along=frame.along)


@dataclass(frozen=True)
class TileJob:
    """One output tile to grid: its place, its cells and the traces near it (picklable)."""

    row0: int
    col0: int
    x: np.ndarray
    y: np.ndarray
    frame: TraceFrame
    values: np.ndarray


def grid_tile(job: TileJob) -> tuple[int, int, np.ndarray]:
    """Grid one tile: ``(row0, col0, block)`` with block ``(slices, len(y), len(x))``."""
    n_slices = job.values.shape[1]
    shape = (n_slices, job.y.size, job.x.size)
    if job.frame.x.size == 0:
        return job.row0, job.col0, np.full(shape, np.nan, dtype=np.float32)
    matrix, empty = grid_weights(job.frame, job.x, job.y)
    weights = Weights(matrix, empty, job.frame.radius, job.frame.line_spacing, job.frame.along)
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
            yield TileJob(row0, col0, xc, ys, frame.subset(near), values[near])


def tile_count(grid: Grid, tile: int) -> int:
    """Number of tiles :func:`tile_jobs` yields."""
    return math.ceil(grid.ny / tile) * math.ceil(grid.nx / tile)


def _line_directions(x: np.ndarray, y: np.ndarray, line: np.ndarray):
    """Unit vector (ux, uy) of each trace's line, from the line's first to its last trace."""
    ux = np.ones_like(x)
    uy = np.zeros_like(y)
    for i in np.unique(line):
        sel = np.flatnonzero(line == i)
        d = np.array([x[sel[-1]] - x[sel[0]], y[sel[-1]] - y[sel[0]]])
        n = float(np.hypot(*d))
        if n > 0:
            ux[sel], uy[sel] = d[0] / n, d[1] / n
    return ux, uy
