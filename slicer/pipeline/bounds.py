"""Bounds on every size a build makes, checked from the headers before any line is read.

The sizes of a build follow from a few numbers: trace positions, the cell, the slice windows,
the trace spacing of a resampling. One flipped bit in a trace-header coordinate, a slip of
the finger in an option or longitude/latitude given as metres makes them absurd, and the build
would then run for minutes and fill memory or disk before failing. :func:`check_bounds` works
out every size from the line headers, the line table and the options alone (trace positions
are computed exactly as the line tasks will compute them, without reading a sample) and
refuses an absurd one with one line naming its real cause:

- a trace position far from its neighbours on the line (a damaged header coordinate or GNSS
  fix), naming the file and trace (or track row), and positions that look like
  longitude/latitude degrees in a survey measured in metres
  (:mod:`slicer.pipeline.position_checks`);
- a ``--trace-spacing`` that makes a line of more than :data:`MAX_UPSAMPLE` times the traces
  recorded, or one whose processing alone would exceed the memory limit;
- a ``--cell`` finer than the traces can inform (:data:`MAX_CELLS_PER_TRACE`);
- a grid of more cells than the memory limit holds (:data:`BYTES_PER_GRID_CELL`), blamed on
  the coordinates when lines lie far apart and on the cell otherwise;
- outputs larger than the free space of the output folder's disk (:data:`OUTPUT_COPIES`);
- a ``--radius`` so small that every cell of the grid would stay empty.

The number of slice windows is bounded where the windows are made
(:data:`slicer.gridding.windows.MAX_WINDOWS`).
"""

from __future__ import annotations

import math
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from slicer.core.errors import SettingsError
from slicer.geometry.survey import SurveyInfo
from slicer.gridding.grid import (
    MAX_GRID_CELLS,
    Grid,
    count_text,
    grid_for,
    line_spacings,
    trace_spacing,
)
from slicer.gridding.windows import record_reach
from slicer.pipeline.budget import LINE_BYTES_PER_SAMPLE, human
from slicer.pipeline.line_tasks import default_windows
from slicer.pipeline.position_checks import (
    check_far_positions,
    check_in_crs_area,
    check_not_degrees,
    trace_positions,
    warn_odd_spacing,
)

#: A resampled line may hold at most this many times the traces recorded on it. Resampling
#: evens out the spacing a wheel or GNSS left uneven, usually to about the recorded spacing;
#: each trace beyond the recorded ones is interpolated from its neighbours and carries nothing
#: new, so a hundredfold is far past any real use.
MAX_UPSAMPLE = 100

#: Most grid cells per trace's share of the survey (the along-line trace spacing times the
#: line spacing). Gridding interpolates between lines and averages along them, so cells much
#: finer than that share hold no information of their own: at 2500 a cell is 1/50 of the
#: share's side. Real grids stay far below (a 5 cm cell over lines 0.5 m apart with traces
#: every 5 cm is 10; a 1 cm cell over lines 2 m apart with traces every 10 cm is 2000).
MAX_CELLS_PER_TRACE = 2500

#: Working memory per grid cell of a streamed build (bytes): one slice of the grid is held
#: whole (float32) when the cube is read back for the record, with its empty-cell mask and
#: the temporaries around it. The grid may hold at most ``memory limit / 8`` cells: 134
#: million at the default 1 GiB, 1.3 km2 at a 10 cm cell, more than a survey covers.
BYTES_PER_GRID_CELL = 8

#: Copies of the cube a build writes: one GeoTIFF per slice, the Zarr cube and the NetCDF
#: cube are three; they are compressed, but envelope values compress little, so a fourth
#: keeps the estimate (4 bytes per cell and slice, uncompressed) an upper bound.
OUTPUT_COPIES = 4

