"""Elevation slices in a build: the options, the surface of every line, the windows.

``slices = "elevation"`` (or ``elevations`` given) cuts slices at constant elevation above the
vertical datum named by ``datum``, from the ground's elevation at every trace (``terrain``: the
GNSS tracks' heights less ``gnss_height``, the line table's ``start_elevation`` /
``end_elevation``, or an elevation model GeoTIFF). Everything is checked before any trace is
read, and a missing height or an elevation model that misses the survey stops the build with one
line before anything is written.
"""

from __future__ import annotations

import functools
import math
import warnings
from pathlib import Path

import numpy as np

from slicer.core.errors import InputFileError, LineTableError, SettingsError, SlicerWarning
from slicer.geometry.terrain import (
    ElevationModel,
    check_terrain,
    surface_from_ends,
    surface_from_heights,
)
from slicer.gridding.elevation import OPTION, make_elevation_windows
from slicer.gridding.windows import Windows, parse_range

#: Options that only elevation slices use.
ELEVATION_OPTIONS = ("elevations", "terrain", "gnss_height", "datum")


def wants_elevation(settings) -> bool:
    """True when the build cuts elevation slices."""
    return settings.slices == "elevation" or (settings.slices is None
                                              and settings.elevations is not None)


def check_elevation_settings(settings) -> None:
    """Refuse elevation options that cannot work together, naming the option.

    Raises
    ------
    SettingsError
        An elevation option without elevation slices, depth or time ranges with them, no
        terrain, datum or velocity, ``gnss`` without the antenna height or GNSS tracks.
    LineTableError
        ``terrain = table`` and a row without its elevations.
    """
    if settings.slices not in (None, "depth", "elevation"):
        raise SettingsError(f"expected 'depth' or 'elevation', got {settings.slices!r}",
                            where="--slices")
    if not wants_elevation(settings):
        for name in ELEVATION_OPTIONS:
            if getattr(settings, name) is not None:
                raise SettingsError("has no effect without elevation slices (--slices "
                                    "elevation)", where="--" + name.replace("_", "-"))
        return
    for name in ("depths", "times"):
        if getattr(settings, name) is not None:
            raise SettingsError("elevation slices are cut with --elevations TOP:BOTTOM:STEP "
                                "(m above the datum)", where=f"--{name}")
    if settings.terrain is None:
        raise SettingsError("elevation slices need the ground's elevation at every trace: give "
                            "--terrain gnss, table or an elevation model GeoTIFF",
                            where="--terrain")
    if settings.datum is None or not str(settings.datum).strip():
        raise SettingsError("elevation slices need the vertical datum their elevations refer to "
                            "(e.g. EGM2008 or a site benchmark): give --datum", where="--datum")
    if settings.resolved_model is None:
        raise SettingsError("elevation slices need a velocity: give --velocity, "
                            "--permittivity or --velocity-model", where="--velocity")
    terrain = check_terrain(settings.terrain)
    if terrain == "gnss":
        if settings.gnss_height is None:
            raise SettingsError("--terrain gnss needs the GNSS antenna's height above the "
                                "ground (m)", where="--gnss-height")
        untracked = [e for e in settings.lines if (e.positions or settings.positions) != "track"]
        if untracked:
            raise SettingsError(f"--terrain gnss takes heights from each line's GNSS track, but "
                                f"the line at {untracked[0].where} is not placed from a track",
                                where="--terrain")
    elif settings.gnss_height is not None:
        raise SettingsError("has no effect: only --terrain gnss subtracts it",
                            where="--gnss-height")
    if terrain == "table":
        for e in settings.lines:
            for column in ("start_elevation", "end_elevation"):
                if getattr(e, column) is None:
                    raise LineTableError(f"terrain = table needs column {column} on every row; "
                                         "it is empty here", where=e.where)
    if isinstance(terrain, Path) and not terrain.is_file():
        raise InputFileError("elevation model not found", where=str(terrain))
    if isinstance(terrain, Path) and settings.crs is None:
        raise SettingsError("an elevation model is placed by its CRS: give the survey's CRS "
                            "(a survey on a local grid can take its ground from the line "
                            "table, --terrain table)", where="--crs")


def elevation_windows(settings) -> Windows | None:
    """The elevation windows asked for (``--elevations``), or None to choose them."""
    if settings.elevations is None:
        return None
    top, bottom, step = parse_range(settings.elevations, option="--elevations")
    return make_elevation_windows(top, bottom, step, thickness=settings.thickness)


