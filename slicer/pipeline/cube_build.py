"""The survey reduced to slice values and gridded: the cube in memory, or its plan.

read -> place -> time zero -> dewow -> background -> gain -> envelope -> reduce to windows
(one line in memory at a time) -> neighbour weights (once) -> grid every slice.
:func:`build_cube` runs it all in memory; :func:`slicer.pipeline.build.build` uses
:func:`reduce_and_plan` and :class:`GridLayout` and writes the tiles as they are gridded.
"""

from __future__ import annotations

import datetime as _dt
import math
import time
from dataclasses import dataclass

import numpy as np
import xarray as xr

from slicer.core.conventions import TRACE
from slicer.core.errors import SettingsError
from slicer.core.numbers import real
from slicer.geometry.positioning import prepare_survey
from slicer.geometry.survey import SurveyInfo, survey_info
from slicer.gridding.grid import (
    Grid,
    TraceFrame,
    grid_for,
    grid_tile,
    line_spacings,
    tile_count,
    tile_jobs,
    trace_frame,
    trace_spacing,
)
from slicer.pipeline.bounds import check_bounds
from slicer.pipeline.budget import DEFAULT_LIMIT, Estimate, estimate, human, parse_bytes
from slicer.pipeline.build_engine import open_engine
from slicer.pipeline.build_result import BuildResult
from slicer.pipeline.engine import Engine, parse_scheduler
from slicer.pipeline.line_chain import processing_summary
from slicer.pipeline.line_tasks import nice_number, reduce_survey
from slicer.pipeline.record import environment, tidy_record
from slicer.pipeline.settings import BuildSettings
from slicer.velocity.models import depth_error

#: Tile edge of the output grid, cells: each tile is gridded from the traces near it only.
TILE = 256


def grid_slices(table: xr.DataArray, *, cell: float | None = None, radius: float | None = None,
                max_gap: float | None = None, crs=None, velocity: float | None = None,
                processing: str = "", engine: Engine | None = None, tile: int = 256,
                progress: bool = True) -> tuple[xr.DataArray, dict]:
    """Grid a trace x slice table onto a regular grid: the cube, and how it was gridded.

    Parameters
    ----------
    table : xarray.DataArray
        Dims ``(trace, slice)`` with per-trace ``x``, ``y`` (m) and ``line`` (int), and
        per-slice ``top``, ``bottom`` (``attrs["axis"]`` depth or twt).
    cell : float, optional
        Cell edge (m). Default a round number near a quarter of the median line spacing.
    radius : float, optional
        Search radius (m); see :func:`slicer.neighbour_weights`.
    max_gap : float, optional
        Widest gap (m) between parallel lines that is bridged; see
        :func:`slicer.gridding.grid.trace_frame`.
    crs : optional
        Survey CRS, stored in the cube.
    velocity : float, optional
        Radar velocity (m/ns), stored in the cube's attrs.
    processing : str
        Summary of the processing, stored in the cube's attrs.
    engine : Engine, optional
        Where the tile tasks run; default a pool of threads on this machine.
    tile : int
        Tile edge in cells: each tile is gridded from the traces near it only.
    progress : bool
        Show a progress bar of the tiles (on a terminal).

    Returns
    -------
    cube : xarray.DataArray
        Dims ``(axis, y, x)`` as :func:`slicer.new_cube` makes them, float32, NaN where no
        trace lies within reach.
    details : dict
        How it was gridded: ``west``, ``north``, ``cell`` (m), ``nx``, ``ny``, ``tile``,
        ``search_radius_m``, ``line_spacing_m``, ``along_line_half_width_m``, ``max_gap_m``,
        and ``empty_cells``, the number of NaN cells of the first slice.
    """
    from slicer.outputs.cube import new_cube
    layout = GridLayout.of(table, cell=cell, radius=radius, max_gap=max_gap, tile=tile)
    values = layout.assemble(table.values, engine=engine, progress=progress)
    cube = new_cube(values, **layout.cube_kwargs(table, crs=crs, velocity=velocity,
                                                 processing=processing))
    return cube, layout.details(empty=int(np.isnan(values[0]).sum()))


