"""Outputs written by the worker processes of this machine, not by the process that builds.

On a process pool or a LocalCluster the workers share this machine's files, so the calling
process need not touch the cube's values at all. Each tile task grids its tile and writes it
straight into the working store (:func:`grid_and_store`): one raw float32 file when the
GeoTIFFs alone are asked for, else a temporary Zarr store (:mod:`slicer.outputs.working_store`);
only a decimated copy for the overview comes back. Once every tile is stored, one task per
slice reads it back, writes its GeoTIFF (:func:`slicer.outputs.geotiff.write_slice_file`) and,
when the NetCDF cube is asked for, compresses its NetCDF chunks
(:mod:`slicer.outputs.netcdf_chunks`), which a thread of the calling process stores in the
NetCDF file as they come, while this process draws the overview from those decimated copies
(drawn from the cube's template, a DataArray: the workers never import xarray, pandas or
dask, :data:`slicer.pipeline.worker_processes.WARM_MODULES`). A Zarr store becomes
``cube.zarr`` only if the Zarr cube is asked for (``formats``). Everything stays under
temporary names until all is done, as with :class:`slicer.outputs.sink.CubeSink`. The
compression of the outputs, which a build otherwise does in its own process, is then shared by
the workers: with N workers a build uses N cores, and its time falls as workers are added.

A remote cluster's workers may not see the output folder, so they use :class:`CubeSink`.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import os
import shutil
import tempfile
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from slicer.core.atomic import GuardedFile, check_room, temp_file
from slicer.gridding.grid import TileJob, grid_tile
from slicer.outputs.geotiff import SliceFileJob, SliceTiffWriter, tile_windows, write_slice_file
from slicer.outputs.names import NETCDF_NAME, SLICES_DIR
from slicer.outputs.netcdf_chunks import (
    ChunkLayout,
    compress_slice,
    store_chunks,
    write_skeleton,
)
from slicer.outputs.sink import CubeSink, decimate
from slicer.outputs.viewer import page_slice
from slicer.outputs.working_store import FileStore
from slicer.processing.fk import release_operators


@dataclass(frozen=True)
class StoredTile:
    """A tile to grid and the temporary store it goes into (picklable)."""

    job: TileJob
    store: str | FileStore
    stride: int


def grid_and_store(item: StoredTile) -> tuple[int, int, np.ndarray]:
    """Grid one tile, write it into the store: ``(row0, col0, decimated tile)``."""
    release_operators()  # the lines are done: a worker's migration operators (100 MB at 1 M)
    row0, col0, block = grid_tile(item.job)
    if isinstance(item.store, FileStore):
        check_room(item.store.path.parent, block.nbytes, where=item.store.path.parent)
        item.store.write_tile(row0, col0, block)
    else:
        folder = Path(item.store).parent
        check_room(folder, block.nbytes, where=folder)
        from slicer.outputs.zarr_store import write_tile  # zarr: only where a store is
        write_tile(item.store, row0, col0, block)
    return row0, col0, decimate(block, row0, col0, item.stride)


@dataclass(frozen=True)
class SliceOutputs:
    """One slice's GeoTIFF to write and/or NetCDF chunks to compress (picklable)."""

    store: str | FileStore
    index: int
    #: Name of the cube array in the store.
    name: str
    #: The GeoTIFF, or None when the slices are not asked for.
    tiff: SliceFileJob | None
    #: The NetCDF chunks and the file they go to, one after another, or None without NetCDF.
    layout: ChunkLayout | None
    parts: str | None
    #: Decimation of the slice for the viewer page (:func:`slicer.outputs.viewer.page_step`),
    #: or None when the page's slice is not wanted.
    page_step: int | None = None


def write_slice_outputs(job: SliceOutputs) -> tuple[int, str | None,
                                                    list[tuple[int, int, int, int]], object]:
    """Read one slice from the store, write its GeoTIFF and its compressed NetCDF chunks.

    The chunks go to the file ``job.parts`` rather than back through the engine: sending
    them as results cost the calling process most of a core (distributed's messages),
    taken from the workers. Returns ``(index, parts file, [(row0, col0, offset, size)],
    page)``, ``page`` the slice as the viewer page holds it
    (:func:`slicer.outputs.viewer.page_slice`; None without ``job.page_step``), taken here
    where the slice is in memory anyway.
    """
    if isinstance(job.store, FileStore):
        values, folder = job.store.read(job.index), job.store.path.parent
    else:
        from slicer.outputs.zarr_store import read_slice
        values = read_slice(job.store, job.index, name=job.name)
        folder = Path(job.store).parent
    check_room(folder, 2 * values.nbytes, where=folder)
    if job.tiff is not None:
        write_slice_file(job.tiff, values)
    page = None if job.page_step is None else page_slice(values, job.page_step)
    if job.layout is None:
        return job.index, None, [], page
    index, offset = [], 0
    with open(job.parts, "wb") as f:
        for row0, col0, data in compress_slice(values, job.layout):
            f.write(data)
            index.append((row0, col0, offset, len(data)))
            offset += len(data)
    return job.index, job.parts, index, page


def _stored_parts(f, layout: ChunkLayout, index: int, parts: str, where) -> None:
    with open(parts, "rb") as source:
        data = memoryview(source.read())
    store_chunks(f, layout, index, [(r, c, data[o:o + n]) for r, c, o, n in where])
    os.remove(parts)