@dataclass(frozen=True)
class SurveyPlan:
    """The sizes of a build, worked out before any line is read.

    Attributes
    ----------
    grid : Grid
        The output grid laid over every trace position.
    n_slices : int
        Slice windows (at most; windows below the record are dropped later).
    n_traces : int
        Traces of the survey as processed (after any resampling).
    max_line_traces : int
        Traces of the longest line as processed.
    output_bytes : int
        Upper bound of the bytes the build writes (0 when it writes nothing).
    """

    grid: Grid
    n_slices: int
    n_traces: int
    max_line_traces: int
    output_bytes: int


def check_bounds(settings, info: SurveyInfo, *, cell: float, memory_limit: int,
                 writes: bool, positions=None) -> SurveyPlan:
    """Work out the build's sizes from headers and options; refuse any a survey never has.

    Parameters
    ----------
    settings : BuildSettings
        The build, after :func:`slicer.geometry.positioning.prepare_survey`.
    info : SurveyInfo
        The headers of its lines.
    cell : float
        The grid cell (m): ``settings.cell`` or the default chosen from the line ends.
    memory_limit : int
        The build's memory limit (bytes).
    writes : bool
        Whether outputs are written to ``settings.out`` (their size is then checked against
        the free space of its disk).
    positions : list of (x, y) arrays, optional
        Every line's trace positions, when the caller has them already (else worked out).

    Raises
    ------
    InputFileError
        A trace position (or GNSS fix) far from its line.
    SettingsError
        Degrees given as metres, or a size beyond the limits of this module (naming the
        option at fault).
    """
    check_far_positions(settings)
    if positions is None:
        positions = [trace_positions(e, settings, i.n_traces)
                     for e, i in zip(settings.lines, info.lines, strict=True)]
    x = np.concatenate([p[0] for p in positions])
    y = np.concatenate([p[1] for p in positions])
    line = np.concatenate([np.full(p[0].size, k) for k, p in enumerate(positions)])
    check_not_degrees(x, y, settings)
    check_in_crs_area(x, y, settings)
    warn_odd_spacing(settings, positions)
    line_traces = check_resampling(settings, info, positions, memory_limit=memory_limit)
    grid = check_grid(settings, x, y, line, cell=cell, memory_limit=memory_limit,
                      positions=positions)
    n_slices = slice_count(settings, info)
    output = grid.size * n_slices * 4 * OUTPUT_COPIES if writes else 0
    if writes and settings.out is not None:
        check_disk(Path(settings.out), output, grid=grid, n_slices=n_slices)
    if settings.radius is not None:
        check_not_empty(grid, x, y, radius=float(settings.radius))
    return SurveyPlan(grid=grid, n_slices=n_slices, n_traces=sum(line_traces),
                      max_line_traces=max(line_traces),
                      output_bytes=int(output))


# --- traces per line after resampling ----------------------------------------------------------


def resampled_traces(x: np.ndarray, y: np.ndarray, spacing: float) -> int:
    """Traces :func:`slicer.geometry.positions.resample_even` makes of a line at ``x``, ``y``.

    Its path length over ``spacing``, plus one (counted in floating point first).
    """
    path = float(np.sum(np.hypot(np.diff(x), np.diff(y))))
    count = path / spacing + 1e-9
    return int(math.floor(count)) + 1 if count < 1e15 else 10 ** 15


