"""The files that describe the ground surface of a synthetic survey on uneven ground.

:func:`slicer.synthetic.write_survey` calls :func:`write_surface_files` when the ground has a
surface model (:mod:`slicer.synthetic.terrain`); it writes, in the survey folder:

* ``tracks/<line>.csv``, one per line, header ``trace,x,y,height``: one row per trace, ``x``,
  ``y`` in the survey CRS (m) and ``height`` the GNSS antenna's elevation (m above the datum),
  the ground's elevation at the trace plus the antenna's height above the ground;
* ``dem.tif``: a GeoTIFF of the ground elevation (float32, m above the datum, survey CRS, nodata
  NaN) over the traces plus a margin, each cell holding the elevation at its centre;

and returns the extra line-table columns (``track``, ``start_elevation``, ``end_elevation``)
and the additions to ``truth.json``.  Everything is written atomically.
"""

from __future__ import annotations

import copy
import csv
import io
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyproj

from slicer.core.atomic import atomic_path, atomic_write_text
from slicer.core.errors import OutputError, SettingsError
from slicer.synthetic.forward import check_number

__all__ = ["DEM_FILE", "LINE_COLUMNS", "TRACK_COLUMNS", "TRACK_FOLDER", "SurfaceFiles",
           "SurfaceOptions", "format_number", "write_surface_files"]

#: Header of each track CSV.
TRACK_COLUMNS = ("trace", "x", "y", "height")
#: Columns added to the line table after its usual five.
LINE_COLUMNS = ("track", "start_elevation", "end_elevation")
TRACK_FOLDER = "tracks"
DEM_FILE = "dem.tif"


def format_number(value: float) -> str:
    """Shortest text that reads back to ``value``, capped at micrometres (no
    0.30000000000000004)."""
    return np.format_float_positional(float(value), precision=6, unique=True, trim="0")


@dataclass(frozen=True)
class SurfaceOptions:
    """How the surface files are written.

    Parameters
    ----------
    gnss_height : float
        Height of the GNSS antenna above the ground, m (>= 0); added to the ground elevation in
        the tracks' ``height``.
    vertical_datum : str
        Name of the datum elevations are measured from (recorded in truth.json and dem.tif).
    dem_cell : float
        DEM cell size, m.
    dem_margin : float
        How far the DEM reaches beyond the outermost traces, m.
    """

    gnss_height: float = 1.0
    vertical_datum: str = "site datum (synthetic)"
    dem_cell: float = 0.25
    dem_margin: float = 2.0

    def __post_init__(self):
        check_number("gnss_height", self.gnss_height, nonnegative=True)
        check_number("dem_cell", self.dem_cell, positive=True)
        check_number("dem_margin", self.dem_margin, nonnegative=True)
        if not isinstance(self.vertical_datum, str) or not self.vertical_datum.strip():
            raise SettingsError(f"must be a non-empty name, got {self.vertical_datum!r}",
                                where="vertical_datum")


@dataclass(frozen=True)
class SurfaceFiles:
    """What :func:`write_surface_files` wrote (empty on level ground: nothing).

    Attributes
    ----------
    columns : tuple of str
        Line-table columns to add after the usual five.
    rows : tuple of tuple of str
        Their values, one tuple per line.
    truth : dict
        Entries to add to truth.json (see :meth:`add_to`).
    elevations : dict
        ``{"targets": [...], "layers": [...]}``: absolute elevations, m above the datum.
    dem : Path or None
    tracks : tuple of Path
    """

    columns: tuple[str, ...] = ()
    rows: tuple[tuple[str, ...], ...] = ()
    truth: dict = field(default_factory=dict)
    elevations: dict = field(default_factory=dict)
    dem: Path | None = None
    tracks: tuple[Path, ...] = ()

    def row(self, i: int) -> tuple[str, ...]:
        """The extra line-table values of line ``i`` (none on level ground)."""
        return self.rows[i] if self.rows else ()

    def add_to(self, truth: dict) -> dict:
        """``truth`` with the surface record and each target's and layer's ``elevation``."""
        if not self.truth:
            return truth
        out = copy.deepcopy(truth)
        out["units"]["elevation"] = "m above the vertical datum"
        for key in ("targets", "layers"):
            for entry, z in zip(out[key], self.elevations[key], strict=True):
                entry["elevation"] = z
        return {**out, **self.truth}


