"""CF 1.8 metadata of the cube, shared by the NetCDF file and the Zarr store.

Coordinate attributes (CF 1.8 sections 4.3 and 5.6), the grid-mapping variable (section 5.6,
Appendix F, laid out as rioxarray and GDAL read it), the ``<axis>_bnds`` cell-bounds variable
(section 7.1) and the global attributes (section 2.6).
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import TYPE_CHECKING

import numpy as np
from affine import Affine

from slicer.core.conventions import DEPTH, ELEVATION, TWT, UNITS, X

if TYPE_CHECKING:
    import pyproj
    import xarray as xr

#: Name of the scalar grid-mapping coordinate (the name rioxarray and GDAL expect).
GRID_MAPPING = "spatial_ref"

#: Name of the second dimension of a cell-bounds variable (CF 1.8 section 7.1).
BOUNDS_DIM = "bnds"

_AXIS_LONG_NAME = {DEPTH: "depth below the ground surface", TWT: "two-way travel time",
                   ELEVATION: "elevation above the vertical datum"}


def plan_attrs(dim: str) -> dict[str, str]:
    """Attributes of the ``x`` or ``y`` cell-centre coordinate.

    CF 1.8 section 5.6: plane coordinates in metres are ``projection_x_coordinate`` and
    ``projection_y_coordinate``, on a local grid too (no grid mapping then: the CRS is not
    known). Without them compliance-checker takes ``axis: X/Y`` for longitude and latitude.
    """
    word = "easting" if dim == X else "northing"
    return {"long_name": f"{word} of the cell centre", "units": "m", "axis": dim.upper(),
            "standard_name": f"projection_{dim}_coordinate"}


def axis_attrs(axis: str) -> dict[str, str]:
    """Attributes of the slice-window centre coordinate (``depth``, ``twt`` or ``elevation``).

    Elevation has no standard name: CF's heights name their datum (geoid, ellipsoid, sea
    level), and slicer only knows the name the user gives (the ``vertical_datum`` attribute).
    """
    attrs = {"long_name": f"{_AXIS_LONG_NAME[axis]}, window centre", "units": UNITS[axis]}
    if axis == DEPTH:
        # CF 1.8 section 4.3: a vertical coordinate in length units needs ``positive``.
        attrs.update(standard_name="depth", positive="down", axis="Z")
    elif axis == ELEVATION:
        attrs.update(positive="up", axis="Z")
    return attrs


def grid_mapping_variable(pcrs: pyproj.CRS, transform: Affine) -> xr.Variable:
    """The scalar grid-mapping variable of a projected cube.

    The attributes are those rioxarray's ``write_crs``/``write_transform`` produce: the CF
    grid-mapping parameters, the WKT under both names (CF's ``crs_wkt``, GDAL's
    ``spatial_ref``) and GDAL's ``GeoTransform`` string. The value is an int32 0 with a
    ``long_name``: compliance-checker's cf:1.8 suite refuses an int64 variable (its reading of
    CF 1.8 section 2.2, data types) and asks for a ``long_name`` (section 3.3).
    """
    import pyproj
    import xarray as xr
    try:
        attrs: dict[str, object] = dict(pcrs.to_cf())
    except (KeyError, pyproj.exceptions.CRSError):
        attrs = {}
    wkt = pcrs.to_wkt()
    attrs["long_name"] = "coordinate reference system of the grid"
    attrs["spatial_ref"] = wkt
    attrs["crs_wkt"] = wkt
    attrs["GeoTransform"] = " ".join(str(v) for v in transform.to_gdal())
    return xr.Variable((), np.int32(0), attrs)


def add_axis_bounds(ds: xr.Dataset, axis: str) -> str:
    """Add the ``<axis>_bnds`` variable (from ``<axis>_top``/``<axis>_bottom``) to ``ds``.

    CF 1.8 section 7.1: the slice windows are the cells of the slice axis, given by a
    ``(axis, 2)`` variable named in the axis coordinate's ``bounds`` attribute; its ``units``,
    which section 7.1 allows, are the coordinate's. Returns its name.
    """
    import xarray as xr
    name = f"{axis}_bnds"
    tops = np.asarray(ds[f"{axis}_top"].values, dtype=np.float64)
    bottoms = np.asarray(ds[f"{axis}_bottom"].values, dtype=np.float64)
    ds[name] = xr.Variable((axis, BOUNDS_DIM), np.stack([tops, bottoms], axis=1),
                           attrs={"units": UNITS[axis]})
    ds[axis].attrs["bounds"] = name
    return name


def global_attrs(name: str, axis: str, *, processing: str = "", title: str | None = None,
                 source: str | None = None, history: str | None = None) -> dict[str, str]:
    """Return the CF-1.8 global attributes of a file holding the cube ``name``."""
    now = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    return {
        "Conventions": "CF-1.8",
        "title": title or f"Ground-penetrating radar {axis} slices ({name})",
        "history": history or f"{now}: cube written by slicer"
                              + (f" after: {processing}" if processing else ""),
        "source": source or "ground-penetrating radar grid survey, gridded by slicer",
    }