def check_resampling(settings, info: SurveyInfo, positions, *, memory_limit: int) -> list[int]:
    """Traces of every line as processed; refuse a ``--trace-spacing`` that multiplies them.

    A line may grow to :data:`MAX_UPSAMPLE` times its recorded traces, and one line's
    processing (``traces x samples x`` :data:`slicer.pipeline.budget.LINE_BYTES_PER_SAMPLE`)
    must fit the memory limit.
    """
    recorded = [i.n_traces for i in info.lines]
    if settings.trace_spacing is None:
        return recorded
    spacing = float(settings.trace_spacing)
    counts = []
    for entry, n, (x, y) in zip(settings.lines, recorded, positions, strict=True):
        count = resampled_traces(x, y, spacing)
        path = (count - 1) * spacing
        least = path / (MAX_UPSAMPLE * n - 1)
        if count > MAX_UPSAMPLE * n:
            raise SettingsError(
                f"{spacing:g} m resamples {entry.file.name} ({path:.4g} m, {n} traces) to "
                f"{count_text(count)} traces, more than {MAX_UPSAMPLE} times the traces "
                f"recorded; choose a spacing of at least {least:.3g} m",
                where="--trace-spacing")
        need = count * info.n_samples * LINE_BYTES_PER_SAMPLE
        if need > memory_limit:
            raise SettingsError(
                f"{spacing:g} m resamples {entry.file.name} ({path:.4g} m) to "
                f"{count_text(count)} traces, whose processing alone needs {human(need)}, more "
                f"than the memory limit of {human(memory_limit)}; choose a larger spacing or "
                "raise --memory-limit", where="--trace-spacing")
        counts.append(count)
    return counts


# --- the grid ----------------------------------------------------------------------------------


def share_per_trace(x: np.ndarray, y: np.ndarray, line: np.ndarray) -> tuple[float, float]:
    """The along-line trace step and the line spacing (m) whose product is a trace's share.

    A survey without parallel lines is taken as lines 20 steps apart (as the gridding does).
    """
    step = trace_spacing(x, y, line)
    spacing = float(np.nanmedian(line_spacings(x, y, line))) if np.unique(line).size > 1 \
        else math.nan
    if not math.isfinite(step):
        step = math.nan
    if not math.isfinite(spacing) and math.isfinite(step):
        spacing = 20 * step
    return step, spacing


def check_grid(settings, x: np.ndarray, y: np.ndarray, line: np.ndarray, *, cell: float,
               memory_limit: int, positions) -> Grid:
    """The output grid over every trace, refused when finer than the traces can inform or
    larger than the memory limit holds."""
    step, spacing = share_per_trace(x, y, line)
    share = step * spacing
    given = settings.cell is not None
    if given and math.isfinite(share) and share / cell ** 2 > MAX_CELLS_PER_TRACE:
        least = math.sqrt(share / MAX_CELLS_PER_TRACE)
        raise SettingsError(
            f"a {cell:g} m cell puts {share / cell ** 2:.3g} cells on each trace's share of the "
            f"survey (traces {step:.3g} m apart on lines {spacing:.3g} m apart), more than the "
            f"{MAX_CELLS_PER_TRACE} that can hold any information; choose a cell of at least "
            f"{least:.2g} m", where="--cell")
    by_memory = memory_limit // BYTES_PER_GRID_CELL
    max_cells = max(min(by_memory, MAX_GRID_CELLS), 1)
    width, height = float(np.ptp(x)), float(np.ptp(y))
    with np.errstate(over="ignore"):
        cells = (width / cell + 2) * (height / cell + 2)  # never fewer than grid_for's
    if cells > max_cells:
        far = _far_line(settings, positions, width=width, height=height,
                        cover=share * x.size)
        if far is not None:
            raise SettingsError(far[0], where=far[1])
        what = f"a {cell:g} m cell" if given else f"the default {cell:g} m cell"
        limit = (f"the {count_text(max_cells)} the memory limit of {human(memory_limit)} "
                 f"allows ({BYTES_PER_GRID_CELL} bytes a cell); choose a larger --cell or "
                 "raise --memory-limit" if by_memory < MAX_GRID_CELLS else
                 f"the {count_text(max_cells)} one grid holds; choose a larger --cell")
        raise SettingsError(
            f"{what} gives {count_text(width / cell)} x {count_text(height / cell)} cells over "
            f"the survey's {width:.4g} x {height:.4g} m, more than {limit}",
            where="--cell" if given or by_memory >= MAX_GRID_CELLS else "--memory-limit")
    return grid_for(x, y, cell=cell, max_cells=max_cells)


