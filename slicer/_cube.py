"""The cube of slices: building it, its grid and CRS, and the CF NetCDF file.

The cube follows the data model in DEVELOPERS.md: an ``envelope`` DataArray with dims
``(depth, y, x)`` (or ``(twt, y, x)``), float32, NaN where nothing was measured, cell-centre
coordinates, window bounds on the slice dim, and a scalar ``spatial_ref`` coordinate laid out
the way rioxarray and GDAL read it.  The grid corner and cell size live in attrs so that every
writer builds the affine transform exactly instead of re-deriving it from float coordinates.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pyproj
import xarray as xr
from affine import Affine

from ._atomic import atomic_path
from ._conventions import C_M_PER_NS, DEPTH, TWT, UNITS, X, Y
from ._errors import InputFileError, OutputError, SettingsError

#: Name of the scalar grid-mapping coordinate (the name rioxarray and GDAL expect).
GRID_MAPPING = "spatial_ref"

#: Encoding keys the h5netcdf backend accepts; anything else left over from a read is dropped.
_NC_ENCODING_KEYS = frozenset({
    "zlib", "complevel", "shuffle", "fletcher32", "contiguous", "chunksizes", "_FillValue",
    "dtype", "compression", "compression_opts", "endian",
})

_AXIS_LONG_NAME = {DEPTH: "depth below the ground surface", TWT: "two-way travel time"}


def _check_axis(axis: str) -> str:
    if axis not in (DEPTH, TWT):
        raise SettingsError(f"slice axis must be {DEPTH!r} or {TWT!r}, not {axis!r}",
                            where="axis")
    return axis


def slice_axis(cube: xr.DataArray) -> str:
    """Return the name of the slice dimension of ``cube`` (``"depth"`` or ``"twt"``)."""
    axis = cube.dims[0] if cube.ndim == 3 else None
    if axis not in (DEPTH, TWT) or cube.dims[1:] != (Y, X):
        raise SettingsError(f"a cube has dims (depth|twt, y, x), not {cube.dims}", where="cube")
    return str(axis)


def _as_text(value: str | Sequence[str]) -> str:
    # Lists never go into attrs (DEVELOPERS.md): a sequence of steps becomes one string.
    return value if isinstance(value, str) else "; ".join(str(v) for v in value)


def new_cube(data, *, west: float, north: float, cell: float, crs, top, bottom,
             axis: str = DEPTH, velocity: float | None = None,
             processing: str | Sequence[str] = "", name: str = "envelope",
             units: str = "1") -> xr.DataArray:
    """Build a cube DataArray following the data model in DEVELOPERS.md.

    Parameters
    ----------
    data : array-like, shape (n_slices, ny, nx)
        Slice values (converted to float32), NaN where no trace lies within reach. Row 0 is the
        northern edge (north-up grid).
    west, north : float
        Upper-left grid corner in the survey CRS, m.
    cell : float
        Square cell edge length, m; must be positive.
    crs : anything ``pyproj.CRS`` accepts, or None
        The survey CRS (e.g. ``"EPSG:32633"``). None means a local engineering grid: the cube
        then has no ``spatial_ref`` coordinate.
    top, bottom : array-like, shape (n_slices,)
        Slice window bounds ``[top, bottom)``, m for depth or ns for two-way time. Every top
        must lie above its bottom and window centres must increase strictly.
    axis : {"depth", "twt"}
        Slice dimension.
    velocity : float, optional
        Radar velocity used for time-to-depth conversion, m/ns (0 < v <= c).
    processing : str or sequence of str
        The processing steps applied, stored as one ``"; "``-joined string.
    name : str
        Name of the DataArray.
    units : str
        Units of the slice values (amplitude units; ``"1"`` when dimensionless).

    Returns
    -------
    xarray.DataArray
        Dims ``(axis, y, x)``, float32.

    Raises
    ------
    SettingsError
        If the cell, windows, velocity, CRS or shapes are invalid.
    """
    axis = _check_axis(axis)
    values = np.asarray(data, dtype=np.float32)
    if values.ndim != 3:
        raise SettingsError(f"cube data must be 3-D (n_slices, ny, nx), got shape {values.shape}",
                            where="data")
    n_slices, ny, nx = values.shape
    if n_slices == 0 or ny == 0 or nx == 0:
        raise SettingsError(f"cube data is empty (shape {values.shape})", where="data")
    cell = float(cell)
    if not (math.isfinite(cell) and cell > 0):
        raise SettingsError(f"cell size must be a positive number of metres, got {cell}",
                            where="cell")
    west, north = float(west), float(north)
    if not (math.isfinite(west) and math.isfinite(north)):
        raise SettingsError(f"grid corner must be finite, got ({west}, {north})",
                            where="west/north")
    tops = np.atleast_1d(np.asarray(top, dtype=np.float64))
    bottoms = np.atleast_1d(np.asarray(bottom, dtype=np.float64))
    if tops.shape != (n_slices,) or bottoms.shape != (n_slices,):
        raise SettingsError(f"{n_slices} slices in data but {tops.size} tops and "
                            f"{bottoms.size} bottoms", where="top/bottom")
    if not (np.all(np.isfinite(tops)) and np.all(np.isfinite(bottoms))):
        raise SettingsError("slice window bounds must be finite", where="top/bottom")
    bad = np.flatnonzero(tops >= bottoms)
    if bad.size:
        i = int(bad[0])
        raise SettingsError(f"slice {i}: top {tops[i]} is not above bottom {bottoms[i]}",
                            where="top/bottom")
    centres = (tops + bottoms) / 2
    if np.any(np.diff(centres) <= 0):
        raise SettingsError("slice windows must be sorted by increasing centre",
                            where="top/bottom")
    if velocity is not None:
        velocity = float(velocity)
        if not (math.isfinite(velocity) and 0 < velocity <= C_M_PER_NS):
            raise SettingsError(f"velocity must lie in (0, {C_M_PER_NS}] m/ns, got {velocity}",
                                where="velocity")
    pcrs = None
    if crs is not None:
        try:
            pcrs = pyproj.CRS.from_user_input(crs)
        except pyproj.exceptions.CRSError as exc:
            raise SettingsError(f"unknown CRS {crs!r} ({exc})", where="crs") from None

    unit = UNITS[axis]
    projected = pcrs is not None
    xs = west + cell * (np.arange(nx) + 0.5)
    ys = north - cell * (np.arange(ny) + 0.5)
    coords: dict[str, object] = {
        X: (X, xs, _plan_attrs(X, projected)),
        Y: (Y, ys, _plan_attrs(Y, projected)),
        axis: (axis, centres, _axis_attrs(axis)),
        f"{axis}_top": (axis, tops, {"long_name": f"top of the slice window ({axis})",
                                     "units": unit}),
        f"{axis}_bottom": (axis, bottoms, {"long_name": f"bottom of the slice window ({axis})",
                                           "units": unit}),
    }
    attrs: dict[str, object] = {
        "long_name": f"{name} of the radar signal, window mean",
        "units": units,
        "cell_size": cell,
        "west": west,
        "north": north,
    }
    if velocity is not None:
        attrs["velocity"] = velocity
    attrs["processing"] = _as_text(processing)
    if pcrs is not None:
        transform = Affine(cell, 0.0, west, 0.0, -cell, north)
        coords[GRID_MAPPING] = ((), 0, _grid_mapping_attrs(pcrs, transform))
        attrs["grid_mapping"] = GRID_MAPPING
    return xr.DataArray(values, dims=(axis, Y, X), coords=coords, attrs=attrs, name=name)


def _plan_attrs(dim: str, projected: bool) -> dict[str, str]:
    word = "easting" if dim == X else "northing"
    attrs = {"long_name": f"{word} of the cell centre", "units": "m",
             "axis": dim.upper()}
    if projected:
        # CF 1.8 section 5.6: projected coordinates carry these standard names.
        attrs["standard_name"] = f"projection_{dim}_coordinate"
    return attrs


def _axis_attrs(axis: str) -> dict[str, str]:
    attrs = {"long_name": f"{_AXIS_LONG_NAME[axis]}, window centre", "units": UNITS[axis]}
    if axis == DEPTH:
        # CF 1.8 section 4.3: a vertical coordinate in length units needs ``positive``.
        attrs.update(standard_name="depth", positive="down", axis="Z")
    return attrs


def _grid_mapping_attrs(pcrs: pyproj.CRS, transform: Affine) -> dict[str, object]:
    # The same attributes rioxarray's write_crs/write_transform produce: the CF grid-mapping
    # parameters, WKT under both names (CF and GDAL), and GDAL's GeoTransform string.
    try:
        attrs: dict[str, object] = dict(pcrs.to_cf())
    except (KeyError, pyproj.exceptions.CRSError):
        attrs = {}
    wkt = pcrs.to_wkt()
    attrs["spatial_ref"] = wkt
    attrs["crs_wkt"] = wkt
    attrs["GeoTransform"] = " ".join(str(v) for v in transform.to_gdal())
    return attrs


def _grid_attr(cube: xr.DataArray, key: str) -> float:
    try:
        value = float(cube.attrs[key])
    except (KeyError, TypeError, ValueError):
        raise SettingsError(f"cube has no numeric attrs[{key!r}] (needed for the grid)",
                            where="cube") from None
    return value


def cube_transform(cube: xr.DataArray) -> Affine:
    """Return the north-up affine transform of ``cube`` (pixel corner -> CRS metres).

    Built from ``attrs["west"]``, ``attrs["north"]`` and ``attrs["cell_size"]`` exactly, never
    from coordinate differences (which lose digits at UTM magnitudes).
    """
    cell = _grid_attr(cube, "cell_size")
    if not cell > 0:
        raise SettingsError(f"cube cell_size must be positive, got {cell}", where="cube")
    return Affine(cell, 0.0, _grid_attr(cube, "west"), 0.0, -cell, _grid_attr(cube, "north"))


def _grid_mapping_name(cube: xr.DataArray) -> str:
    return str(cube.attrs.get("grid_mapping") or cube.encoding.get("grid_mapping")
               or GRID_MAPPING)


def cube_crs(cube: xr.DataArray) -> pyproj.CRS | None:
    """Return the CRS of ``cube`` from its grid-mapping coordinate, or None for a local grid."""
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


def write_cube_netcdf(cube: xr.DataArray, path: str | os.PathLike, *,
                      title: str | None = None, source: str | None = None,
                      history: str | None = None, complevel: int = 4) -> Path:
    """Write ``cube`` to a CF-1.8 NetCDF-4 file, atomically.

    Slice window bounds go into a ``<axis>_bnds`` variable (CF 1.8 section 7.1) besides the
    ``<axis>_top``/``<axis>_bottom`` coordinates; the data are float32, zlib-compressed, with a
    NaN ``_FillValue``; the grid-mapping variable keeps the CF attributes and ``crs_wkt``.

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`new_cube`.
    path : path-like
        Output file (``.nc``).
    title, source, history : str, optional
        Global attributes; sensible defaults are written when omitted.
    complevel : int
        zlib compression level, 1-9.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    OutputError
        If the file cannot be written; an existing file of that name is then left as it was.
    """
    axis = slice_axis(cube)
    path = Path(path)
    name = str(cube.name or "envelope")
    data = cube.astype(np.float32)
    data.name = name
    # grid_mapping may sit in encoding (rioxarray, decode_coords="all") or attrs; xarray
    # refuses it in both, and an explicit encoding would drop it (stack-notes trap 6).
    data.attrs.pop("grid_mapping", None)
    grid_mapping = cube.attrs.get("grid_mapping") or cube.encoding.get("grid_mapping")
    encoding = {k: v for k, v in cube.encoding.items() if k in _NC_ENCODING_KEYS}
    chunks = encoding.get("chunksizes")
    if chunks is not None and (len(chunks) != cube.ndim
                               or any(c > n for c, n in zip(chunks, cube.shape, strict=False))):
        # Chunks remembered from a larger cube (before isel) no longer fit.
        del encoding["chunksizes"]
    encoding.update(zlib=True, complevel=int(complevel), shuffle=True, dtype="float32",
                    _FillValue=np.float32(np.nan))
    data.encoding = {}
    if grid_mapping and grid_mapping in data.coords:
        data.attrs["grid_mapping"] = grid_mapping
    ds = data.to_dataset()
    bnds = f"{axis}_bnds"
    ds[bnds] = xr.Variable(
        (axis, "bnds"), np.stack([cube[f"{axis}_top"].values, cube[f"{axis}_bottom"].values],
                                 axis=1).astype(np.float64),
        attrs={"units": UNITS[axis]})
    ds[axis].attrs["bounds"] = bnds
    now = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    steps = data.attrs.get("processing", "")
    ds.attrs = {
        "Conventions": "CF-1.8",
        "title": title or f"Ground-penetrating radar {axis} slices ({name})",
        "history": history or f"{now}: cube written by slicer"
                              + (f" after: {steps}" if steps else ""),
        "source": source or "ground-penetrating radar grid survey, gridded by slicer",
    }
    encodings: dict[str, Mapping[str, object]] = {name: encoding}
    for var in (X, Y, axis, f"{axis}_top", f"{axis}_bottom", bnds):
        # Coordinates and bounds never hold missing values (CF 1.8 section 5).
        encodings[var] = {"_FillValue": None, "dtype": "float64"}
    try:
        with atomic_path(path) as tmp:
            ds.to_netcdf(tmp, engine="h5netcdf", format="NETCDF4", encoding=encodings)
    except OSError as exc:
        raise OutputError(f"cannot write NetCDF ({exc})", where=str(path)) from None
    return path


def read_cube_netcdf(path: str | os.PathLike, *, name: str | None = None) -> xr.DataArray:
    """Read a cube written by :func:`write_cube_netcdf` into memory (the file is closed).

    Parameters
    ----------
    path : path-like
        The NetCDF file.
    name : str, optional
        Variable to read; by default the one 3-D variable with dims (depth|twt, y, x).

    Raises
    ------
    InputFileError
        If the file cannot be opened or holds no cube.
    """
    path = Path(path)
    try:
        ds = xr.open_dataset(path, engine="h5netcdf", decode_timedelta=False)
    except (OSError, ValueError) as exc:
        raise InputFileError(f"cannot open as NetCDF ({exc})", where=str(path)) from None
    with ds:
        if name is None:
            found = [v for v, da in ds.data_vars.items()
                     if da.ndim == 3 and da.dims[0] in (DEPTH, TWT) and da.dims[1:] == (Y, X)]
            if len(found) != 1:
                raise InputFileError(f"expected one (depth|twt, y, x) variable, found {found}",
                                     where=str(path))
            name = str(found[0])
        if name not in ds.data_vars:
            raise InputFileError(f"no variable {name!r}", where=str(path))
        cube = ds[name].load()
    axis = cube.dims[0]
    if axis in cube.coords:
        cube[axis].attrs.pop("bounds", None)
    for key in (f"{axis}_top", f"{axis}_bottom"):
        if key not in cube.coords:
            raise InputFileError(f"cube has no {key!r} coordinate", where=str(path))
    if "grid_mapping" in cube.encoding and "grid_mapping" not in cube.attrs:
        cube.attrs["grid_mapping"] = cube.encoding.pop("grid_mapping")
    return cube
