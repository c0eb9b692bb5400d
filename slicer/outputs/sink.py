"""Where a build's cube goes: every output written tile by tile, committed all at once.

A cube larger than memory is produced one tile (a block of rows x columns of the grid, every
slice) at a time. :class:`CubeSink` hands each tile to the slice GeoTIFFs and the Zarr store,
all kept under temporary names. Once every tile is in, the CF NetCDF cube is written from the
finished store (on a thread of this process, or by a worker process) while the overview sheet
is drawn from decimated panels kept as the tiles went by, and only then is every file moved to
its final name. If anything fails on the way, every temporary file is removed and the final
names are left as they were, so a folder never holds a half-written output.

Layout of ``out_dir``::

    slices/slice_000_0.000-0.100m.tif ...   one GeoTIFF per slice
    cube.zarr/                               the cube, chunked (slice x tile x tile)
    cube.nc                                  the cube, CF-1.8 NetCDF-4
    overview.png                             every slice on one colour scale
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import os
from collections.abc import Callable, Mapping
from pathlib import Path

import dask
import numpy as np
import xarray as xr

from slicer.core.atomic import atomic_path, check_room
from slicer.core.errors import OutputError, SettingsError
from slicer.core.progress import progress_bar
from slicer.outputs.cube import TILE, _check_tile_size, _write_netcdf, check_tile, slice_axis
from slicer.outputs.figures import panel_stride, plot_overview
from slicer.outputs.geotiff import SliceTiffWriter, tile_windows
from slicer.outputs.zarr_store import ZARR_FORMAT, create_cube_store, open_cube_zarr

#: Names of the outputs inside ``out_dir``.
SLICES_DIR, ZARR_NAME, NETCDF_NAME, OVERVIEW_NAME = "slices", "cube.zarr", "cube.nc", "overview.png"
#: What a sink may write into ``out_dir``: names and patterns, relative POSIX paths.
OUTPUT_NAMES = (f"{SLICES_DIR}/slice_*.tif", ZARR_NAME, NETCDF_NAME, OVERVIEW_NAME)

#: Resolution of the overview sheet, dots per inch.
OVERVIEW_DPI = 150


class CubeSink:
    """Receive a cube tile by tile and write all of a build's cube outputs, atomically.

    Use it as a context manager; call :meth:`write` once per tile (any order, each cell at
    most once; cells never written stay NaN in every output). On a normal exit the outputs
    are finished and moved into place (see the module docstring for the layout) and
    :attr:`files` lists them; on an exception nothing is left but what was there before.

    Parameters
    ----------
    out_dir : path-like
        Output folder; created if missing. Only the outputs listed above are replaced.
    cube_template : xarray.DataArray
        The cube's grid, windows, CRS and attrs (e.g. :func:`slicer.outputs.cube.empty_cube`); its
        values are not read.
    tags : mapping, optional
        Extra metadata tags of every GeoTIFF.
    tile : int
        Tile edge, cells: a positive multiple of 16. Tiles written at multiples of ``tile``
        fill whole Zarr chunks and whole TIFF blocks.
    progress : bool
        Show a progress bar of the tiles written (on a terminal only).
    title : str, optional
        First line of the overview's title.
    zarr_format : {2, 3}
        Format of ``cube.zarr`` (see :mod:`slicer.outputs.zarr_store`).
    offload : callable, optional
        ``offload(func, *args) -> future`` running a picklable task in another process on
        this machine (a build's process pool or LocalCluster): the NetCDF cube is then
        written there, in parallel with the overview. By default it is written on a thread
        of this process, where it shares the GIL with the overview.

    Attributes
    ----------
    files : list of pathlib.Path
        After a successful exit: the GeoTIFFs in slice order, then ``cube.zarr``, ``cube.nc``
        and ``overview.png``.
    """

    def __init__(self, out_dir: str | os.PathLike, cube_template: xr.DataArray, *,
                 tags: Mapping[str, object] | None = None, tile: int = TILE,
                 progress: bool = True, title: str | None = None,
                 zarr_format: int = ZARR_FORMAT, offload: Callable | None = None):
        slice_axis(cube_template)
        tile = _check_tile_size(tile)
        if tile % 16:
            raise SettingsError(f"tile must be a multiple of 16 cells (TIFF blocks), got {tile}",
                                where="tile")
        self.out_dir = Path(out_dir)
        self.template = cube_template
        self.tile = tile
        self.shape = tuple(cube_template.shape)
        self.files: list[Path] = []
        self._tags = tags
        self._title = title
        self._progress = progress
        self._zarr_format = zarr_format
        self._tiffs: SliceTiffWriter | None = None
        # The overview's decimated slices, filled as tiles go by (see _keep_panels)
        self._stride = panel_stride(cube_template, dpi=OVERVIEW_DPI)
        n, ny, nx = self.shape
        self._panels = np.full((n, -(-ny // self._stride), -(-nx // self._stride)), np.nan,
                               dtype=np.float32)
        self._writer: concurrent.futures.ThreadPoolExecutor | None = None
        self._offload = offload
        self._store = None
        self._bar = None
        self._created = [p for p in (self.out_dir, *self.out_dir.parents) if not p.exists()]

    def __enter__(self) -> CubeSink:
        out = self.out_dir
        if out.exists() and not out.is_dir():
            raise OutputError("output path is a file, not a folder", where=str(out))
        try:
            out.mkdir(parents=True, exist_ok=True)
            self._tiffs = self._slice_writer()
            self._store = create_cube_store(out / ZARR_NAME, self.template, tile=self.tile,
                                            zarr_format=self._zarr_format)
        except BaseException:
            self._abort()
            raise
        n_tiles = sum(1 for _ in tile_windows(self.shape, self.tile))
        self._bar = progress_bar(total=n_tiles, desc="writing tiles", unit="tile",
                                 enabled=self._progress)
        return self

    def _slice_writer(self) -> SliceTiffWriter:
        return SliceTiffWriter(self.template, self.out_dir / SLICES_DIR, tags=self._tags,
                               tile=self.tile)

    def _start_netcdf(self, target: Path):
        """Start writing the NetCDF cube (temporary path ``target``) from the finished store.

        Returns a future. Without ``offload`` the file is written on a thread of this process
        while this thread draws the overview. Writing it from the finished store was faster
        than streaming it while the tiles arrived (benchmarks/netcdf_write.py).
        """
        if self._offload is not None:
            return self._offload(write_netcdf_from_store, str(self._store.path), str(target))
        pool = concurrent.futures.ThreadPoolExecutor(max_workers=1)
        try:
            return pool.submit(write_netcdf_from_store, str(self._store.path), str(target))
        finally:
            pool.shutdown(wait=False)

    def _draw_overview(self, png: Path):
        """Draw and save the overview to ``png`` (temporary path); a future if done elsewhere."""
        save_overview(self.template, self._panels, png, title=self._title,
                      where=str(self.out_dir / OVERVIEW_NAME))
        return None

    def write(self, row0: int, col0: int, block) -> None:
        """Write one tile: ``block`` (n_slices, h, w) of every slice at grid ``row0, col0``.

        Raises
        ------
        SettingsError
            If the block does not fit the grid.
        OutputError
            If a file cannot be written.
        """
        if self._store is None:
            raise OutputError("the sink is not open (use it in a with block)",
                              where=str(self.out_dir))
        values = check_tile(block, self.shape, row0, col0)
        check_room(self.out_dir, 2 * values.nbytes, where=self.out_dir)  # GeoTIFFs and Zarr
        if self._writer is None:
            self._writer = concurrent.futures.ThreadPoolExecutor(max_workers=2)
        # The Zarr chunks and half of the GeoTIFFs on two more threads while this one writes
        # the other half: zlib and blosc compress outside the GIL.
        n = values.shape[0]
        done = [self._writer.submit(self._store.write_tile, row0, col0, values),
                self._writer.submit(self._write_bands, range(n // 2, n), row0, col0, values)]
        try:
            self._write_bands(range(n // 2), row0, col0, values)
            self._keep_panels(row0, col0, values)
        finally:
            for future in done:
                future.result()
        self._bar.update(1)

    def _write_bands(self, bands, row0: int, col0: int, values) -> None:
        for i in bands:  # each slice is its own file: threads never share a dataset
            self._tiffs.write_band(i, row0, col0, values[i])

    def _keep_panels(self, row0: int, col0: int, values) -> None:
        self._put_panels(row0, col0, decimate(values, row0, col0, self._stride))

    def _put_panels(self, row0: int, col0: int, part) -> None:
        """Place a tile's decimated part (from :func:`decimate`) into the overview panels."""
        s = self._stride
        r, c = -(-row0 // s), -(-col0 // s)  # first panel row and column in this tile
        self._panels[:, r:r + part.shape[1], c:c + part.shape[2]] = part

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None:
            self._abort()
            return
        try:
            self._finish()
        except BaseException:
            self._abort()
            raise

    def _finish(self) -> None:
        self._close_bar(keep=True)
        self._stop_writer()
        out = self.out_dir
        self._tiffs.close()
        # The NetCDF cube is written from the finished store (on another thread, or by a
        # worker process with ``offload``) while this thread draws the overview from the
        # panels it kept.
        with contextlib.ExitStack() as stack:
            png = stack.enter_context(atomic_path(out / OVERVIEW_NAME))
            netcdf = self._start_netcdf(stack.enter_context(atomic_path(out / NETCDF_NAME)))
            overview = None
            try:
                overview = self._draw_overview(png)
            finally:
                error = netcdf.exception()  # waits: the file is complete or failed
                if overview is not None:
                    error = error or overview.exception()
            if isinstance(error, OSError):
                raise OutputError(f"cannot write NetCDF ({error.strerror or error})",
                                  where=str(out / NETCDF_NAME)) from None
            if error is not None:
                raise error
            # Everything is complete under temporary names: now the renames.
            tiffs = self._tiffs.commit()
            store = self._store.finalize()
        self.files = [*tiffs, store, out / NETCDF_NAME, out / OVERVIEW_NAME]

    def _close_bar(self, *, keep: bool) -> None:
        if self._bar is not None:
            self._bar.leave = keep
            self._bar.close()
            self._bar = None

    def _stop_writer(self) -> None:
        if self._writer is not None:
            self._writer.shutdown()
            self._writer = None

    def _abort(self) -> None:
        self._close_bar(keep=False)
        self._stop_writer()
        if self._tiffs is not None:
            self._tiffs.abort()
        if self._store is not None:
            self._store.discard()
        for folder in self._created:  # only folders the sink made, innermost first
            with contextlib.suppress(OSError):
                folder.rmdir()


def save_overview(template: xr.DataArray, panels: np.ndarray, png: str | os.PathLike, *,
                  title: str | None = None, where: str | None = None) -> None:
    """Draw the overview sheet from decimated ``panels`` (see :func:`decimate`), save as PNG.

    A module-level function of picklable arguments, so a worker process can run it.
    ``where`` names the file in errors (the final name; ``png`` may be a temporary one).
    """
    figure = plot_overview(template, title=title, dpi=OVERVIEW_DPI, panels=list(panels))
    try:
        # zlib level 1: a sheet of noisy slices hardly compresses further, and level 6 took
        # longer than drawing it
        figure.savefig(png, format="png", dpi=OVERVIEW_DPI, pil_kwargs={"compress_level": 1})
    except OSError as exc:
        raise OutputError(f"cannot save figure ({exc})", where=where or str(png)) from None


def decimate(values, row0: int, col0: int, stride: int) -> np.ndarray:
    """Every ``stride``-th row and column of the grid within a tile, as the overview draws."""
    r, c = -(-row0 // stride), -(-col0 // stride)  # first panel row and column in this tile
    return np.asarray(values[:, r * stride - row0::stride, c * stride - col0::stride])


def write_netcdf_from_store(store: str, target: str) -> None:
    """Write the CF NetCDF cube ``target`` from a finished Zarr store, chunk by chunk.

    A module-level function of two paths, so a worker process can run it. zlib level 1:
    level 4 made a file 1 % smaller and took longer.
    """
    with dask.config.set(scheduler="threads"):
        _write_netcdf(open_cube_zarr(store), Path(target), title=None, source=None,
                      history=None, complevel=1)


def write_cube(cube: xr.DataArray, out_dir: str | os.PathLike, *,
               tags: Mapping[str, object] | None = None, progress: bool = True,
               tile: int = TILE, title: str | None = None,
               zarr_format: int = ZARR_FORMAT) -> list[Path]:
    """Write a whole cube (in memory or dask-backed) through :class:`CubeSink`.

    Small and large builds then share one path to disk: the cube is cut into tiles of
    ``tile`` cells (a dask-backed cube computes one tile at a time).

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`slicer.outputs.cube.new_cube`.
    out_dir : path-like
        Output folder (see :class:`CubeSink`).
    tags, progress, tile, title, zarr_format
        As for :class:`CubeSink`.

    Returns
    -------
    list of pathlib.Path
        The files written (:attr:`CubeSink.files`).
    """
    data = cube.data
    with CubeSink(out_dir, cube, tags=tags, tile=tile, progress=progress, title=title,
                  zarr_format=zarr_format) as sink:
        for row0, col0, h, w in tile_windows(cube.shape, sink.tile):
            sink.write(row0, col0, data[:, row0:row0 + h, col0:col0 + w])
    return sink.files