def _far_line(settings, positions, *, width: float, height: float,
              cover: float) -> tuple[str, str] | None:
    """``(message, where)`` blaming the coordinates when the lines lie far apart, else None.

    Lines lie far apart when the traces' extent is over 100 times the area they cover (the
    number of traces times each one's share). The line farthest from the median of the
    lines' middles is named when it lies over ten times farther than the median line does.
    """
    if not (math.isfinite(cover) and cover > 0) or width * height <= 100 * cover:
        return None
    entries = settings.lines
    mid = np.array([[np.median(p[0]), np.median(p[1])] for p in positions])
    distance = np.hypot(*(mid - np.median(mid, axis=0)).T)
    k = int(np.argmax(distance))
    typical = float(np.median(distance))
    if len(entries) < 3 or distance[k] <= 10 * max(typical, 1e-9):
        return (f"the traces spread over {width:.4g} x {height:.4g} m but cover only about "
                f"{cover:.3g} m2; check the line coordinates", str(settings.source))
    e = entries[k]
    return (f"line {e.file.name} lies {distance[k]:.4g} m from the middle of the survey, where "
            f"half the lines lie within {typical:.3g} m, spreading the grid over "
            f"{width:.4g} x {height:.4g} m; check its coordinates", e.where)


def slice_count(settings, info: SurveyInfo) -> int:
    """Slices the build cuts, at most: the requested windows that a record as long as the
    file's reaches (time zero only shortens it), or the default windows of that record."""
    velocity = settings.resolved_velocity or settings.resolved_model
    windows = settings.requested_windows
    if windows is None:
        return len(default_windows(info.record_ns, velocity))
    if (windows.axis == "depth" and velocity is None) or windows.axis == "elevation":
        return len(windows)  # elevation: at most, before the ground's range is known
    return max(int(record_reach(info.record_ns, windows, velocity=velocity).sum()), 1)


def check_disk(out: Path, size: int, *, grid: Grid, n_slices: int) -> None:
    """Refuse outputs (``size`` bytes at most) larger than the free space of ``out``'s disk."""
    folder = out.resolve()
    while not folder.exists() and folder != folder.parent:
        folder = folder.parent
    free = shutil.disk_usage(folder).free
    if size > free:
        raise SettingsError(
            f"the outputs may take up to {human(size)} ({grid.nx} x {grid.ny} cells x "
            f"{n_slices} slices x 4 bytes x {OUTPUT_COPIES} copies), more than the "
            f"{human(free)} free on its disk; choose a larger --cell or fewer slices, or "
            "another folder", where="--out")


# --- a grid with nothing on it -----------------------------------------------------------------


def check_not_empty(grid: Grid, x: np.ndarray, y: np.ndarray, *, radius: float) -> None:
    """Refuse a search radius that leaves every cell of ``grid`` empty.

    A cell is empty when no trace lies within ``radius`` of its centre
    (:func:`slicer.gridding.grid.grid_weights`); the centre nearest a trace is that of the
    cell holding it, so every cell is empty when every trace is farther than ``radius`` from
    the centre of its own cell.
    """
    col = np.clip(np.floor((x - grid.west) / grid.cell), 0, grid.nx - 1)
    row = np.clip(np.floor((grid.north - y) / grid.cell), 0, grid.ny - 1)
    near = np.hypot(x - (grid.west + grid.cell * (col + 0.5)),
                    y - (grid.north - grid.cell * (row + 0.5)))
    closest = float(near.min())
    if closest > radius:
        raise SettingsError(
            f"no trace lies within {radius:g} m of a cell centre (the nearest is "
            f"{closest:.3g} m from one), so every cell of the {grid.cell:g} m grid would be "
            f"empty; give a radius of at least {grid.cell / math.sqrt(2):.3g} m (half a cell "
            "diagonal) or leave it out", where="--radius")


__all__ = ["SurveyPlan", "check_bounds"]
