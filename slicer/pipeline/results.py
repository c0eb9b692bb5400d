"""An earlier build's cube, opened from its output folder (for ``outline``, ``section``, views).

:func:`open_build` reads ``cube.zarr`` when the build wrote it, else rebuilds the cube from the
slice GeoTIFFs alone: each file's grid (CRS and transform), its window (the ``DEPTH_TOP`` /
``DEPTH_BOTTOM`` or ``TWT_TOP`` / ``TWT_BOTTOM`` tags) and values, one slice at a time, checked
to share one grid; else ``cube.nc``. Nothing but the folder is needed.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import xarray as xr

from slicer.core.conventions import DEPTH, ELEVATION, TWT
from slicer.core.errors import InputFileError


def _cube_from_tifs(paths: list[Path]) -> xr.DataArray:
    import rasterio

    from slicer.outputs.cube import new_cube
    values, tops, bottoms = [], [], []
    grid = None
    axis = velocity = datum = None
    units = ""
    for path in paths:
        with rasterio.open(path) as src:
            tags = src.tags()
            here = (src.crs.to_wkt() if src.crs else None, tuple(src.transform)[:6],
                    src.width, src.height)
            if grid is None:
                grid = here
            elif here != grid:
                raise InputFileError("lies on another grid than the build's first slice",
                                     where=str(path))
            found = [a for a in (DEPTH, TWT, ELEVATION) if f"{a.upper()}_TOP" in tags]
            if not found:
                raise InputFileError("is not a slicer slice (no DEPTH_TOP, TWT_TOP or "
                                     "ELEVATION_TOP tag)", where=str(path))
            axis = found[0]
            tops.append(float(tags[f"{axis.upper()}_TOP"]))
            bottoms.append(float(tags[f"{axis.upper()}_BOTTOM"]))
            velocity = tags.get("VELOCITY_M_PER_NS", velocity)
            datum = tags.get("VERTICAL_DATUM", datum)
            units = tags.get("UNITS", units)
            values.append(src.read(1).astype(np.float32))
    crs, transform, _, _ = grid
    order = np.argsort(-np.asarray(tops) if axis == ELEVATION else tops)  # downwards
    data = np.stack(values)[order]
    cube = new_cube(data, west=transform[2], north=transform[5], cell=transform[0], crs=crs,
                    top=np.asarray(tops)[order], bottom=np.asarray(bottoms)[order], axis=axis,
                    velocity=float(velocity) if velocity else None, units=units or "1",
                    vertical_datum=datum if axis == ELEVATION else None)
    return cube


def open_build(out: str | os.PathLike) -> xr.DataArray:
    """The cube of the build in folder ``out``.

    Raises
    ------
    InputFileError
        If the folder holds no cube (no ``cube.zarr``, slice GeoTIFFs or ``cube.nc``), or its
        slices disagree on their grid.
    """
    out = Path(out)
    if (out / "cube.zarr").is_dir():
        from slicer.outputs.zarr_store import open_cube_zarr
        return open_cube_zarr(out / "cube.zarr")
    tifs = sorted((out / "slices").glob("*.tif")) if (out / "slices").is_dir() else []
    if tifs:
        return _cube_from_tifs(tifs)
    if (out / "cube.nc").is_file():
        from slicer.outputs.cube import read_cube_netcdf
        return read_cube_netcdf(out / "cube.nc")
    raise InputFileError("holds no slicer build (no cube.zarr, slices/*.tif or cube.nc)",
                         where=str(out))


def _free(path: str | os.PathLike, overwrite: bool) -> None:
    """Refuse to replace an existing file without ``overwrite`` (nothing is lost unasked)."""
    from slicer.core.errors import OutputError
    if Path(path).exists() and not overwrite:
        raise OutputError("exists; give --overwrite to replace it", where=str(path))


def outline_build(out: str | os.PathLike, path: str | os.PathLike, *, threshold: float = 3.0,
                  min_area: float | None = None, fraction: float = 0.4, floor: float = 0.02,
                  overwrite: bool = False) -> str:
    """Outline the anomalies of the build in ``out`` into the GeoPackage ``path``
    (:func:`slicer.outputs.outlines.outline`); returns a one-line summary. An existing
    ``path`` is replaced only with ``overwrite``."""
    from slicer.outputs.outlines import outline, write_outlines
    from slicer.outputs.vector import geopackage_path
    geopackage_path(path)  # a name GIS read as a GeoPackage, before any work
    _free(path, overwrite)
    found = outline(open_build(out), threshold=threshold, min_area=min_area,
                    fraction=fraction, floor=floor)
    write_outlines(found, path, overwrite=overwrite)
    return (f"{len(found.patches)} outlines in {len({p['slice'] for p in found.patches})} "
            f"slices, {len(found.bodies)} bodies; wrote {path}")


def parse_point(text: str) -> tuple[float, float]:
    """``"X,Y"`` (m) as a pair of floats."""
    from slicer.core.errors import SettingsError
    try:
        x, y = (float(v) for v in text.split(","))
    except ValueError:
        raise SettingsError(f"expected X,Y in metres, got {text!r}", where="--through") from None
    return x, y


def section_build(out: str | os.PathLike, points, path: str | os.PathLike, *,
                  spacing: float | None = None, overwrite: bool = False,
                  display=None) -> str:
    """Draw the vertical section of the build in ``out`` along ``points`` into ``path``
    (:func:`slicer.outputs.section.section`) with ``display`` (a
    :class:`slicer.outputs.display.Display`, default its defaults); returns a one-line
    summary. An existing ``path`` is replaced only with ``overwrite``."""
    from slicer.core.errors import SettingsError
    from slicer.outputs.display import Display
    from slicer.outputs.figures import figure_format
    from slicer.outputs.section import plot_section, section
    figure_format(path)  # a name matplotlib can write, before any work
    _free(path, overwrite)
    cube = open_build(out)
    try:
        sec = section(cube, points, spacing=spacing)
    except SettingsError as exc:  # name the command line's options, not the function's
        flag = {"points": "--through", "spacing": "--spacing"}.get(exc.where, exc.where)
        raise SettingsError(exc.message, where=flag) from None
    plot_section(sec, path, **(display or Display()).options())
    return (f"section of {float(sec['distance'].values[-1]):.2f} m, "
            f"{sec.sizes['distance']} samples; wrote {path}")


__all__ = ["open_build", "outline_build", "parse_point", "section_build"]
