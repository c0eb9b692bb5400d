"""The pipeline: survey lines in, georeferenced slices, cube, overview and record out.

read -> place -> time zero -> dewow -> background -> gain -> envelope -> reduce to windows
(one line in memory at a time) -> neighbour weights (once) -> grid every slice -> write.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import platform
import sys
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from ._atomic import atomic_write_text, prepare_output_dir
from ._conventions import TRACE, TWT
from ._cube import new_cube, write_cube_netcdf
from ._errors import SettingsError, SlicerError, SlicerWarning
from ._figures import plot_overview
from ._geotiff import write_slice_geotiffs
from ._grid import grid_for, line_spacings, neighbour_weights, trace_spacing
from ._processing import apply_gain, correct_time_zero, dewow, envelope, remove_background
from ._progress import bar_for
from ._settings import BuildSettings
from ._survey import SurveyInfo, iter_lines, survey_info
from ._windows import Windows, make_windows, record_reach, reduce_to_windows


def nice_number(value: float) -> float:
    """The largest of 1, 2 or 5 times a power of ten that does not exceed ``value``."""
    if not math.isfinite(value) or value <= 0:
        raise ValueError(f"nice_number needs a positive value, got {value}")
    exponent = math.floor(math.log10(value))
    for m in (5, 2, 1):
        candidate = m * 10.0 ** exponent
        if candidate <= value * (1 + 1e-9):
            return float(f"{candidate:.12g}")
    return float(f"{10.0 ** exponent:.12g}")


def process_line(line: xr.DataArray, settings: BuildSettings) -> xr.DataArray:
    """Run the processing chain of ``settings`` on one placed line; returns its envelope."""
    line = correct_time_zero(line, time_zero=settings.time_zero,
                             threshold=settings.time_zero_threshold)
    if settings.dewow != "off":
        line = dewow(line, window_ns=None if settings.dewow == "auto" else float(settings.dewow))
    if settings.background != "off":
        line = remove_background(line, method=settings.background)
    if settings.gain_curve is not None:
        kind, value = settings.gain_curve
        line = apply_gain(line, kind=kind, value=value)
    return envelope(line)


def processing_summary(settings: BuildSettings) -> str:
    """One line describing the processing chain, for file tags and the overview."""
    steps = [f"time zero {settings.time_zero} ns" if settings.time_zero != "auto"
             else "time zero auto (direct-wave pick per line)"]
    if settings.dewow != "off":
        steps.append(f"dewow {settings.dewow}" + (" ns" if settings.dewow != "auto" else ""))
    if settings.background != "off":
        steps.append(f"background removal ({settings.background} trace)")
    steps.append(f"gain {settings.gain}" if settings.gain_curve else "no gain")
    steps.append("envelope (Hilbert)")
    return "; ".join(steps)


def default_windows(record_ns: float, velocity: float | None) -> Windows:
    """About twenty slices from the surface to the end of a record ``record_ns`` long."""
    if velocity is not None:
        reach, axis = velocity * record_ns / 2, "depth"
    else:
        reach, axis = record_ns, "twt"
    step = nice_number(reach / 20)
    bottom = math.floor(reach / step + 1e-9) * step
    return make_windows(0.0, bottom, step, axis=axis)


def fit_windows(windows: Windows, record_ns: float, velocity: float | None,
                where: str) -> Windows:
    """Drop windows below the end of the record (warning); refuse if none is left."""
    keep = record_reach(record_ns, windows, velocity=velocity)
    unit = windows.units
    if not keep.any():
        reach = record_ns if windows.axis == TWT else velocity * record_ns / 2
        raise SettingsError(
            f"every slice lies below the record, which reaches {reach:.3g} {unit} below "
            "time zero", where=where)
    if not keep.all():
        dropped = windows.select(~keep)
        warnings.warn(f"{len(dropped)} slice(s) from {dropped.top[0]:g} {unit} down lie below "
                      f"the end of the record and are left out", SlicerWarning, stacklevel=2)
    return windows.select(keep)


@dataclass
class Reduced:
    """The survey reduced to slice values: a trace x slice table plus what was learned."""

    table: xr.DataArray
    info: SurveyInfo
    windows: Windows
    lines: list[dict] = field(default_factory=list)


def reduce_survey(settings: BuildSettings, *, progress: bool = True) -> Reduced:
    """Read, place, process and reduce every line of the survey to its slice values.

    Lines are handled one at a time; only their slice values are kept.
    """
    info = survey_info(settings.lines, sample_interval_ns=settings.sample_interval)
    velocity = settings.resolved_velocity
    where = "--times" if settings.times is not None else "--depths"
    windows = settings.requested_windows
    if not isinstance(settings.time_zero, str):
        if not 0 <= float(settings.time_zero) < info.record_ns:
            raise SettingsError(f"time zero {settings.time_zero} ns lies outside the record "
                                f"(0 to {info.record_ns:g} ns)", where="--time-zero")
        if windows is not None:  # known before reading a sample: refuse early
            windows = fit_windows(windows, info.record_ns - float(settings.time_zero),
                                  velocity, where)
    parts, lines = [], []
    with bar_for(enabled=progress, total=info.n_traces, desc="reading and processing",
                 unit="trace") as bar:
        for number, line in enumerate(iter_lines(settings.lines,
                                                 sample_interval_ns=info.sample_interval_ns)):
            env = process_line(line, settings)
            if number == 0:  # the first line's record decides which windows fit
                record_ns = float(env[TWT].values[-1])
                windows = (default_windows(record_ns, velocity) if windows is None
                           else fit_windows(windows, record_ns, velocity, where))
            values = reduce_to_windows(env, windows, velocity=velocity)
            n = line.sizes[TRACE]
            parts.append(xr.Dataset({
                "value": ((TRACE, "slice"), values.values),
                "x": (TRACE, line["x"].values), "y": (TRACE, line["y"].values),
                "line": (TRACE, np.full(n, number, dtype=np.int32))}))
            lines.append({"file": str(settings.lines[number].file),
                          "traces": n,
                          "time_zero_ns": float(env.attrs.get("time_zero_ns", 0.0)),
                          "history": env.attrs.get("history", "")})
            bar.update(n)
    table = xr.concat(parts, dim=TRACE)
    u = windows.units
    table = table["value"].assign_coords(
        x=table["x"], y=table["y"], line=table["line"],
        top=("slice", windows.top, {"units": u, "axis": windows.axis}),
        bottom=("slice", windows.bottom, {"units": u, "axis": windows.axis}))
    return Reduced(table=table, info=info, windows=windows, lines=lines)


def grid_slices(table: xr.DataArray, *, cell: float | None = None, radius: float | None = None,
                crs=None, velocity: float | None = None, processing: str = "",
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
    crs : optional
        Survey CRS, stored in the cube.
    velocity : float, optional
        Radar velocity (m/ns), stored in the cube's attrs.
    processing : str
        Summary of the processing, stored in the cube's attrs.
    """
    x, y = table["x"].values, table["y"].values
    line = table["line"].values
    if cell is None:
        spacing = np.nanmedian(line_spacings(x, y, line))
        along = trace_spacing(x, y, line)
        base = spacing / 4 if math.isfinite(spacing) else 4 * along
        cell = nice_number(base)
    grid = grid_for(x, y, cell=cell)
    weights = neighbour_weights(grid, x, y, line, radius=radius, progress=progress)
    values = weights.apply(table.values).reshape(len(table["slice"]), grid.ny, grid.nx)
    axis = table["top"].attrs.get("axis", "depth")
    cube = new_cube(values, west=grid.west, north=grid.north, cell=grid.cell, crs=crs,
                    top=table["top"].values, bottom=table["bottom"].values, axis=axis,
                    velocity=velocity, processing=processing)
    details = {"west": grid.west, "north": grid.north, "cell": grid.cell, "nx": grid.nx,
               "ny": grid.ny, "search_radius_m": weights.radius,
               "line_spacing_m": weights.across, "along_line_half_width_m": weights.along,
               "empty_cells": int(weights.empty.sum())}
    return cube, details