@functools.lru_cache(maxsize=4)
def _model(path: str, mtime_ns: int, size: int) -> ElevationModel:
    return ElevationModel.read(path)


def elevation_model(path) -> ElevationModel:
    """The elevation model at ``path``, read once per process (while the file is unchanged)."""
    path = Path(path)
    try:
        st = path.stat()
    except OSError:
        raise InputFileError("elevation model not found", where=str(path)) from None
    return _model(str(path), st.st_mtime_ns, st.st_size)


def line_surface(x: np.ndarray, y: np.ndarray, entry, settings, *,
                 height: np.ndarray | None = None) -> np.ndarray:
    """Ground elevation (m above the datum) at every trace of a placed line.

    ``x``, ``y`` (m, survey CRS) are its traces' positions and, for ``terrain = gnss``,
    ``height`` the track's (the ``height`` coordinate of
    :func:`slicer.geometry.positions.positions_from_track`; None when the track has none).
    """
    terrain = check_terrain(settings.terrain)
    x, y = np.asarray(x), np.asarray(y)
    where = str(entry.track or entry.file)
    if terrain == "gnss":
        if height is None:
            raise InputFileError("the GNSS track has no height column; elevation slices from "
                                 "GNSS need trace,x,y,height (or lon,lat,height)", where=where)
        return surface_from_heights(height, gnss_height=settings.gnss_height, where=where)
    if terrain == "table":
        return surface_from_ends(x, y, start=entry.start, end=entry.end,
                                 start_elevation=entry.start_elevation,
                                 end_elevation=entry.end_elevation)
    return elevation_model(terrain).sample(x, y, crs=settings.crs,
                                           where=f"line {entry.file.name}")


def survey_surface(settings, info) -> tuple[float, float]:
    """The lowest and highest ground (m above the datum) under any trace of the survey.

    Every trace is placed as its line task will place it, without reading a sample
    (:func:`slicer.pipeline.position_checks.placed_stub`), so a missing height or an elevation
    model that misses the survey is refused here, before any line is read or anything written.
    """
    from slicer.pipeline.position_checks import placed_stub
    low, high = math.inf, -math.inf
    for entry, line in zip(settings.lines, info.lines, strict=True):
        stub = placed_stub(entry, settings, line.n_traces)
        z = line_surface(stub["x"].values, stub["y"].values, entry, settings,
                         height=stub["height"].values if "height" in stub.coords else None)
        low, high = min(low, float(np.min(z))), max(high, float(np.max(z)))
    return low, high


def plan_elevation_windows(windows: Windows | None, *, low: float, high: float,
                           reach: float, step: float) -> Windows:
    """Elevation windows fitted to the ground (``low`` to ``high``, m above the datum) and the
    depth ``reach`` (m) the record reaches below it.

    Without ``windows``: ``step`` m apart, on round elevations, from just below the highest ground
    down as deep as the record reaches under the lowest. Given windows that no trace can fill
    (wholly above the highest ground, or below the record under the lowest ground) are left out
    with a warning; none left is refused.
    """
    deepest = low - reach  # the lowest elevation any trace reaches: under the lowest ground
    if windows is None:
        top = math.floor(high / step + 1e-9) * step
        bottom = math.ceil(deepest / step - 1e-9) * step
        return make_elevation_windows(top, min(bottom, top - step), step)
    # a value needs the whole window below the ground (the top at or under it) and within
    # the record (the bottom no deeper than it reaches)
    keep = (windows.bottom >= deepest - 1e-9) & (windows.top <= high + 1e-9)
    if not keep.any():
        raise SettingsError(f"no slice lies between the highest ground ({high:.3f} m) and the "
                            f"deepest the record reaches under the lowest ({deepest:.3f} m)",
                            where=OPTION)
    if not keep.all():
        warnings.warn(f"{int((~keep).sum())} elevation slice(s) lie above the ground or below "
                      f"the record everywhere (ground {low:.3f} to {high:.3f} m, record to "
                      f"{deepest:.3f} m) and are left out", SlicerWarning, stacklevel=2)
    return windows.select(keep)


__all__ = ["ELEVATION_OPTIONS", "check_elevation_settings", "elevation_model",
           "elevation_windows", "line_surface", "plan_elevation_windows", "survey_surface",
           "wants_elevation"]
