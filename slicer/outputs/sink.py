"""Where a build's cube goes: every output written tile by tile, committed all at once.

A cube larger than memory is produced one tile (a block of rows x columns of the grid, every
slice) at a time. :class:`CubeSink` puts each tile into a Zarr store kept under a temporary
name, its working store (a small cube written as GeoTIFFs alone is held in memory instead:
:mod:`slicer.outputs.working_store`). Once every tile is in, the slice GeoTIFFs are written
whole from the store, slice by slice on a few threads (the default; with ``stream_slices``
they are filled tile by tile as the tiles arrive and made COGs at the end), and the CF NetCDF
cube, if asked for, is written from the store too (on a thread of this process, or by a worker
process), while the overview sheet is drawn from decimated panels kept as the tiles went by
(with NumPy and Pillow, :func:`save_overview`). Only then is every file moved to its final
name; the working store becomes ``cube.zarr`` if the Zarr cube was asked for and is deleted
otherwise. If anything fails on the way, every temporary file is removed and the final names
are left as they were, so a folder never holds a half-written output.

Layout of ``out_dir`` (``formats`` chooses the first three)::

    slices/slice_000_0.000-0.100m.tif ...   "tif": one GeoTIFF per slice
    cube.zarr/                               "zarr": the cube, chunked (slice x tile x tile)
    cube.nc                                  "nc": the cube, CF-1.8 NetCDF-4
    overview.png                             always: every slice on one colour scale
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import functools
import os
import threading
from collections.abc import Callable, Collection, Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.atomic import atomic_path, check_room
from slicer.core.errors import OutputError, SettingsError
from slicer.core.progress import progress_bar
from slicer.outputs.cube import TILE, _check_tile_size, _write_netcdf, check_tile, slice_axis
from slicer.outputs.display import Display
from slicer.outputs.display_panels import PER_PAGE, page_paths, panel_stride
from slicer.outputs.geotiff import SliceTiffWriter, tile_windows
from slicer.outputs.names import (
    FORMATS,
    NETCDF_NAME,
    OVERVIEW_NAME,
    SLICES_DIR,
    ZARR_FORMAT,
    ZARR_NAME,
)
from slicer.outputs.viewer import page_slice, page_step
from slicer.outputs.working_store import open_working_store, working_kind

if TYPE_CHECKING:
    import xarray as xr

#: Threads writing whole slice GeoTIFFs from the working store (DEFLATE runs outside the GIL).
SLICE_THREADS = 4
#: Whether a sink streams the slice GeoTIFFs tile by tile unless told (benchmarks/formats.py).
STREAM_SLICES = False

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
    formats : collection of str
        The cube outputs to write, of :data:`FORMATS`: ``"tif"`` (the slice GeoTIFFs),
        ``"zarr"`` (``cube.zarr``), ``"nc"`` (``cube.nc``); default all three. The overview
        is always drawn; the working store is always kept while the sink is open.
    stream_slices : bool, optional
        Fill the slice GeoTIFFs tile by tile as tiles arrive (uncompressed, made COGs at the
        end) instead of writing each whole from the working store at the end; default
        :data:`STREAM_SLICES` (whole slices, measured faster: benchmarks/formats.py).
    page_slices : bool
        Also keep each slice as the viewer page shows it (:attr:`page_slices`), taken as the
        slice GeoTIFFs are written whole: the page then need not read the slices back.

    Attributes
    ----------
    files : list of pathlib.Path
        After a successful exit: the GeoTIFFs in slice order, then ``cube.zarr``, ``cube.nc``
        (those asked for) and ``overview.png``.
    empty_cells : int or None
        After a successful exit: the number of NaN cells of the first slice.
    page_slices : list of slicer.outputs.viewer.PageSlice or None
        After a successful exit with ``page_slices``: each slice for the viewer page, in order
        (:func:`slicer.outputs.viewer.page_slice`); None if not asked for or streamed.
    """

    def __init__(self, out_dir: str | os.PathLike, cube_template: xr.DataArray, *,
                 tags: Mapping[str, object] | None = None, tile: int = TILE,
                 progress: bool = True, title: str | None = None,
                 zarr_format: int = ZARR_FORMAT, offload: Callable | None = None,
                 formats: Collection[str] = tuple(FORMATS), stream_slices: bool | None = None,
                 display: Display | None = None, per_page: int = PER_PAGE,
                 page_slices: bool = False):
        slice_axis(cube_template)
        unknown = sorted(set(formats) - set(FORMATS))
        if unknown or not formats:
            raise SettingsError(f"formats are some of {', '.join(FORMATS)}, got "
                                f"{sorted(formats)}", where="formats")
        self.formats = frozenset(formats)
        if stream_slices is None:
            stream_slices = STREAM_SLICES
        self._stream = stream_slices and "tif" in self.formats
        tile = _check_tile_size(tile)
        if tile % 16:
            raise SettingsError(f"tile must be a multiple of 16 cells (TIFF blocks), got {tile}",
                                where="tile")
        self.out_dir = Path(out_dir)
        self.template = cube_template
        self.tile = tile
        self.shape = tuple(cube_template.shape)
        self.files: list[Path] = []
        self.empty_cells: int | None = None
        self.page_slices: list | None = None
        self._page_step = page_step(*self.shape[1:]) if page_slices else None
        self._tags = tags
        self._title = title
        self._display = Display() if display is None else display
        self._per_page = per_page
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
        self._stop = threading.Event()  # set on a Ctrl-C: the slice threads start no more
        self._bar = None
        self._created = [p for p in (self.out_dir, *self.out_dir.parents) if not p.exists()]

    def __enter__(self) -> CubeSink:
        out = self.out_dir
        if out.exists() and not out.is_dir():
            raise OutputError("output path is a file, not a folder", where=str(out))
        try:
            out.mkdir(parents=True, exist_ok=True)
            if "tif" in self.formats:
                self._tiffs = self._slice_writer()
            kind = working_kind(int(np.prod(self.shape)), formats=self.formats,
                                offload=self._offload is not None)
            self._store = open_working_store(out / ZARR_NAME, self.template, tile=self.tile,
                                             zarr_format=self._zarr_format, kind=kind)
        except BaseException:
            self._abort()
            raise
        n_tiles = sum(1 for _ in tile_windows(self.shape, self.tile))
        self._bar = progress_bar(total=n_tiles, desc="writing tiles", unit="tile",
                                 enabled=self._progress)
        return self

    def _slice_writer(self) -> SliceTiffWriter:
        return SliceTiffWriter(self.template, self.out_dir / SLICES_DIR, tags=self._tags,
                               tile=self.tile, deferred=not self._stream)

    def _start_slices(self):
        """Start writing the slice GeoTIFFs whole from the finished store: a future, or None.

        On a thread of this process, which spreads the slices over :data:`SLICE_THREADS`
        threads while this thread draws the overview.
        """
        if "tif" not in self.formats or self._stream:
            return None
        pool = concurrent.futures.ThreadPoolExecutor(max_workers=1)
        try:
            return pool.submit(self._write_whole_slices)
        finally:
            pool.shutdown(wait=False)

    def _write_whole_slices(self) -> None:
        store = self._store

        page = None if self._page_step is None else functools.partial(page_slice,
                                                                        step=self._page_step)

        def one(index: int):
            if self._stop.is_set():
                return None
            values = store.read(index)
            self._tiffs.write_slice(index, values)
            return None if page is None else page(values)

        with concurrent.futures.ThreadPoolExecutor(max_workers=SLICE_THREADS) as pool:
            pages = list(pool.map(one, range(self.shape[0])))
        if self._page_step is not None and not self._stop.is_set():
            self.page_slices = pages

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

    def overview_paths(self) -> list[Path]:
        """The overview's files in ``out_dir``: ``overview.png``, or numbered pages."""
        return page_paths(self.out_dir / OVERVIEW_NAME, -(-self.shape[0] // self._per_page))

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
        check_room(self.out_dir, (1 + self._stream) * values.nbytes, where=self.out_dir)
        if self._writer is None:
            self._writer = concurrent.futures.ThreadPoolExecutor(max_workers=2)
        # The Zarr chunks (and half of streamed GeoTIFFs) on more threads while this one
        # writes the other half: zlib and blosc compress outside the GIL.
        n = values.shape[0]
        done = [self._writer.submit(self._store.write_tile, row0, col0, values)]
        if self._stream:
            done.append(self._writer.submit(self._write_bands, range(n // 2, n), row0, col0,
                                            values))
        try:
            if self._stream:
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
        if self._stream:
            self._tiffs.close()
        first = self._store.read(0)
        self.empty_cells = int(np.isnan(first).sum())
        # The slices and the NetCDF cube are written from the finished store (on other
        # threads, or by worker processes with ``offload``) while this thread draws the
        # overview from the panels it kept.
        with contextlib.ExitStack() as stack:
            pngs = [stack.enter_context(atomic_path(p)) for p in self.overview_paths()]
            netcdf = None
            if "nc" in self.formats:
                netcdf = self._start_netcdf(stack.enter_context(atomic_path(out / NETCDF_NAME)))
            started = [netcdf, self._start_slices()]
            try:  # drawn here, from the template (a DataArray): workers never import xarray
                save_overview(self.template, self._panels, pngs, title=self._title,
                              display=self._display, per_page=self._per_page,
                              where=[str(p) for p in self.overview_paths()])
            finally:  # waits: every file is complete or failed
                errors = self._wait(started)
            if isinstance(errors[0], OSError):
                raise OutputError(f"cannot write NetCDF ({errors[0].strerror or errors[0]})",
                                  where=str(out / NETCDF_NAME)) from None
            for error in errors:
                if error is not None:
                    raise error
            # Everything is complete under temporary names: now the renames.
            files = self._tiffs.commit() if self._tiffs is not None else []
            if "zarr" in self.formats:
                files.append(self._store.finalize())
            if "nc" in self.formats:
                files.append(out / NETCDF_NAME)
        if "zarr" not in self.formats:
            self._store.discard()  # the working store: never left behind
        self.files = [*files, *self.overview_paths()]

    def _wait(self, futures) -> list[BaseException | None]:
        """The exception of each future (None: none, or no future), once all are done.

        A Ctrl-C meanwhile stops the slice threads at their next slice and is raised once all
        are done, so that no thread writes into files being removed.
        """
        errors, interrupted = [], False
        for future in futures:
            while True:
                try:
                    errors.append(None if future is None else future.exception())
                    break
                except KeyboardInterrupt:
                    interrupted = True
                    self._stop.set()
        if interrupted:
            raise KeyboardInterrupt
        return errors

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


def save_overview(template: xr.DataArray, panels: np.ndarray,
                  pngs: Sequence[str | os.PathLike], *, title: str | None = None,
                  display: Display | None = None, per_page: int = PER_PAGE,
                  where: Sequence[str] | None = None) -> None:
    """Draw the overview pages from decimated ``panels`` (see :func:`decimate`), save each as
    PNG to its path in ``pngs`` (one per page, as :func:`slicer.outputs.figures.page_paths`).

    The pages are the sheets :func:`slicer.outputs.figures.plot_overview` draws, drawn with
    NumPy and Pillow as palette PNGs (:mod:`slicer.outputs.sheet_png`): no figure machinery
    to import, nothing rendered twice. A module-level function of picklable arguments, so a
    worker process can run it. ``where`` names the files in errors (the final names; ``pngs``
    may be temporary ones).
    """
    from slicer.outputs.overview_plan import OverviewPlan
    from slicer.outputs.sheet_png import page_png
    plan = OverviewPlan(template, display or Display(), title=title, dpi=OVERVIEW_DPI,
                        panels=list(panels))
    ncols, nrows, pages = plan.pages(per_page)
    for (start, stop, page), png, name in zip(pages, pngs, where or [str(p) for p in pngs],
                                              strict=True):
        data = page_png(plan.drawn[start:stop], **plan.page(start, stop, page=page),
                        ncols=ncols, nrows=nrows)
        try:
            Path(png).write_bytes(data)
        except OSError as exc:
            raise OutputError(f"cannot save figure ({exc})", where=name) from None


def decimate(values, row0: int, col0: int, stride: int) -> np.ndarray:
    """Every ``stride``-th row and column of the grid within a tile, as the overview draws."""
    r, c = -(-row0 // stride), -(-col0 // stride)  # first panel row and column in this tile
    return np.asarray(values[:, r * stride - row0::stride, c * stride - col0::stride])


def cube_from_slices(template: xr.DataArray,
                     paths: Sequence[str | os.PathLike]) -> xr.DataArray:
    """The cube read lazily from its slice GeoTIFFs: ``template`` with their values.

    Each file is opened by rioxarray (``open_rasterio``, dask chunks of the template's plan
    chunks, one slice deep) and the slices are stacked along the slice dim; the
    windows, CRS, coordinates and attrs are the template's. Nothing is read until used.

    Parameters
    ----------
    template : xarray.DataArray
        The cube's template (:func:`slicer.outputs.cube.empty_cube`), the one the files
        were written from.
    paths : sequence of path-like
        The slice GeoTIFFs, in slice order.

    Raises
    ------
    OutputError
        A file does not hold the template's grid (size or transform).
    """
    import dask.array as darray
    import rioxarray

    from slicer.outputs.cube import cube_transform

    if len(paths) != template.shape[0]:
        raise OutputError(f"{len(paths)} slice files for {template.shape[0]} slices",
                          where=str(Path(paths[0]).parent) if paths else "slices")
    chunks = (template.chunks[1][0], template.chunks[2][0]) if template.chunks else (-1, -1)
    transform = cube_transform(template)
    bands = []
    for path in paths:
        band = rioxarray.open_rasterio(path, parse_coordinates=False,
                                       chunks={"band": 1, "y": chunks[0], "x": chunks[1]})
        # GDAL's geotransform as rioxarray keeps it (reading it through .rio.transform()
        # warns in rioxarray 0.19 of affine's deprecated `*`)
        stored = [float(v) for v in band["spatial_ref"].attrs["GeoTransform"].split()]
        if band.shape[1:] != template.shape[1:] or not np.allclose(stored, transform.to_gdal(),
                                                                   rtol=0, atol=1e-9):
            raise OutputError("does not hold the cube's grid", where=str(path))
        bands.append(band.data[0])
    out = template.copy(data=darray.stack(bands))
    out.encoding = dict(template.encoding)
    return out


def write_netcdf_from_store(store: str, target: str) -> None:
    """Write the CF NetCDF cube ``target`` from a finished Zarr store, chunk by chunk.

    A module-level function of two paths, so a worker process can run it. zlib level 1:
    level 4 made a file 1 % smaller and took longer.
    """
    import dask
    with dask.config.set(scheduler="threads"):
        from slicer.outputs.zarr_store import open_cube_zarr  # zarr: only where used
        _write_netcdf(open_cube_zarr(store), Path(target), title=None, source=None,
                      history=None, complevel=1)


def write_cube(cube: xr.DataArray, out_dir: str | os.PathLike, *,
               tags: Mapping[str, object] | None = None, progress: bool = True,
               tile: int = TILE, title: str | None = None,
               zarr_format: int = ZARR_FORMAT) -> list[Path]:
    """Write a whole cube (in memory or dask-backed) through :class:`CubeSink`.

    Small and large builds then share one path to disk: the cube is cut into tiles of
    ``tile`` cells (a dask-backed cube computes one tile at a time).

    ``cube`` is a cube as :func:`slicer.outputs.cube.new_cube` builds it, ``out_dir`` the
    output folder; the others as for :class:`CubeSink`. Returns the files written
    (:attr:`CubeSink.files`).
    """
    data = cube.data
    with CubeSink(out_dir, cube, tags=tags, tile=tile, progress=progress, title=title,
                  zarr_format=zarr_format) as sink:
        for row0, col0, h, w in tile_windows(cube.shape, sink.tile):
            sink.write(row0, col0, data[:, row0:row0 + h, col0:col0 + w])
    return sink.files
