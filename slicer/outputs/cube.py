"""The cube of slices: building it, its grid and CRS, and the CF NetCDF file.

The cube follows the data model in DEVELOPERS.md: an ``envelope`` DataArray with dims
``(depth, y, x)`` (or ``(twt, y, x)``), float32, NaN where nothing was measured, cell-centre
coordinates, window bounds on the slice dim, and a scalar ``spatial_ref`` coordinate laid out
the way rioxarray and GDAL read it.  The grid corner and cell size live in attrs so that every
writer builds the affine transform exactly instead of re-deriving it from float coordinates.
The CF attributes are made in :mod:`slicer.outputs.cf`; the slice dim's index, which selects
by window, in :mod:`slicer.outputs.cube_index`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
from affine import Affine

from slicer.core.atomic import GuardedFile, atomic_path, refuse_existing
from slicer.core.conventions import C_M_PER_NS, DEPTH, ELEVATION, TWT, UNITS, X, Y
from slicer.core.errors import InputFileError, OutputError, SettingsError
from slicer.outputs import cf
from slicer.outputs.cf import GRID_MAPPING
from slicer.outputs.cube_grid import (  # noqa: F401 - public here too
    aligned,
    cube_crs,
    cube_transform,
)

if TYPE_CHECKING:
    import xarray as xr

#: The slice dims a cube may have.
AXES = (DEPTH, TWT, ELEVATION)

#: Encoding keys the h5netcdf backend accepts; anything else left over from a read is dropped.
_NC_ENCODING_KEYS = frozenset({
    "zlib", "complevel", "shuffle", "fletcher32", "contiguous", "chunksizes", "_FillValue",
    "dtype", "compression", "compression_opts", "endian",
})

#: Default tile edge, cells: the unit in which large cubes are produced and written.
TILE = 256


def _check_axis(axis: str) -> str:
    if axis not in AXES:
        raise SettingsError(f"slice axis must be {DEPTH!r}, {TWT!r} or {ELEVATION!r}, not "
                            f"{axis!r}", where="axis")
    return axis


def slice_axis(cube: xr.DataArray) -> str:
    """Return the name of the slice dimension of ``cube``: ``"depth"``, ``"twt"`` or
    ``"elevation"``."""
    import xarray as xr  # loaded already wherever a cube exists
    if not isinstance(cube, xr.DataArray):
        raise SettingsError(f"expected a cube (an xarray.DataArray), got {type(cube).__name__}",
                            where="cube")
    axis = cube.dims[0] if cube.ndim == 3 else None
    if axis not in AXES or cube.dims[1:] != (Y, X):
        raise SettingsError(f"a cube has dims (depth|twt|elevation, y, x), not {cube.dims}",
                            where="cube")
    return str(axis)


def _as_text(value: str | Sequence[str]) -> str:
    # Lists never go into attrs (DEVELOPERS.md): a sequence of steps becomes one string.
    return value if isinstance(value, str) else "; ".join(str(v) for v in value)


def new_cube(data, *, west: float, north: float, cell: float, crs, top, bottom,
             axis: str = DEPTH, velocity: float | None = None,
             processing: str | Sequence[str] = "", name: str = "envelope",
             units: str = "1", vertical_datum: str | None = None,
             accessor: bool = True) -> xr.DataArray:
    """Build a cube DataArray following the data model in DEVELOPERS.md.

    Parameters
    ----------
    data : array-like or dask array, shape (n_slices, ny, nx)
        Slice values (converted to float32), NaN where no trace lies within reach. Row 0 is the
        northern edge (north-up grid). A dask array stays lazy (nothing is computed).
    west, north : float
        Upper-left grid corner in the survey CRS, m.
    cell : float
        Square cell edge length, m; must be positive.
    crs : anything ``pyproj.CRS`` accepts, or None
        The survey CRS (e.g. ``"EPSG:32633"``). None means a local engineering grid: the cube
        then has no ``spatial_ref`` coordinate.
    top, bottom : array-like, shape (n_slices,)
        Slice window bounds ``[top, bottom)``, m for depth or ns for two-way time, or
        ``(bottom, top]`` in m above a vertical datum for elevation. Every top must lie above
        its bottom (``top < bottom`` in depth and time, ``top > bottom`` in elevation) and the
        slices go downwards: window centres increase strictly (decrease, in elevation).
    axis : {"depth", "twt", "elevation"}
        Slice dimension.
    velocity : float, optional
        Radar velocity used for time-to-depth conversion, m/ns (0 < v <= c).
    processing : str or sequence of str
        The processing steps applied, stored as one ``"; "``-joined string.
    name : str
        Name of the DataArray.
    units : str
        Units of the slice values (amplitude units; ``"1"`` when dimensionless).
    vertical_datum : str, optional
        The datum elevations refer to, as the user named it (``attrs["vertical_datum"]``);
        required for elevation slices, refused for others.
    accessor : bool
        Register rioxarray's ``.rio`` accessor (imports rioxarray: 0.1 s the first time).
        False for a cube only slicer's writers see, such as a build's template.

    Returns
    -------
    xarray.DataArray
        Dims ``(axis, y, x)``, float32, NaN as nodata (``encoding["_FillValue"]``, which
        rioxarray reads as ``cube.rio.nodata``); the ``.rio`` accessor of rioxarray is
        registered (with ``accessor``). The slice dim carries a
        :class:`slicer.outputs.cube_index.WindowIndex`: ``cube.sel(depth=v)`` picks the slice
        whose window ``[top, bottom)`` holds ``v``.

    Raises
    ------
    SettingsError
        If the cell, windows, velocity, CRS or shapes are invalid.
    """
    import dask
    import pyproj
    import xarray as xr
    axis = _check_axis(axis)
    lazy = dask.is_dask_collection(data)
    values = data.astype(np.float32) if lazy else np.asarray(data, dtype=np.float32)
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
    down = 1.0 if axis != ELEVATION else -1.0  # elevation counts up
    bad = np.flatnonzero(down * (bottoms - tops) <= 0)
    if bad.size:
        i = int(bad[0])
        raise SettingsError(f"slice {i}: top {tops[i]} is not above bottom {bottoms[i]}",
                            where="top/bottom")
    centres = (tops + bottoms) / 2
    if np.any(down * np.diff(centres) <= 0):
        raise SettingsError("slice windows must go downwards (sorted by increasing depth or "
                            "time, decreasing elevation)", where="top/bottom")
    if (axis == ELEVATION) != (vertical_datum is not None and bool(str(vertical_datum).strip())):
        raise SettingsError("elevation slices need the vertical datum their elevations refer to, "
                            "and only they have one", where="vertical_datum")
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
    xs = west + cell * (np.arange(nx) + 0.5)
    ys = north - cell * (np.arange(ny) + 0.5)
    coords: dict[str, object] = {
        X: (X, xs, cf.plan_attrs(X)),
        Y: (Y, ys, cf.plan_attrs(Y)),
        axis: (axis, centres, cf.axis_attrs(axis)),
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
        **({"velocity": velocity} if velocity is not None else {}),
        "processing": _as_text(processing),
        **({"vertical_datum": str(vertical_datum)} if vertical_datum is not None else {}),
    }
    if pcrs is not None:
        transform = Affine(cell, 0.0, west, 0.0, -cell, north)
        coords[GRID_MAPPING] = cf.grid_mapping_variable(pcrs, transform)
        attrs["grid_mapping"] = GRID_MAPPING
    cube = xr.DataArray(values, dims=(axis, Y, X), coords=coords, attrs=attrs, name=name)
    return for_python(cube) if accessor else _with_windows_and_nodata(cube)


def for_python(cube: xr.DataArray) -> xr.DataArray:
    """Return ``cube`` ready for use in Python: the window index, NaN nodata, ``.rio``.

    The cube every public function hands out (from :func:`new_cube` and the readers) goes
    through here, so ``cube.rio.crs``, ``cube.rio.to_raster(...)`` and ``cube.rio.nodata``
    work without the caller importing rioxarray, and selection by depth follows the windows.
    """
    # here: rioxarray loads rasterio, which the quick commands never pay for (test_architecture)
    import rioxarray  # noqa: F401  (registers the .rio accessor)

    return _with_windows_and_nodata(cube)


def _with_windows_and_nodata(cube: xr.DataArray) -> xr.DataArray:
    from slicer.outputs.cube_index import index_windows  # an xarray Index: xarray loaded
    cube = index_windows(cube)
    # NaN marks empty cells (DEVELOPERS.md); as an encoded fill value rioxarray reports it as
    # both encoded_nodata and nodata, and every writer stores it as _FillValue.
    cube.encoding["_FillValue"] = np.float32(np.nan)
    return cube


def empty_cube(shape: tuple[int, int, int], *, tile: int = TILE, **kwargs) -> xr.DataArray:
    """Return a cube of the given shape whose values are all NaN, held lazily (dask).

    It describes a cube before its values exist: the grid, CRS, windows and attrs of
    :func:`new_cube`, with nothing allocated, so it can stand for a cube larger than memory
    (e.g. as the template of :class:`slicer.outputs.sink.CubeSink`, made with
    ``accessor=False``).

    Parameters
    ----------
    shape : (int, int, int)
        ``(n_slices, ny, nx)``.
    tile : int
        Chunk edge along y and x, cells (one slice per chunk).
    **kwargs
        Everything else :func:`new_cube` takes (``west``, ``north``, ``cell``, ``crs``,
        ``top``, ``bottom``, ...).
    """
    shape = tuple(int(n) for n in shape)
    if len(shape) != 3:
        raise SettingsError(f"a cube shape is (n_slices, ny, nx), got {shape}", where="shape")
    tile = _check_tile_size(tile)
    import dask.array as darray  # here: 0.13-0.4 s to import, which a worker need not pay
    values = darray.full(shape, np.nan, dtype=np.float32, chunks=(1, tile, tile))
    return new_cube(values, **kwargs)


def _check_tile_size(tile: int) -> int:
    try:
        size = int(tile)
    except (TypeError, ValueError):
        size = 0
    if size < 1 or size != tile:
        raise SettingsError(f"tile must be a positive whole number of cells, got {tile!r}",
                            where="tile")
    return size


def check_tile(block, shape: tuple[int, ...], row0: int, col0: int) -> np.ndarray:
    """Return ``block`` as a float32 array after checking it fits a cube of ``shape``.

    Parameters
    ----------
    block : array-like, shape (n_slices, h, w)
        Values of every slice over rows ``row0 .. row0 + h`` and columns ``col0 .. col0 + w``.
    shape : (int, int, int)
        Shape of the whole cube, ``(n_slices, ny, nx)``.
    row0, col0 : int
        Grid row and column of the tile's upper-left cell (0 is the north-west corner).

    Raises
    ------
    SettingsError
        If the block is not 3-D, has the wrong number of slices or reaches outside the grid.
    """
    values = np.asarray(block, dtype=np.float32)
    n_slices, ny, nx = shape
    if values.ndim != 3 or values.shape[0] != n_slices:
        raise SettingsError(f"a tile has shape ({n_slices}, rows, columns), got {values.shape}",
                            where="tile")
    row0, col0 = int(row0), int(col0)
    h, w = values.shape[1:]
    if row0 < 0 or col0 < 0 or row0 + h > ny or col0 + w > nx or h == 0 or w == 0:
        raise SettingsError(f"tile rows {row0}..{row0 + h}, columns {col0}..{col0 + w} "
                            f"do not lie inside the {ny} x {nx} grid", where="tile")
    return values


def prepared_for_writing(cube: xr.DataArray) -> xr.DataArray:
    """Return ``cube`` as float32 with ``grid_mapping`` in attrs and no stale encoding.

    ``grid_mapping`` may sit in encoding (rioxarray, ``decode_coords="all"``) or in attrs; an
    explicit encoding would drop it (stack-notes trap 6), so it is always put in attrs. Data
    that is lazy (dask) stays lazy.
    """
    slice_axis(cube)
    data = cube.astype(np.float32).rename(str(cube.name or "envelope"))
    grid_mapping = cube.attrs.get("grid_mapping") or cube.encoding.get("grid_mapping")
    data.attrs.pop("grid_mapping", None)
    data.encoding = {}
    if grid_mapping and grid_mapping in data.coords:
        data.attrs["grid_mapping"] = grid_mapping
    return data


def global_attrs(cube: xr.DataArray, *, title: str | None = None, source: str | None = None,
                 history: str | None = None) -> dict[str, str]:
    """Return the CF-1.8 global attributes of a file holding ``cube``."""
    return cf.global_attrs(str(cube.name or "envelope"), slice_axis(cube),
                           processing=str(cube.attrs.get("processing", "")), title=title,
                           source=source, history=history)


def _netcdf_chunks(cube: xr.DataArray) -> tuple[int, ...] | None:
    if cube.chunks is not None:
        # One HDF5 chunk per dask chunk: each dask task then fills whole chunks, never half
        # of one, which HDF5 would have to read back and recompress.
        return tuple(int(c[0]) for c in cube.chunks)
    chunks = cube.encoding.get("chunksizes")
    if chunks is None or len(chunks) != cube.ndim or any(
            c > n for c, n in zip(chunks, cube.shape, strict=False)):
        return None  # none, or remembered from a larger cube (before isel): no longer fits
    return tuple(chunks)


def _write_netcdf(cube: xr.DataArray, target: Path, *, title: str | None,
                  source: str | None, history: str | None, complevel: int) -> None:
    # The one NetCDF writer, for in-memory and dask-backed cubes alike: xarray hands dask
    # data to the file chunk by chunk, so a lazy cube is never loaded whole.
    axis = slice_axis(cube)
    data = prepared_for_writing(cube)
    name = str(data.name)
    encoding: dict[str, object] = {k: v for k, v in cube.encoding.items()
                                   if k in _NC_ENCODING_KEYS}
    encoding.pop("chunksizes", None)
    chunks = _netcdf_chunks(cube)
    if chunks is not None:
        encoding["chunksizes"] = chunks
    encoding.update(zlib=True, complevel=int(complevel), shuffle=True, dtype="float32",
                    _FillValue=np.float32(np.nan))
    ds = data.to_dataset()
    bnds = cf.add_axis_bounds(ds, axis)
    ds.attrs = global_attrs(cube, title=title, source=source, history=history)
    encodings: dict[str, Mapping[str, object]] = {name: encoding}
    for var in (X, Y, axis, f"{axis}_top", f"{axis}_bottom", bnds):
        # Coordinates and bounds never hold missing values (CF 1.8 section 5).
        encodings[var] = {"_FillValue": None, "dtype": "float64"}
    # HDF5 must never see a failed write (full disk): closing its file again crashed at exit
    with GuardedFile(target) as f:
        ds.to_netcdf(f, engine="h5netcdf", format="NETCDF4", encoding=encodings)
        f.check()


def write_cube_netcdf(cube: xr.DataArray, path: str | os.PathLike, *,
                      title: str | None = None, source: str | None = None,
                      history: str | None = None, complevel: int = 4,
                      overwrite: bool = False) -> Path:
    """Write ``cube`` to a CF-1.8 NetCDF-4 file, atomically.

    Slice window bounds go into a ``<axis>_bnds`` variable (CF 1.8 section 7.1) besides the
    ``<axis>_top``/``<axis>_bottom`` coordinates; the data are float32, zlib-compressed, with a
    NaN ``_FillValue``; the grid-mapping variable keeps the CF attributes and ``crs_wkt``.
    A dask-backed cube (e.g. from :func:`slicer.outputs.zarr_store.open_cube_zarr`) is written
    chunk by chunk, one NetCDF chunk per dask chunk, without loading it whole.

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`new_cube`, in memory or dask-backed.
    path : path-like
        Output file (``.nc``).
    title, source, history : str, optional
        Global attributes; sensible defaults are written when omitted.
    complevel : int
        zlib compression level, 1-9.
    overwrite : bool
        Replace an existing file of that name; without it the file is refused (OutputError)
        and left as it was.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    OutputError
        If the file cannot be written, or exists and ``overwrite`` is false; an existing file
        of that name is then left as it was.
    """
    slice_axis(cube)
    cube = aligned(cube)
    path = refuse_existing(path, overwrite=overwrite)
    try:
        with atomic_path(path, overwrite=overwrite) as tmp:
            _write_netcdf(cube, tmp, title=title, source=source, history=history,
                          complevel=complevel)
    except OSError as exc:
        raise OutputError(f"cannot write NetCDF ({exc.strerror or exc})", where=str(path)) from None
    return path


def read_cube_netcdf(path: str | os.PathLike, *, name: str | None = None) -> xr.DataArray:
    """Read a cube written by :func:`write_cube_netcdf` into memory (the file is closed).

    Parameters
    ----------
    path : path-like
        The NetCDF file.
    name : str, optional
        Variable to read; by default the one 3-D variable with dims (depth|twt|elevation, y, x).

    Returns
    -------
    xarray.DataArray
        The cube, loaded, dims ``(axis, y, x)`` (axis depth, twt or elevation), ready for
        use as :func:`new_cube` makes it (window index, NaN nodata, ``.rio``).

    Raises
    ------
    InputFileError
        If the file cannot be opened or holds no cube.
    """
    import xarray as xr
    path = Path(path)
    try:
        ds = xr.open_dataset(path, engine="h5netcdf", decode_timedelta=False)
    except (OSError, ValueError) as exc:
        raise InputFileError(f"cannot open as NetCDF ({exc})", where=str(path)) from None
    with ds:
        cube = cube_from_dataset(ds, name=name, where=str(path)).load()
    return cube


def cube_from_dataset(ds: xr.Dataset, *, name: str | None = None,
                      where: str = "dataset") -> xr.DataArray:
    """Return the cube held in ``ds`` (as written by slicer), following the data model.

    The CF ``bounds`` link (the bounds themselves are the ``<axis>_top``/``<axis>_bottom``
    coordinates) and GDAL's ``_CRS`` attribute are dropped, ``grid_mapping`` goes back
    to attrs, and the cube is made ready for Python (:func:`for_python`: the window index,
    NaN nodata, ``.rio``). Lazy data stays lazy.

    Raises
    ------
    InputFileError
        If ``ds`` holds no cube, naming ``where``.
    """
    if name is None:
        found = [v for v, da in ds.data_vars.items()
                 if da.ndim == 3 and da.dims[0] in AXES and da.dims[1:] == (Y, X)]
        if len(found) != 1:
            raise InputFileError(f"expected one (depth|twt|elevation, y, x) variable, found "
                                 f"{found}", where=where)
        name = str(found[0])
    if name not in ds.data_vars:
        raise InputFileError(f"no variable {name!r}", where=where)
    cube = ds[name]
    cube.attrs.pop("_CRS", None)
    axis = cube.dims[0]
    if axis in cube.coords:
        cube[axis].attrs.pop("bounds", None)
    for key in (f"{axis}_top", f"{axis}_bottom"):
        if key not in cube.coords:
            raise InputFileError(f"cube has no {key!r} coordinate", where=where)
    if "grid_mapping" in cube.encoding and "grid_mapping" not in cube.attrs:
        cube.attrs["grid_mapping"] = cube.encoding.pop("grid_mapping")
    return for_python(cube)