class WorkerSink(CubeSink):
    """A :class:`CubeSink` whose values are written by the engine's workers.

    Feed it with :meth:`grid` instead of :meth:`CubeSink.write`.

    Parameters
    ----------
    out_dir, cube_template, tags, tile, progress, title
        As for :class:`CubeSink`.
    engine : slicer.pipeline.engine.Engine
        An engine whose workers share this machine's files (``engine.offloader()`` is not
        None).
    """

    def __init__(self, out_dir, cube_template, *, engine, **kwargs):
        offload = engine.offloader()
        if offload is None:
            raise ValueError("WorkerSink needs a process pool or LocalCluster engine")
        super().__init__(out_dir, cube_template, offload=offload, **kwargs)
        self._stream = False  # the slices are always written whole, by the workers
        self._engine = engine
        self._slicer: concurrent.futures.ThreadPoolExecutor | None = None
        self._skeleton = None
        self._early: Path | None = None

    def __enter__(self) -> WorkerSink:
        super().__enter__()
        if "nc" not in self.formats:
            return self
        try:
            # The empty NetCDF file needs only the template: a worker makes it among the
            # tiles (about 2 s for a 1 M-trace cube here).
            self._early = temp_file(self.out_dir, prefix=f".{NETCDF_NAME}.",
                                    suffix=".tmp").resolve()
            self._skeleton = self._offload(write_skeleton, self.template, str(self._early),
                                           tile=self.tile)
        except BaseException:
            self._abort()
            raise
        return self

    def _abort(self) -> None:
        if self._skeleton is not None:
            self._skeleton.exception()  # the skeleton is not left writing
            self._skeleton = None
        if self._early is not None:
            with contextlib.suppress(FileNotFoundError):
                self._early.unlink()
        super()._abort()

    def _slice_writer(self) -> SliceTiffWriter:
        return SliceTiffWriter(self.template, self.out_dir / SLICES_DIR, tags=self._tags,
                               tile=self.tile, deferred=True)

    def grid(self, jobs: Iterable[TileJob], *, count: int) -> None:
        """Grid and store every tile on the workers, keeping the overview's panels."""
        store = self._for_workers()
        items = (StoredTile(job, store, self._stride) for job in jobs)
        written = set()
        for row0, col0, part in self._engine.map(grid_and_store, items, desc="gridding",
                                                 unit="tile", progress=False,
                                                 weights=[1] * count):
            self._put_panels(row0, col0, part)
            written.add((row0, col0))
            self._bar.update(1)
        if isinstance(self._store, FileStore):  # a raw file starts as zeros, not NaN
            for row0, col0, h, w in tile_windows(self.shape, self.tile):
                if (row0, col0) not in written:
                    self._store.fill_nan(row0, col0, h, w)

    def _for_workers(self):
        """The store as the workers open it: the raw file's store itself (picklable), else
        the Zarr store's absolute path."""
        if isinstance(self._store, FileStore):
            return self._store
        return self._worker_path(self._store.path)

    def _keep_pages(self, pages: list) -> None:
        if self._page_step is not None:
            self.page_slices = pages

    @staticmethod
    def _worker_path(path) -> str:
        # absolute: a worker need not share this process's working folder
        return str(Path(path).resolve())

    def _start_netcdf(self, target):
        return self._start_slice_tasks(target)

    def _start_slices(self):
        # with NetCDF, the slice tasks were started with it (each writes both)
        if "tif" not in self.formats or "nc" in self.formats:
            return None
        return self._start_slice_tasks(None)

    def _start_slice_tasks(self, netcdf):
        """Run the slice tasks (GeoTIFFs, and NetCDF chunks into ``netcdf`` if not None)."""
        self._slicer = concurrent.futures.ThreadPoolExecutor(max_workers=1)
        future = self._slicer.submit(self._write_slices, netcdf)  # this thread: the sink
        self._slicer.shutdown(wait=False)
        return future

    def _write_slices(self, target) -> None:
        store = self._for_workers()

        def job(i: int, layout=None, parts=None) -> SliceOutputs:
            tiff = (self._tiffs.slice_job(i, self._worker_path(self._store.path))
                    if self._tiffs is not None else None)
            return SliceOutputs(store, i, self._store.name, tiff, layout,
                                None if parts is None else str(parts / f"slice_{i}.bin"),
                                self._page_step)

        pages = []
        if target is None:
            for *_, page in self._engine.map(write_slice_outputs,
                                             map(job, range(self.shape[0])),
                                             desc="slices", unit="slice", progress=False):
                pages.append(page)
            self._keep_pages(pages)
            return
        import h5py
        layout = self._skeleton.result()
        self._skeleton = None
        parts = Path(tempfile.mkdtemp(prefix=f".{NETCDF_NAME}.", suffix=".parts",
                                      dir=self.out_dir)).resolve()
        jobs = [job(i, layout, parts) for i in range(self.shape[0])]
        try:
            # through a GuardedFile, as every NetCDF write (slicer.outputs.cube._write_netcdf)
            with GuardedFile(self._early, "r+b") as raw:
                with h5py.File(raw, "r+") as f:
                    for index, path, where, page in self._engine.map(
                            write_slice_outputs, jobs, desc="slices", unit="slice",
                            progress=False):
                        _stored_parts(f, layout, index, path, where)
                        pages.append(page)
                raw.check()
        finally:
            shutil.rmtree(parts, ignore_errors=True)
        self._keep_pages(pages)
        os.replace(self._early, target)
        self._early = None