def _trace_columns(table) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``x``, ``y`` and ``line`` of every trace of a trace x slice table; one SettingsError
    for anything else (a lone line's table has no ``line``: give it one)."""
    import xarray as xr
    if not isinstance(table, xr.DataArray) or table.ndim != 2 or table.dims[0] != TRACE:
        raise SettingsError(f"expected a trace x slice table (a DataArray with dims (trace, "
                            f"slice)), got {type(table).__name__}", where="table")
    missing = [c for c in ("x", "y", "line") if c not in table.coords]
    if missing:
        raise SettingsError(f"the table has no per-trace {', '.join(missing)} (a lone line's "
                            f"table needs line=('trace', numbers) too)", where="table")
    return table["x"].values, table["y"].values, table["line"].values


@dataclass(frozen=True)
class GridLayout:
    """The output grid of a trace table, its trace frames and its tiles."""

    grid: Grid
    frame: TraceFrame
    tile: int

    @classmethod
    def of(cls, table: xr.DataArray, *, cell: float | None, radius: float | None,
           max_gap: float | None = None, tile: int = TILE) -> GridLayout:
        if not (isinstance(tile, int | np.integer) and not isinstance(tile, bool) and tile >= 1):
            raise SettingsError(f"the tile edge must be a whole number of cells, at least 1; got "
                                f"{tile!r}", where="tile")
        x, y, line = _trace_columns(table)
        cell, radius, max_gap = (None if v is None else real(v, where=w) for v, w in (
            (cell, "--cell"), (radius, "--radius"), (max_gap, "--max-gap")))
        cell = default_cell(x, y, line) if cell is None else cell
        grid = grid_for(x, y, cell=cell)
        frame = trace_frame(x, y, line, cell=grid.cell, radius=radius, max_gap=max_gap)
        return cls(grid, frame, tile)

    def shape(self, n_slices: int) -> tuple[int, int, int]:
        return (n_slices, self.grid.ny, self.grid.nx)

    def blocks(self, values: np.ndarray, *, engine: Engine | None = None,
               progress: bool = True):
        """Grid ``values`` (traces x slices) tile by tile: yields ``(row0, col0, block)``."""
        if engine is None:
            with Engine(parse_scheduler("threads")) as own:
                yield from self.blocks(values, engine=own, progress=progress)
            return
        yield from engine.map(grid_tile, self.jobs(values), desc="gridding", unit="tile",
                              progress=progress, weights=[1] * self.count)

    def jobs(self, values: np.ndarray):
        """The tile tasks of ``values`` (traces x slices), row-major."""
        return tile_jobs(self.grid, self.frame, values, tile=self.tile)

    @property
    def count(self) -> int:
        """Number of tiles."""
        return tile_count(self.grid, self.tile)

    def assemble(self, values: np.ndarray, *, engine: Engine | None = None,
                 progress: bool = True) -> np.ndarray:
        """The whole cube in memory: ``(slices, ny, nx)``, NaN where no tile reaches."""
        out = np.full(self.shape(values.shape[1]), np.nan, dtype=np.float32)
        for row0, col0, block in self.blocks(values, engine=engine, progress=progress):
            out[:, row0:row0 + block.shape[1], col0:col0 + block.shape[2]] = block
        return out

    def cube_kwargs(self, table: xr.DataArray, *, crs, velocity, processing) -> dict:
        return {"west": self.grid.west, "north": self.grid.north, "cell": self.grid.cell,
                "crs": crs, "top": table["top"].values, "bottom": table["bottom"].values,
                "axis": table["top"].attrs.get("axis", "depth"), "velocity": velocity,
                "processing": processing}

    def details(self, *, empty: int | None = None) -> dict:
        g, f = self.grid, self.frame
        out = {"west": g.west, "north": g.north, "cell": g.cell, "nx": g.nx, "ny": g.ny,
               "tile": self.tile, "search_radius_m": f.radius, "line_spacing_m": f.line_spacing,
               "along_line_half_width_m": f.along, "max_gap_m": f.max_gap}
        if empty is not None:
            out["empty_cells"] = empty
        return out


def default_cell(x: np.ndarray, y: np.ndarray, line: np.ndarray) -> float:
    """A round cell size near a quarter of the median line spacing (m)."""
    spacing = np.nanmedian(line_spacings(x, y, line))
    base = spacing / 4 if math.isfinite(spacing) else 4 * trace_spacing(x, y, line)
    return nice_number(base)


@dataclass
class Reduction:
    """A survey reduced to slice values, with its grid and the record so far."""

    reduced: object
    layout: GridLayout
    kwargs: dict
    record: dict
    started: float


def reduce_and_plan(settings: BuildSettings, engine: Engine, *, progress: bool,
                    cube_in_memory: bool, on_image=None) -> Reduction:
    """Place, check the memory budget, reduce every line (on ``engine``), correct zigzag
    and level as asked, and plan the grid: everything before the tiles are gridded. The
    record's ``environment`` is left None for the caller
    (:func:`slicer.pipeline.record.environment`).

    ``on_image`` takes each line's radargram as its task returns it.
    """
    started = time.perf_counter()
    settings = prepare_survey(settings)
    info = survey_info(settings.lines, sample_interval_ns=settings.sample_interval)
    budget = check_budget(settings, info, workers=engine.workers, cube_in_memory=cube_in_memory)
    reduced = reduce_survey(settings, engine=engine, info=info, progress=progress,
                            on_image=on_image)
    zigzag = correct_zigzag(reduced, settings)
    if settings.level:  # per line and slice, against its neighbouring lines
        from slicer.gridding.levelling import level_lines
        reduced.table = level_lines(reduced.table)
    read_s = time.perf_counter() - started
    velocity = (settings.resolved_velocity if reduced.windows.axis in ("depth", "elevation")
                else None)
    summary = processing_summary(settings, reduced.dewow_ns)
    layout = GridLayout.of(reduced.table, cell=settings.cell, radius=settings.radius,
                           max_gap=settings.max_gap)
    kwargs = layout.cube_kwargs(reduced.table, crs=settings.crs, velocity=velocity,
                                processing=summary)
    if reduced.windows.axis == "elevation":
        kwargs["vertical_datum"] = settings.datum
    if settings.attribute == "signed":  # a name that says the values carry a sign
        kwargs["name"] = "signed_envelope"
    record = {
        "slicer": _version(),
        "created_utc": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "settings": settings.to_record(),
        "processing": summary,
        "engine": engine.spec.label,
        "memory_estimate_bytes": budget.total,
        "survey": {"lines": len(settings.lines), "traces": info.n_traces,
                   "samples_per_trace": info.n_samples,
                   "sample_interval_ns": info.sample_interval_ns},
        "slices": {"axis": reduced.windows.axis, "units": reduced.windows.units,
                   "top": reduced.windows.top.tolist(),
                   "bottom": reduced.windows.bottom.tolist()},
        "grid": layout.details(),
        "lines": reduced.lines,
        "ties": reduced.ties,
        "zigzag": zigzag,
        "seconds": {"read_and_process": round(read_s, 3)},
        # filled in by the caller (record.environment): a build on workers reads it while they
        # grid, so that the calling process does not load rasterio before handing them tiles
        "environment": None,
    }
    return Reduction(reduced, layout, kwargs, record, started)


def correct_zigzag(reduced, settings: BuildSettings) -> dict | None:
    """Estimate (``zigzag_shift = "auto"``) and remove the along-line lag of lines walked both
    ways, on the reduced table in place; what was done, for the record (None when off)."""
    if settings.zigzag_shift == "off":
        return None
    from slicer.gridding.zigzag import estimate_zigzag_shift, shift_along_lines
    if settings.zigzag_shift == "auto":
        found = estimate_zigzag_shift(reduced.table).to_record()
        record = {"estimated": True, **found}
    else:
        record = {"estimated": False, "shift_m": float(settings.zigzag_shift)}
    reduced.table = shift_along_lines(reduced.table, shift=record["shift_m"])
    return record


def build_cube(settings: BuildSettings, *, progress: bool = True,
               engine: Engine | None = None) -> BuildResult:
    """Run the whole pipeline in memory, writing nothing: the cube and its record.

    ``engine`` (default: the one ``settings.scheduler`` names) runs the line and tile tasks.

    Parameters
    ----------
    settings : BuildSettings
        What to build (:func:`slicer.load_settings`).
    progress : bool
        Show progress bars of the line and tile tasks (on a terminal).
    engine : Engine, optional
        Where the tasks run; default an engine opened (and closed) for this call.

    Returns
    -------
    BuildResult
        ``cube``, dims ``(axis, y, x)`` (depth slices with a per-slice ``depth_error``
        coordinate, m, one sigma, from the velocity's uncertainty), and ``record``, the
        build's record as a dict; ``files`` is empty.
    """
    if engine is None:
        with open_engine(settings) as own:
            return build_cube(settings, progress=progress, engine=own)
    from slicer.outputs.cube import new_cube
    r = reduce_and_plan(settings, engine, progress=progress, cube_in_memory=True)
    r.record["environment"] = environment()
    gridding = time.perf_counter()
    values = r.layout.assemble(r.reduced.table.values, engine=engine, progress=progress)
    cube = with_depth_error(new_cube(values, **r.kwargs), settings, r.reduced.table)
    r.record["grid"]["empty_cells"] = int(np.isnan(values[0]).sum())
    r.record["seconds"]["grid"] = round(time.perf_counter() - gridding, 3)
    return BuildResult(cube=cube, record=tidy_record(r.record))


def with_depth_error(cube: xr.DataArray, settings: BuildSettings,
                     table: xr.DataArray) -> xr.DataArray:
    """Add ``depth_error`` (m, one sigma, per slice centre) from the velocity's uncertainty.

    For a lateral model the error at the survey's median trace position is given.
    """
    model = settings.resolved_model
    if model is None or cube.dims[0] != "depth":
        return cube
    x = y = None
    if getattr(model, "lateral", False):
        x, y = float(np.median(table["x"].values)), float(np.median(table["y"].values))
    error = np.asarray(depth_error(model, cube["depth"].values, x=x, y=y), dtype=float)
    out = cube.assign_coords(depth_error=("depth", error, {
        "units": "m", "long_name": "one-sigma depth error from the velocity uncertainty"}))
    out.attrs["velocity_model"] = model.describe()
    return out


def check_budget(settings: BuildSettings, info: SurveyInfo, *, workers: int,
                 cube_in_memory: bool) -> Estimate:
    """Estimate the build's working memory from the headers and line table; refuse if over.

    Raises
    ------
    SettingsError
        The estimate exceeds ``settings.memory_limit`` (default 1 GiB), naming the parts.
    SlicerError
        Any size :func:`slicer.pipeline.bounds.check_bounds` refuses (checked first).
    """
    limit = (parse_bytes(settings.memory_limit) if settings.memory_limit is not None
             else DEFAULT_LIMIT)
    ends = np.array([[*e.start, *e.end] for e in settings.lines])
    placed = None
    if settings.cell is None and not np.isfinite(ends).all():
        # lines placed by tracks or headers: their ends from the positions (whose errors, a
        # track CRS in degrees for metres, say, are then the ones met first)
        from slicer.pipeline.position_checks import trace_positions
        placed = [trace_positions(e, settings, i.n_traces)
                  for e, i in zip(settings.lines, info.lines, strict=True)]
        ends = np.array([[px[0], py[0], px[-1], py[-1]] for px, py in placed])
    x, y = ends[:, [0, 2]].ravel(), ends[:, [1, 3]].ravel()
    line = np.repeat(np.arange(len(settings.lines)), 2)
    cell = settings.cell or default_cell(x, y, line)
    # every other size of the build, from the same headers (refused before any line is read)
    plan = check_bounds(settings, info, cell=cell, memory_limit=limit,
                        writes=not cube_in_memory, positions=placed)
    grid, n_slices = plan.grid, plan.n_slices
    step = float(np.median([e.length / max(i.n_traces - 1, 1)
                            for e, i in zip(settings.lines, info.lines, strict=True)]))
    along = max(cell, step)
    est = estimate(n_traces=plan.n_traces, max_line_traces=plan.max_line_traces,
                   n_samples=info.n_samples, n_slices=n_slices, grid_cells=grid.size,
                   tile=TILE, neighbours=4 * along / step, workers=workers,
                   cube_in_memory=cube_in_memory, formats=tuple(settings.formats.split(",")))
    if est.total > limit:
        given = f" ({settings.memory_limit})" if settings.memory_limit is not None else ""
        raise SettingsError(f"this build needs {est.describe()}, more than the memory limit of "
                            f"{human(limit)}{given}; raise --memory-limit, use fewer workers or a "
                            "larger --cell", where="--memory-limit")
    return est


def _version() -> str:
    from slicer import __version__
    return __version__


__all__ = ["TILE", "GridLayout", "Reduction", "build_cube", "check_budget", "correct_zigzag",
           "default_cell", "grid_slices", "reduce_and_plan", "with_depth_error"]
