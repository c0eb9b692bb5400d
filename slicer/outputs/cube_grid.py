"""A cube's place: its north-up transform from the grid attrs and coordinates, and its CRS.

The cube's corner (``attrs["west"]``, ``attrs["north"]``) and cell (``attrs["cell_size"]``)
are kept exactly as the grid was planned; :func:`cube_transform` moves the corner by whole
cells to where a part of a cube (``isel``) starts, and :func:`aligned` writes that back.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
from affine import Affine

from slicer.core.conventions import X, Y
from slicer.core.errors import SettingsError
from slicer.outputs.cf import GRID_MAPPING

if TYPE_CHECKING:
    import pyproj
    import xarray as xr


def _grid_attr(cube: xr.DataArray, key: str) -> float:
    try:
        return float(cube.attrs[key])
    except (KeyError, TypeError, ValueError):
        raise SettingsError(f"cube has no numeric attrs[{key!r}] (needed for the grid)",
                            where="cube") from None


def cube_transform(cube: xr.DataArray) -> Affine:
    """Return the north-up affine transform of ``cube`` (pixel corner -> CRS metres).

    Built from ``attrs["west"]``, ``attrs["north"]`` and ``attrs["cell_size"]`` exactly, never
    from coordinate differences (which lose digits at UTM magnitudes), moved by whole cells to
    where the ``x`` and ``y`` coordinates start: a part of a cube (``cube.isel(...)``) keeps
    its parent's attrs.

    Parameters
    ----------
    cube : xarray.DataArray
        A cube (:func:`slicer.new_cube`), or a part of one, with numeric ``attrs["west"]``,
        ``attrs["north"]`` and ``attrs["cell_size"]`` (m).

    Returns
    -------
    affine.Affine
        ``Affine(cell, 0, west, 0, -cell, north)`` with ``west`` and ``north`` those of the
        first column and row: ``transform * (col, row)`` is the upper-left corner of that
        cell in the CRS, m.

    Raises
    ------
    SettingsError
        If the coordinates are not consecutive cells of that grid, west to east and north to
        south (a part taken with steps, or flipped: no north-up raster holds it).
    """
    cell = _grid_attr(cube, "cell_size")
    if not cell > 0:
        raise SettingsError(f"cube cell_size must be positive, got {cell}", where="cube")
    west, north = _grid_attr(cube, "west"), _grid_attr(cube, "north")
    shift = []
    for name, start in ((X, west), (Y, north)):
        if name not in cube.coords or not cube.sizes.get(name):
            shift.append(0.0)
            continue
        # the grid cells the coordinates name, counted from the corner the attrs give
        at = (np.asarray(cube[name].values, dtype=float) - start) / cell
        at = at - 0.5 if name == X else -at - 0.5
        k = np.rint(at)
        if not (np.all(np.abs(at - k) < 1e-3) and np.all(np.diff(k) == 1)):
            raise SettingsError(f"the cube's {name} coordinates are not consecutive cells of its "
                                f"grid from {'west to east' if name == X else 'north to south'} "
                                "(attrs west, north, cell_size): a part taken with steps or "
                                "flipped makes no north-up raster; select with unit steps",
                                where="cube")
        shift.append(float(k[0]))
    return Affine(cell, 0.0, west + shift[0] * cell, 0.0, -cell, north - shift[1] * cell)


def aligned(cube: xr.DataArray) -> xr.DataArray:
    """``cube`` with its corner attrs and its grid mapping's GDAL ``GeoTransform`` those of
    :func:`cube_transform` (a part of a cube keeps its parent's); itself if they are."""
    t = cube_transform(cube)
    if (t.c, t.f) == (_grid_attr(cube, "west"), _grid_attr(cube, "north")):
        return cube
    out = cube.copy(deep=False)
    out.attrs = {**cube.attrs, "west": t.c, "north": t.f}
    name = _grid_mapping_name(cube)
    if name in out.coords and "GeoTransform" in out.coords[name].attrs:
        mapping = out.coords[name].variable.copy(deep=False)
        mapping.attrs = {**mapping.attrs, "GeoTransform": " ".join(str(v) for v in t.to_gdal())}
        out = out.assign_coords({name: mapping})
    return out


def _grid_mapping_name(cube: xr.DataArray) -> str:
    return str(cube.attrs.get("grid_mapping") or cube.encoding.get("grid_mapping")
               or GRID_MAPPING)


def cube_crs(cube: xr.DataArray) -> pyproj.CRS | None:
    """Return the CRS of ``cube`` from its grid-mapping coordinate, or None for a local grid.

    Parameters
    ----------
    cube : xarray.DataArray
        A cube; its grid-mapping coordinate is the one ``attrs["grid_mapping"]`` (or the
        encoding's) names, else ``spatial_ref``.

    Returns
    -------
    pyproj.CRS or None
        From the coordinate's ``crs_wkt`` (or ``spatial_ref``) WKT attr, else from its CF
        grid-mapping attrs; None when the cube has no such coordinate.

    Raises
    ------
    SettingsError
        If the coordinate's attrs give no valid CRS.
    """
    import pyproj
    name = _grid_mapping_name(cube)
    if name not in cube.coords:
        return None
    attrs = cube.coords[name].attrs
    wkt = attrs.get("crs_wkt") or attrs.get("spatial_ref")
    try:
        return pyproj.CRS.from_wkt(wkt) if wkt else pyproj.CRS.from_cf(attrs)
    except pyproj.exceptions.CRSError as exc:
        raise SettingsError(f"cube grid mapping {name!r} is not a valid CRS ({exc})",
                            where="cube") from None


__all__ = ["aligned", "cube_crs", "cube_transform"]