def write_surface_files(folder: Path, ground, lines, *, crs: str,
                        options: SurfaceOptions) -> SurfaceFiles:
    """Write the tracks and the DEM of a ground with a surface; see the module docstring.

    Parameters
    ----------
    folder : pathlib.Path
        The survey folder (already prepared).
    ground : slicer.synthetic.Ground
        With a ``surface``.
    lines : sequence of PlannedLine
    crs : str
        The survey CRS (already checked by pyproj).
    options : SurfaceOptions

    Raises
    ------
    OutputError
        The tracks folder cannot be made.
    """
    surface = ground.surface
    track_dir = folder / TRACK_FOLDER
    try:
        track_dir.mkdir(exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot make the tracks folder ({exc.strerror})",
                          where=str(track_dir)) from None
    tracks, rows = [], []
    for line in lines:
        x, y = line.positions()
        z = surface.elevation(x, y)
        text = io.StringIO()
        out = csv.writer(text, lineterminator="\n")
        out.writerow(TRACK_COLUMNS)
        height = z + options.gnss_height
        out.writerows([k, *(format_number(v) for v in values)]
                      for k, values in enumerate(zip(x, y, height, strict=True)))
        tracks.append(atomic_write_text(track_dir / f"{line.name}.csv", text.getvalue()))
        rows.append((f"{TRACK_FOLDER}/{line.name}.csv", format_number(z[0]),
                     format_number(z[-1])))
    dem = write_dem(folder / DEM_FILE, surface, lines, crs=crs, options=options)
    elevations = {key: [ground.elevation_of(item) for item in getattr(ground, key)]
                  for key in ("targets", "layers")}
    truth = {"surface": surface.describe(), "vertical_datum": options.vertical_datum,
             "reference_elevation": ground.reference_elevation,
             "gnss_antenna_height_m": options.gnss_height, "dem": DEM_FILE,
             "dem_cell_m": options.dem_cell, "tracks": f"{TRACK_FOLDER}/"}
    return SurfaceFiles(columns=LINE_COLUMNS, rows=tuple(rows), truth=truth,
                        elevations=elevations, dem=dem, tracks=tuple(tracks))


def dem_grid(lines, *, cell: float, margin: float) -> tuple[float, float, int, int]:
    """West and north edges (m) and the width and height (cells) of a DEM over ``lines``.

    It covers every trace plus ``margin`` on each side, rounded up to whole cells east and
    south.
    """
    xs, ys = zip(*(line.positions() for line in lines), strict=True)
    x, y = np.concatenate(xs), np.concatenate(ys)
    west, north = float(x.min()) - margin, float(y.max()) + margin
    width = math.ceil((float(x.max()) + margin - west) / cell - 1e-9)
    height = math.ceil((north - float(y.min()) + margin) / cell - 1e-9)
    return west, north, width, height


def write_dem(path: Path, surface, lines, *, crs: str, options: SurfaceOptions) -> Path:
    """Write the ground elevation as a single-band float32 GeoTIFF with rasterio.

    Each cell holds the surface's elevation at the cell's centre, m above the datum; the band
    is described as the ground elevation with unit ``m``, and the dataset's tags name the
    vertical datum and the surface model.
    """
    import rasterio  # only a survey on uneven ground needs it
    from affine import Affine
    from rasterio.crs import CRS

    west, north, width, height = dem_grid(lines, cell=options.dem_cell,
                                          margin=options.dem_margin)
    cx = west + (np.arange(width) + 0.5) * options.dem_cell
    cy = north - (np.arange(height) + 0.5) * options.dem_cell
    values = surface.elevation(cx[None, :], cy[:, None]).astype(np.float32)
    profile = {"driver": "GTiff", "width": width, "height": height, "count": 1,
               "dtype": "float32", "nodata": np.nan, "compress": "deflate",
               "crs": CRS.from_wkt(pyproj.CRS.from_user_input(crs).to_wkt()),
               "transform": Affine(options.dem_cell, 0.0, west, 0.0, -options.dem_cell, north)}
    with atomic_path(path) as tmp, rasterio.open(tmp, "w", **profile) as dst:
        dst.write(values, 1)
        dst.set_band_description(1, "ground surface elevation")
        dst.set_band_unit(1, "m")
        dst.update_tags(VERTICAL_DATUM=options.vertical_datum, SURFACE=surface.kind)
    return path
