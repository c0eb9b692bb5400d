"""One single-band GeoTIFF per slice, written with rasterio.

Each file is a Cloud Optimized GeoTIFF (:mod:`slicer.outputs.cog`) holding one slice as float32
with NaN nodata, the cube's CRS and its exact transform (from the grid corner and cell size,
never from coordinates), tiled and DEFLATE-compressed with the floating-point predictor, with
averaged overviews when the slice is larger than one block. The window bounds travel in GDAL
metadata tags and in the band description, because a GeoTIFF has no place for a depth
coordinate. Tags, description and unit are set before any pixel is written: set afterwards, they
made GDAL rewrite the header at the end of the file, which no longer was a COG.
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import os
import shutil
import sys
import threading
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.atomic import put_new, refuse_existing, temp_file
from slicer.core.conventions import DEPTH, ELEVATION, TWT, UNITS
from slicer.core.errors import OutputError, SettingsError
from slicer.core.progress import progress_bar
from slicer.outputs.cog import (
    TILE,
    cog_profile,
    copy_to_cog,
    staging_profile,
    write_cog,
)
from slicer.outputs.cube import check_tile, cube_crs, cube_transform, slice_axis

if TYPE_CHECKING:
    import xarray as xr

#: Decimals of the window bounds in file names and band descriptions (mm, hundredths of ns).
_DECIMALS = {DEPTH: 3, TWT: 2, ELEVATION: 3}


def slice_file_name(index: int, top: float, bottom: float, *, axis: str = DEPTH,
                    digits: int = 3) -> str:
    """Return the GeoTIFF file name of one slice, e.g. ``slice_003_0.300-0.400m.tif``.

    The zero-padded index comes first, so names sort like the slices (by depth or time) as long
    as ``digits`` covers the largest index.

    Parameters
    ----------
    index : int
        Position of the slice in the cube (0-based, >= 0).
    top, bottom : float
        Window bounds: m for depth and elevation, ns for two-way time.
    axis : {"depth", "twt", "elevation"}
        Slice dimension; selects the unit written into the name.
    digits : int
        Minimum width of the zero-padded index.

    Returns
    -------
    str
        A bare file name; bounds with 3 decimals in m or 2 in ns, then the unit.
    """
    if axis not in _DECIMALS:
        raise SettingsError(f"slice axis must be one of {', '.join(_DECIMALS)}, not {axis!r}",
                            where="axis")
    if int(index) < 0:
        raise SettingsError(f"slice index must be >= 0, got {index}", where="index")
    dec = _DECIMALS[axis]
    return (f"slice_{int(index):0{int(digits)}d}_{float(top):.{dec}f}-{float(bottom):.{dec}f}"
            f"{UNITS[axis]}.tif")


def _number(value: float) -> str:
    return f"{float(value):.10g}"


def _tag_text(value) -> str:
    if isinstance(value, str):
        return value
    if isinstance(value, Sequence):
        return "; ".join(str(v) for v in value)
    return str(value)


def _rasterio_crs(cube: xr.DataArray) -> str | None:
    """The cube's CRS as rasterio takes it in a profile (``CRS.from_user_input``): its EPSG
    code, which gives GDAL a plain ProjectedCRSGeoKey, or else its full WKT. A string, not a
    ``rasterio.crs.CRS``: the profiles are made where no file may be written (a build's
    calling process, which leaves rasterio to its workers)."""
    pcrs = cube_crs(cube)
    if pcrs is None:
        return None
    code = pcrs.to_epsg()
    return f"EPSG:{code}" if code else pcrs.to_wkt()


def _write_errors() -> tuple[type[BaseException], ...]:
    """What a failed GeoTIFF write raises: OSError, and rasterio's and GDAL's errors once
    rasterio is loaded (none can be raised before)."""
    if "rasterio" not in sys.modules:
        return (OSError,)
    from rasterio._err import CPLE_BaseError  # what a failed GDAL copy raises (rasterio 1.4)
    from rasterio.errors import RasterioError
    return (OSError, RasterioError, CPLE_BaseError)


_QUIET = threading.Lock()
_quiet: dict = {"depth": 0, "saved": [], "setters": None}


def _libtiff_setters() -> list:
    """``TIFFSetErrorHandler`` of every libtiff loaded in this process (found once; Linux)."""
    if _quiet["setters"] is None:
        setters = []
        with contextlib.suppress(OSError):
            with open("/proc/self/maps", encoding="utf-8", errors="replace") as f:
                paths = sorted({line.split(maxsplit=5)[-1].strip() for line in f
                                if "/libtiff" in line})
            for path in paths:
                with contextlib.suppress(OSError, AttributeError):
                    setter = ctypes.CDLL(path).TIFFSetErrorHandler
                    setter.restype, setter.argtypes = ctypes.c_void_p, [ctypes.c_void_p]
                    setters.append(setter)
        _quiet["setters"] = setters
    return _quiet["setters"]


@contextlib.contextmanager
def _quiet_libtiff():
    """Mute libtiff's process-wide error handler while slicer's GeoTIFFs are written.

    GDAL 3.10 reports a failed write or seek of a GeoTIFF (a full disk) twice: as the error
    rasterio raises, which names the file here, and through libtiff's default handler, which
    prints a line per failed block straight to stderr, hundreds of them on a full disk. That
    handler is set aside meanwhile (``TIFFSetErrorHandler``; on Linux, where the libtiff GDAL
    loaded is found in ``/proc/self/maps``; elsewhere nothing changes). Nested and concurrent
    uses share one muting.
    """
    import rasterio  # noqa: F401 - loads GDAL and its libtiff first, so that they are found
    with _QUIET:
        if _quiet["depth"] == 0:
            _quiet["saved"] = [(setter, setter(None)) for setter in _libtiff_setters()]
        _quiet["depth"] += 1
    try:
        yield
    finally:
        with _QUIET:
            _quiet["depth"] -= 1
            if _quiet["depth"] == 0:
                for setter, previous in _quiet["saved"]:
                    setter(previous)


class SliceTiffWriter:
    """One temporary COG per slice, filled window by window, renamed into place at the end.

    Each file is a Cloud Optimized GeoTIFF, float32 with NaN nodata, the cube's CRS and exact
    transform, DEFLATE with the floating-point predictor, averaged overviews when the slice is
    larger than one block, and the tags and band description described in
    :func:`write_slice_geotiffs`. Windows go to an uncompressed tiled GeoTIFF per slice first
    (a COG cannot be written piecemeal); :meth:`close` copies each into the COG layout with
    :func:`slicer.outputs.cog.copy_to_cog`, one at a time, and removes it. Files are written
    under hidden temporary names beside their final names (:func:`slice_file_name`);
    :meth:`commit` renames them all. Leaving the ``with`` block on an exception removes every
    temporary file and leaves the final names as they were.

    Parameters
    ----------
    cube : xarray.DataArray
        The cube, or any template of it (grid, windows, CRS, attrs; values are not read).
    folder : path-like
        Output folder; created if missing.
    tags : mapping, optional
        Extra dataset-level metadata tags.
    tile : int
        Edge of the windows that will be written, cells; the TIFF blocks are chosen to divide
        it (multiples of 16, at most 512).
    deferred : bool
        Only reserve the temporary names: each file is then written whole, by
        :meth:`write_slice` or by :func:`write_slice_file` with a job from :meth:`slice_job`
        (in any process), and :meth:`commit` renames them as usual.
    """

    def __init__(self, cube: xr.DataArray, folder: str | os.PathLike, *,
                 tags: Mapping[str, object] | None = None, tile: int = TILE,
                 deferred: bool = False):
        axis = slice_axis(cube)
        tile = int(tile)
        if tile < 1:
            raise SettingsError(f"tile must be a positive number of cells, got {tile}",
                                where="tile")
        self.folder = Path(folder)
        if self.folder.exists() and not self.folder.is_dir():
            raise OutputError("output path is a file, not a folder", where=str(self.folder))
        self._created = [p for p in (self.folder, *self.folder.parents) if not p.exists()]
        try:
            self.folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"cannot create output folder ({exc.strerror})",
                              where=str(self.folder)) from None
        self.shape = tuple(cube.shape)
        n_slices, ny, nx = self.shape
        unit, dec = UNITS[axis], _DECIMALS[axis]
        digits = max(3, len(str(n_slices - 1)))
        tops = np.asarray(cube[f"{axis}_top"].values, dtype=np.float64)
        bottoms = np.asarray(cube[f"{axis}_bottom"].values, dtype=np.float64)
        common = {
            "UNITS": str(cube.attrs.get("units", "")),
            "PROCESSING": _tag_text(cube.attrs.get("processing", "")),
        }
        if axis in (DEPTH, ELEVATION) and cube.attrs.get("velocity") is not None:
            common["VELOCITY_M_PER_NS"] = _number(cube.attrs["velocity"])
        if cube.attrs.get("vertical_datum"):
            common["VERTICAL_DATUM"] = _tag_text(cube.attrs["vertical_datum"])
        extra = {str(k): _tag_text(v) for k, v in (tags or {}).items()}
        base = {"width": nx, "height": ny, "count": 1, "dtype": "float32",
                "crs": _rasterio_crs(cube), "transform": cube_transform(cube), "nodata": np.nan}
        self._profile = cog_profile(base, tile=tile)
        self._staging = staging_profile(base, tile=tile)
        self.paths: list[Path] = []
        self._tags: list[dict[str, str]] = []
        self._descriptions: list[str] = []
        for i in range(n_slices):
            top, bottom = float(tops[i]), float(bottoms[i])
            self.paths.append(self.folder / slice_file_name(i, top, bottom, axis=axis,
                                                            digits=digits))
            per_slice = {f"{axis.upper()}_TOP": _number(top),
                         f"{axis.upper()}_BOTTOM": _number(bottom)}
            if "depth_error" in cube.coords:  # one-sigma depth error from the velocity's std
                per_slice["DEPTH_ERROR_M"] = _number(float(cube["depth_error"].values[i]))
            self._tags.append({**per_slice, **common, **extra})
            self._descriptions.append(f"{axis} {top:.{dec}f}-{bottom:.{dec}f} {unit}")
        self._units = common["UNITS"]
        self._temps: list[Path] = []
        self._staged: list[Path] = []  # the uncompressed GeoTIFFs windows are written to
        self._datasets: list = []
        self._state = "open"
        try:
            for path, tags, description in zip(self.paths, self._tags, self._descriptions,
                                               strict=True):
                tmp = temp_file(self.folder, prefix=f".{path.stem}.", suffix=f".tmp{path.suffix}")
                self._temps.append(tmp)
                if deferred:
                    continue
                self._staged.append(temp_file(self.folder, prefix=f".{path.stem}.",
                                              suffix=f".part{path.suffix}"))
                with self._naming(path, gdal=True):
                    import rasterio
                    self._datasets.append(rasterio.open(self._staged[-1], "w", **self._staging))
                    _label(self._datasets[-1], tags, description, self._units)
        except BaseException:
            self.abort()
            raise

    @property
    def block_shape(self) -> tuple[int, int]:
        """(rows, columns) of the TIFF blocks of the files."""
        return self._profile["blocksize"], self._profile["blocksize"]

    def __enter__(self) -> SliceTiffWriter:
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            if self._state != "committed":
                self.commit()
        else:
            self.abort()

    @staticmethod
    @contextlib.contextmanager
    def _naming(path: Path, *, gdal: bool = False):
        # A failing write names the final file, which is what the user knows of. With
        # ``gdal`` the block writes through GDAL, whose libtiff is muted (_quiet_libtiff); a
        # rename alone needs neither.
        try:
            with _quiet_libtiff() if gdal else contextlib.nullcontext():
                yield
        except _write_errors() as exc:
            reason = str(exc)
            with contextlib.suppress(OSError):  # libtiff's own words were muted: say them
                if shutil.disk_usage(path if path.is_dir() else path.parent).free == 0:
                    reason = os.strerror(errno.ENOSPC)
            raise OutputError(f"cannot write GeoTIFF ({reason})", where=str(path)) from None

    def _check_open(self) -> None:
        if self._state != "open":
            raise OutputError(f"the GeoTIFFs are already {self._state}", where=str(self.folder))

    def write_band(self, index: int, row0: int, col0: int, band) -> None:
        """Write a window of slice ``index``: ``band`` (h, w) at grid row/column ``row0, col0``."""
        self._check_open()
        values = np.asarray(band, dtype=np.float32)
        if values.ndim != 2:
            raise SettingsError(f"a band window is 2-D, got shape {values.shape}", where="tile")
        check_tile(values[None], (1, *self.shape[1:]), row0, col0)
        h, w = values.shape
        from rasterio.windows import Window
        with self._naming(self.paths[index], gdal=True):
            self._datasets[index].write(np.ascontiguousarray(values), 1,
                                        window=Window(int(col0), int(row0), w, h))

    def write(self, row0: int, col0: int, block) -> None:
        """Write one tile of every slice: ``block`` (n_slices, h, w) at ``row0, col0``."""
        self._check_open()
        values = check_tile(block, self.shape, row0, col0)
        for i in range(self.shape[0]):
            self.write_band(i, row0, col0, values[i])

    def write_slice(self, index: int, values) -> None:
        """Write slice ``index`` whole from ``values`` (ny, nx) (a ``deferred`` writer only)."""
        self._check_open()
        if self._datasets:
            raise OutputError("whole slices go to a deferred writer", where=str(self.folder))
        values = np.asarray(values, dtype=np.float32)
        if values.shape != self.shape[1:]:
            raise SettingsError(f"a slice has shape {self.shape[1:]}, got {values.shape}",
                                where="slice")
        write_slice_file(self.slice_job(index, self.folder), values)

    def slice_job(self, index: int, store: str | os.PathLike) -> SliceFileJob:
        """What :func:`write_slice_file` needs to write slice ``index`` from a Zarr store."""
        return SliceFileJob(str(Path(store).resolve()), index,
                            str(self._temps[index].resolve()), str(self.paths[index]),
                            dict(self._profile), self._tags[index], self._descriptions[index],
                            self._units)

    def close(self) -> None:
        """Finish the temporary files (COG layout, overviews) without renaming them."""
        if self._state == "closed":
            return
        self._check_open()
        try:
            # deferred: no datasets, the files were written whole by slice jobs
            for i, (path, dst) in enumerate(zip(self.paths, self._datasets, strict=False)):
                with self._naming(path, gdal=True):
                    import rasterio
                    with rasterio.Env():  # GDAL's errors to rasterio, not printed on stderr
                        dst.close()  # flushes the last blocks
                    copy_to_cog(self._staged[i], self._temps[i], self._profile)
                self._staged[i].unlink()
        except BaseException:
            self.abort()
            raise
        self._state = "closed"

    def commit(self, *, overwrite: bool = True) -> list[Path]:
        """Close the files and rename each to its final name; return the final paths.
        Without ``overwrite`` a file that took a final name meanwhile is not replaced
        (:func:`slicer.core.atomic.put_new`: OutputError)."""
        self.close()
        done = 0
        try:
            for tmp, path in zip(self._temps, self.paths, strict=True):
                with self._naming(path):
                    (os.replace if overwrite else put_new)(tmp, path)
                done += 1
        except BaseException:
            self._remove(self._temps[done:])
            self._state = "aborted"
            raise
        self._state = "committed"
        return list(self.paths)

    def abort(self) -> None:
        """Close and remove every temporary file; final names are left as they were."""
        if self._state in ("committed", "aborted"):
            return
        self._state = "aborted"
        # Under an Env, GDAL's errors (a full disk: one per file) go to rasterio, not stderr.
        # Without datasets (a deferred writer, or none opened yet) GDAL has nothing to close.
        if self._datasets:
            import rasterio
            with _quiet_libtiff(), rasterio.Env():
                for dst in self._datasets:
                    with contextlib.suppress(Exception):
                        dst.close()
        self._remove([*self._temps, *self._staged])
        for folder in self._created:  # innermost first; only folders this writer made
            with contextlib.suppress(OSError):
                folder.rmdir()

    @staticmethod
    def _remove(paths) -> None:
        for tmp in paths:
            with contextlib.suppress(FileNotFoundError):
                tmp.unlink()


def _label(dst, tags: Mapping[str, str], description: str, units: str) -> None:
    """Set the tags, band description and unit of a dataset just opened for writing.

    Before any pixel: set afterwards, they made GDAL rewrite the header at the end of the file
    (stack-notes trap 14), and ``rio cogeo validate`` refused it.
    """
    dst.update_tags(**tags)
    dst.set_band_description(1, description)
    dst.set_band_unit(1, units)


@dataclass(frozen=True)
class SliceFileJob:
    """One slice GeoTIFF to write from a Zarr cube store (picklable, for worker processes)."""

    store: str
    index: int
    temp: str
    final: str
    profile: dict
    tags: dict
    description: str
    units: str


def write_slice_file(job: SliceFileJob, values: np.ndarray | None = None) -> str:
    """Write one whole slice GeoTIFF (under its temporary name) from a Zarr cube store.

    ``values`` (ny, nx), if given, are the slice already read from the store. Returns the
    temporary path. Errors name the final file, which is what the user knows of. Memory: the
    slice and GDAL's copy of it.
    """
    if values is None:
        from slicer.outputs.zarr_store import read_slice
        values = read_slice(job.store, job.index)
    with SliceTiffWriter._naming(Path(job.final), gdal=True):
        write_cog(job.temp, values, job.profile,
                  label=lambda dst: _label(dst, job.tags, job.description, job.units))
    return job.temp


def tile_windows(shape: tuple[int, ...], tile: int):
    """Yield ``(row0, col0, h, w)`` of the tiles covering the plan grid of ``shape``, row-major."""
    ny, nx = shape[-2:]
    for row0 in range(0, ny, tile):
        for col0 in range(0, nx, tile):
            yield row0, col0, min(tile, ny - row0), min(tile, nx - col0)


def write_slice_geotiffs(cube: xr.DataArray, folder: str | os.PathLike, *,
                         tags: Mapping[str, object] | None = None,
                         progress: bool = True, overwrite: bool = False) -> list[Path]:
    """Write every slice of ``cube`` to its own GeoTIFF in ``folder``.

    Files are named by :func:`slice_file_name`; they are written under temporary names and
    renamed only when all are complete (:class:`SliceTiffWriter`), so existing files of the
    same name (replaced only with ``overwrite``) are replaced whole or not at all; nothing
    else in ``folder`` is touched.

    Each file carries GDAL metadata tags ``DEPTH_TOP``/``DEPTH_BOTTOM`` (m) and
    ``VELOCITY_M_PER_NS`` for depth slices, ``TWT_TOP``/``TWT_BOTTOM`` (ns) for time slices, or
    ``ELEVATION_TOP``/``ELEVATION_BOTTOM`` (m above the datum), ``VELOCITY_M_PER_NS`` and
    ``VERTICAL_DATUM`` (the cube's ``vertical_datum`` as given) for elevation slices; plus
    ``UNITS`` (of the values), ``PROCESSING`` and any extra ``tags``; the band description
    reads e.g. ``"depth 0.300-0.400 m"``.

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`slicer.outputs.cube.new_cube`; a dask-backed cube is read one
        slice at a time.
    folder : path-like
        Output folder; created if missing.
    tags : mapping, optional
        Extra dataset-level metadata tags (values converted to text, sequences joined with
        ``"; "``).
    progress : bool
        Show a tqdm progress bar.
    overwrite : bool
        Replace slice files of the same names; without it they are refused (OutputError)
        before anything is written.

    Returns
    -------
    list of pathlib.Path
        The files written, in slice order.

    Raises
    ------
    OutputError
        If ``folder`` is a file or cannot be created or written, or holds a file of a slice's
        name and ``overwrite`` is false.
    """
    axis = slice_axis(cube)
    data = cube.data
    with SliceTiffWriter(cube, folder, tags=tags, tile=TILE, deferred=True) as writer:
        for path in writer.paths:
            refuse_existing(path, overwrite=overwrite)
        for i in progress_bar(range(cube.shape[0]), desc=f"GeoTIFF {axis} slices",
                              unit="slice", enabled=progress):
            writer.write_slice(i, np.asarray(data[i]))  # one slice in memory at a time
        return writer.commit(overwrite=overwrite)
