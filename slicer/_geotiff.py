"""One single-band GeoTIFF per slice, written with rasterio.

Each file holds one slice as float32 with NaN nodata, the cube's CRS and its exact transform
(from the grid corner and cell size, never from coordinates), tiled and DEFLATE-compressed with
the floating-point predictor.  The window bounds travel in GDAL metadata tags and in the band
description, because a GeoTIFF has no place for a depth coordinate.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import rasterio
import xarray as xr
from rasterio.crs import CRS as RasterioCRS

from ._atomic import atomic_path
from ._conventions import DEPTH, TWT, UNITS
from ._cube import cube_crs, cube_transform, slice_axis
from ._errors import OutputError, SettingsError
from ._progress import progress_bar

#: Largest tile edge, pixels; TIFF tiles must be multiples of 16.
_TILE = 256

#: Decimals of the window bounds in file names and band descriptions (mm, hundredths of ns).
_DECIMALS = {DEPTH: 3, TWT: 2}


def slice_file_name(index: int, top: float, bottom: float, axis: str = DEPTH, *,
                    digits: int = 3) -> str:
    """Return the GeoTIFF file name of one slice, e.g. ``slice_003_0.300-0.400m.tif``.

    The zero-padded index comes first, so names sort like the slices (by depth or time) as long
    as ``digits`` covers the largest index.

    Parameters
    ----------
    index : int
        Position of the slice in the cube (0-based, >= 0).
    top, bottom : float
        Window bounds, m for depth or ns for two-way time.
    axis : {"depth", "twt"}
        Slice dimension; selects the unit written into the name.
    digits : int
        Minimum width of the zero-padded index.
    """
    if axis not in _DECIMALS:
        raise SettingsError(f"slice axis must be {DEPTH!r} or {TWT!r}, not {axis!r}",
                            where="axis")
    if int(index) < 0:
        raise SettingsError(f"slice index must be >= 0, got {index}", where="index")
    dec = _DECIMALS[axis]
    return (f"slice_{int(index):0{int(digits)}d}_{float(top):.{dec}f}-{float(bottom):.{dec}f}"
            f"{UNITS[axis]}.tif")


def _block(n: int) -> int:
    # Whole 256-pixel tiles for large rasters; one tile (rounded up to 16) for small ones, so a
    # small slice is not padded out to a mostly empty 256 x 256 tile.
    return min(_TILE, 16 * math.ceil(n / 16))


def _number(value: float) -> str:
    return f"{float(value):.10g}"


def _tag_text(value) -> str:
    if isinstance(value, str):
        return value
    if isinstance(value, Sequence):
        return "; ".join(str(v) for v in value)
    return str(value)


def _rasterio_crs(cube: xr.DataArray) -> RasterioCRS | None:
    pcrs = cube_crs(cube)
    if pcrs is None:
        return None
    # An EPSG code gives GDAL a plain ProjectedCRSGeoKey; otherwise hand over the full WKT.
    code = pcrs.to_epsg()
    return RasterioCRS.from_epsg(code) if code else RasterioCRS.from_wkt(pcrs.to_wkt())


def write_slice_geotiffs(cube: xr.DataArray, folder: str | os.PathLike, *,
                         tags: Mapping[str, object] | None = None,
                         progress: bool = True) -> list[Path]:
    """Write every slice of ``cube`` to its own GeoTIFF in ``folder``.

    Files are named by :func:`slice_file_name`; each is written atomically and existing files
    of the same name are replaced, nothing else in ``folder`` is touched.

    Each file carries GDAL metadata tags ``DEPTH_TOP``/``DEPTH_BOTTOM`` (m) and
    ``VELOCITY_M_PER_NS`` for depth slices, or ``TWT_TOP``/``TWT_BOTTOM`` (ns) for time slices,
    plus ``UNITS`` (of the values), ``PROCESSING`` and any extra ``tags``; the band description
    reads e.g. ``"depth 0.300-0.400 m"``.

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`slicer._cube.new_cube`.
    folder : path-like
        Output folder; created if missing.
    tags : mapping, optional
        Extra dataset-level metadata tags (values converted to text, sequences joined with
        ``"; "``).
    progress : bool
        Show a tqdm progress bar.

    Returns
    -------
    list of pathlib.Path
        The files written, in slice order.

    Raises
    ------
    OutputError
        If ``folder`` is a file or cannot be created or written.
    """
    axis = slice_axis(cube)
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise OutputError("output path is a file, not a folder", where=str(folder))
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create output folder ({exc.strerror})",
                          where=str(folder)) from None
    transform = cube_transform(cube)
    crs = _rasterio_crs(cube)
    n_slices, ny, nx = cube.shape
    unit = UNITS[axis]
    dec = _DECIMALS[axis]
    digits = max(3, len(str(n_slices - 1)))
    tops = cube[f"{axis}_top"].values
    bottoms = cube[f"{axis}_bottom"].values
    common = {
        "UNITS": str(cube.attrs.get("units", "")),
        "PROCESSING": _tag_text(cube.attrs.get("processing", "")),
    }
    if axis == DEPTH and cube.attrs.get("velocity") is not None:
        common["VELOCITY_M_PER_NS"] = _number(cube.attrs["velocity"])
    extra = {str(k): _tag_text(v) for k, v in (tags or {}).items()}
    profile = {
        "driver": "GTiff", "width": nx, "height": ny, "count": 1, "dtype": "float32",
        "crs": crs, "transform": transform, "nodata": np.nan,
        "tiled": True, "blockxsize": _block(nx), "blockysize": _block(ny),
        "compress": "deflate", "predictor": 3,
        # Key directory version 1.1 as in OGC 19-008r4 (GeoTIFF 1.1).
        "geotiff_version": "1.1",
    }
    written: list[Path] = []
    for i in progress_bar(range(n_slices), desc=f"GeoTIFF {axis} slices", unit="slice",
                  enabled=progress):
        top, bottom = float(tops[i]), float(bottoms[i])
        path = folder / slice_file_name(i, top, bottom, axis, digits=digits)
        band = np.ascontiguousarray(cube.values[i], dtype=np.float32)
        slice_tags = {
            f"{axis.upper()}_TOP": _number(top),
            f"{axis.upper()}_BOTTOM": _number(bottom),
            **common, **extra,
        }
        try:
            with atomic_path(path) as tmp, rasterio.open(tmp, "w", **profile) as dst:
                dst.write(band, 1)
                dst.update_tags(**slice_tags)
                dst.set_band_description(1, f"{axis} {top:.{dec}f}-{bottom:.{dec}f} {unit}")
                dst.set_band_unit(1, common["UNITS"])
        except (OSError, rasterio.errors.RasterioIOError) as exc:
            raise OutputError(f"cannot write GeoTIFF ({exc})", where=str(path)) from None
        written.append(path)
    return written