@dataclass
class BuildResult:
    """What a build made: the cube, the files written and the record of how."""

    cube: xr.DataArray
    record: dict
    files: list[Path] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


def build_cube(settings: BuildSettings, *, progress: bool = True) -> BuildResult:
    """Run the whole pipeline in memory, writing nothing: the cube and its record."""
    started = time.perf_counter()
    reduced = reduce_survey(settings, progress=progress)
    read_s = time.perf_counter() - started
    velocity = settings.resolved_velocity if reduced.windows.axis == "depth" else None
    summary = processing_summary(settings)
    cube, details = grid_slices(reduced.table, cell=settings.cell, radius=settings.radius,
                                crs=settings.crs, velocity=velocity, processing=summary,
                                progress=progress)
    record = {
        "slicer": _version(),
        "created_utc": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "settings": settings.to_record(),
        "processing": summary,
        "survey": {"lines": len(settings.lines), "traces": reduced.info.n_traces,
                   "samples_per_trace": reduced.info.n_samples,
                   "sample_interval_ns": reduced.info.sample_interval_ns},
        "slices": {"axis": reduced.windows.axis, "units": reduced.windows.units,
                   "top": reduced.windows.top.tolist(),
                   "bottom": reduced.windows.bottom.tolist()},
        "grid": details,
        "lines": reduced.lines,
        "seconds": {"read_and_process": round(read_s, 3),
                    "grid": round(time.perf_counter() - started - read_s, 3)},
        "environment": _environment(),
    }
    return BuildResult(cube=cube, record=record)


