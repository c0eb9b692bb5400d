"""GeoPackages through pyogrio (GDAL/OGR): layers of shapely geometries with typed fields.

One writer for every vector output (anomaly outlines, hyperbola picks): the file is written
under a temporary name beside its final one, layer by layer, and renamed into place with the
user's file modes, so a reader never sees half a GeoPackage and an earlier file stays whole
until the new one is complete.
"""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from slicer.core.atomic import atomic_path, file_mode, refuse_existing
from slicer.core.errors import OutputError


@dataclass(frozen=True)
class Layer:
    """One layer: its name, geometry type (OGR name), shapely geometries and field arrays."""

    name: str
    geometry_type: str
    geometries: list
    fields: dict[str, np.ndarray]


def geopackage_path(path: str | os.PathLike) -> Path:
    """``path`` as a Path, if it names a GeoPackage: GIS pick a file's reader by its suffix,
    so a GeoPackage named ``.shp`` would be opened as a shapefile and fail.

    Raises
    ------
    OutputError
        If ``path`` does not end in ``.gpkg``.
    """
    path = Path(path)
    if path.suffix.lower() != ".gpkg":
        raise OutputError("a GeoPackage's name must end in .gpkg", where=str(path))
    return path


def write_geopackage(path: str | os.PathLike, layers: list[Layer], *, crs=None,
                     overwrite: bool = False) -> Path:
    """Write ``layers`` to the GeoPackage ``path`` (ending in ``.gpkg``) in ``crs`` (anything
    pyproj reads, or None).

    Polygons are written as MultiPolygons when the layer's type says so (GeoPackage readers
    expect one geometry type per layer). An existing ``path`` is replaced only with
    ``overwrite`` (OutputError otherwise).
    """
    import pyogrio.raw
    import pyproj
    import shapely
    path = refuse_existing(geopackage_path(path), overwrite=overwrite)
    wkt = pyproj.CRS.from_user_input(crs).to_wkt() if crs is not None else None
    try:
        with atomic_path(path, overwrite=overwrite) as tmp:
            tmp = Path(tmp)
            tmp.unlink()  # GDAL creates the GeoPackage itself (an empty file is no GeoPackage)
            for k, layer in enumerate(layers):
                geoms = layer.geometries
                if layer.geometry_type == "MultiPolygon":
                    geoms = [shapely.MultiPolygon([g]) if g.geom_type == "Polygon" else g
                             for g in geoms]
                wkb = np.array([shapely.to_wkb(g) for g in geoms], dtype=object)
                with warnings.catch_warnings():  # no CRS is a local grid, on purpose
                    warnings.filterwarnings("ignore", "'crs' was not provided")
                    pyogrio.raw.write(tmp, wkb, list(layer.fields.values()),
                                      list(layer.fields), layer=layer.name, driver="GPKG",
                                      geometry_type=layer.geometry_type, crs=wkt,
                                      append=k > 0)
            # GDAL (SQLite) made the file anew with its own mode, 0644: the user's instead
            os.chmod(tmp, file_mode())
    except OSError as exc:
        raise OutputError(f"cannot write the GeoPackage ({exc})", where=str(path)) from None
    return path


__all__ = ["Layer", "geopackage_path", "write_geopackage"]
