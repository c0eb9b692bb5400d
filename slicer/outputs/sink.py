"""Where a build's cube goes: every output written tile by tile, committed all at once.

A cube larger than memory is produced one tile (a block of rows x columns of the grid, every
slice) at a time. :class:`CubeSink` hands each tile to the slice GeoTIFFs and the Zarr store,
all kept under temporary names; a side thread writes the CF NetCDF cube from the store as the
tiles arrive (or a worker process writes it from the finished store), the overview sheet is
drawn from decimated panels kept as the tiles went by, and only then is every file moved to
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
import threading
from collections.abc import Callable, Mapping
from pathlib import Path

import dask
import numpy as np
import xarray as xr

from slicer.core.atomic import atomic_path
from slicer.core.errors import OutputError, SettingsError
from slicer.core.progress import progress_bar
from slicer.outputs.cube import TILE, _check_tile_size, _write_netcdf, check_tile, slice_axis
from slicer.outputs.figures import panel_stride, plot_overview
from slicer.outputs.geotiff import SliceTiffWriter, tile_windows
from slicer.outputs.zarr_store import ZARR_FORMAT, create_cube_store, open_cube_zarr

#: Names of the outputs inside ``out_dir``.
SLICES_DIR, ZARR_NAME, NETCDF_NAME, OVERVIEW_NAME = "slices", "cube.zarr", "cube.nc", "overview.png"

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
        self._stream: _NetCDFStream | None = None
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
            if self._offload is None:
                self._stream = _NetCDFStream(self._store.path, self.shape, self.tile,
                                             out / NETCDF_NAME)
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
        """Start writing the NetCDF cube (temporary path ``target``) from the store: a future."""
        return self._offload(write_netcdf_from_store, str(self._store.path), str(target))

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
        if self._stream is not None:
            self._stream.written(row0, col0, values.shape[1], values.shape[2])
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
        # The NetCDF cube has been written on a side thread as the tiles came (or is now
        # written from the finished store by a worker process, with ``offload``) while this
        # thread draws the overview from the panels it kept.
        with contextlib.ExitStack() as stack:
            png = stack.enter_context(atomic_path(out / OVERVIEW_NAME))
            if self._stream is not None:
                netcdf = self._stream.complete()
            else:
                netcdf = self._start_netcdf(stack.enter_context(atomic_path(out / NETCDF_NAME)))
            overview = None
            try:
                overview = self._draw_overview(png)
            finally:
                error = netcdf.exception()  # waits: the file is complete or failed
                if overview is not None:
                    error = error or overview.exception()
            if isinstance(error, OSError):
                raise OutputError(f"cannot write NetCDF ({error})",
                                  where=str(out / NETCDF_NAME)) from None
            if error is not None:
                raise error
            # Everything is complete under temporary names: now the renames.
            tiffs = self._tiffs.commit()
            store = self._store.finalize()
            if self._stream is not None:
                self._stream.commit()
                self._stream = None
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
        if self._stream is not None:
            self._stream.abort()
            self._stream = None
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


class _NetCDFStream:
    """The NetCDF cube written on a side thread while the tiles arrive.

    The cube handed to the NetCDF writer is lazy: each tile's block waits until every cell
    of the tile is in the Zarr store, then reads it back from there (so no tile is held in
    memory for it). Its slices are split apart after the read, so the file keeps one HDF5
    chunk per Zarr chunk (one slice of one tile) while dask writes them tile after tile, in
    the order the tiles come. The file stays under a temporary name until :meth:`commit`.
    """

    def __init__(self, store: Path, shape: tuple[int, int, int], tile: int, target: Path):
        import dask.array as darray

        self._windows = list(tile_windows(shape, tile))
        self._tile = tile
        self._missing = {(r, c): h * w for r, c, h, w in self._windows}
        self._ready = {(r, c): threading.Event() for r, c, _, _ in self._windows}
        self._aborted = False
        source = open_cube_zarr(store)
        self._source = source.data  # read inside _read only: never an argument of a task
        n = self._n = shape[0]
        rows, block = {}, None
        for r, c, h, w in self._windows:
            # Each read after the one before it: dask would otherwise start from the last
            # tile, and the whole file would wait for the end of the build.
            block = dask.delayed(self._read, pure=False)(r, c, h, w, block)
            rows.setdefault(r, []).append(
                darray.from_delayed(block, shape=(n, h, w), dtype=np.float32))
        lazy = darray.block([rows[r] for r in sorted(rows)]).rechunk({0: 1})
        self._context = atomic_path(target)
        self.path = self._context.__enter__()
        self._pool = concurrent.futures.ThreadPoolExecutor(max_workers=1)
        self.future = self._pool.submit(_write_lazy_netcdf, source.copy(data=lazy), self.path)

    def _read(self, row0: int, col0: int, h: int, w: int, _after=None) -> np.ndarray:
        self._ready[(row0, col0)].wait()
        if self._aborted:  # the file is thrown away: finish it fast (failing would leave
            # dask threads writing to it, which reopen it by name after it is removed)
            return np.full((self._n, h, w), np.nan, dtype=np.float32)
        return np.asarray(self._source[:, row0:row0 + h, col0:col0 + w].compute(
            scheduler="synchronous"), dtype=np.float32)

    def written(self, row0: int, col0: int, h: int, w: int) -> None:
        """Cells ``[row0:row0+h, col0:col0+w]`` are in the store: release complete tiles."""
        t = self._tile
        for r, c, th, tw in self._windows:
            if r // t in range(row0 // t, (row0 + h - 1) // t + 1) and \
                    c // t in range(col0 // t, (col0 + w - 1) // t + 1):
                overlap = ((min(r + th, row0 + h) - max(r, row0))
                           * (min(c + tw, col0 + w) - max(c, col0)))
                self._missing[(r, c)] -= max(overlap, 0)
                if self._missing[(r, c)] <= 0:
                    self._ready[(r, c)].set()

    def complete(self):
        """Every tile is written (cells never written stay NaN): the future of the file."""
        for event in self._ready.values():
            event.set()
        return self.future

    def commit(self) -> None:
        self._pool.shutdown()
        self._context.__exit__(None, None, None)

    def abort(self) -> None:
        self._aborted = True
        self.complete()
        self._pool.shutdown()  # the writer ends soon: every read left is NaN, not read
        with contextlib.suppress(FileNotFoundError):
            self.path.unlink()


def _write_lazy_netcdf(cube: xr.DataArray, target: Path) -> None:
    # zlib level 1: level 4 made the file 1 % smaller and took longer
    with dask.config.set(scheduler="threads"):
        _write_netcdf(cube, target, title=None, source=None, history=None, complevel=1)


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