def build(settings: BuildSettings, *, progress: bool = True,
          command: list[str] | None = None) -> BuildResult:
    """Build the slices of a survey and write them to ``settings.out``.

    Writes ``slices/`` (one GeoTIFF per slice), ``cube.nc`` (CF NetCDF), ``overview.png`` and
    ``record.json`` (every setting and input, with checksums). Nothing is written until the
    whole survey has been read and gridded, and each file is written atomically.

    Parameters
    ----------
    settings : BuildSettings
        What to build; ``settings.out`` must be set.
    progress : bool
        Show progress bars.
    command : list of str, optional
        The command line, kept in the record.

    Raises
    ------
    SlicerError
        On any bad input or setting, before anything is written.
    """
    if settings.out is None:
        raise SettingsError("no output folder given", where="--out")
    out = prepare_output_dir(settings.out, overwrite=settings.overwrite, create=False)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", SlicerWarning)
        result = build_cube(settings, progress=progress)
        result.record["inputs"] = [_describe_input(e.file) for e in settings.lines]
        result.record["inputs"].insert(0, _describe_input(settings.source))
        if command is not None:
            result.record["command"] = command
        started = time.perf_counter()
        prepare_output_dir(out, overwrite=settings.overwrite)
        slices_dir = out / "slices"
        slices_dir.mkdir(exist_ok=True)
        tags = {"PROCESSING": result.record["processing"],
                "SOURCE": str(settings.source)}
        files = write_slice_geotiffs(result.cube, slices_dir, tags=tags, progress=progress)
        if settings.overwrite:  # slices of an earlier build that this one does not replace
            for stale in sorted(set(slices_dir.glob("slice_*.tif")) - set(files)):
                stale.unlink()
        cube_path = out / "cube.nc"
        write_cube_netcdf(result.cube, cube_path)
        overview = out / "overview.png"
        figure = plot_overview(result.cube, overview, title=settings.title)
        del figure
        files = [*files, cube_path, overview]
    result.warnings = [str(w.message) for w in caught if issubclass(w.category, SlicerWarning)]
    for w in caught:
        if not issubclass(w.category, SlicerWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    result.record["warnings"] = result.warnings
    result.record["seconds"]["write"] = round(time.perf_counter() - started, 3)
    result.record["outputs"] = [str(p.relative_to(out)) for p in files]
    record_path = out / "record.json"
    atomic_write_text(record_path, json.dumps(result.record, indent=2, default=_jsonable) + "\n")
    result.files = [*files, record_path]
    for message in result.warnings:  # the caller sees them too
        warnings.warn(message, SlicerWarning, stacklevel=2)
    return result


def _describe_input(path: Path) -> dict:
    digest = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            digest.update(block)
    return {"file": str(path), "bytes": path.stat().st_size, "sha256": digest.hexdigest()}


def _version() -> str:
    from . import __version__
    return __version__


def _environment() -> dict:
    import importlib.metadata as md
    versions = {}
    for name in ("numpy", "scipy", "xarray", "pyproj", "rasterio", "segyio", "matplotlib",
                 "h5netcdf", "dask"):
        try:
            versions[name] = md.version(name)
        except md.PackageNotFoundError:
            versions[name] = None
    return {"python": sys.version.split()[0], "platform": platform.platform(), **versions}


def _jsonable(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"cannot record {type(value).__name__}")


__all__ = ["BuildResult", "SlicerError", "build", "build_cube", "grid_slices",
           "process_line", "reduce_survey"]
