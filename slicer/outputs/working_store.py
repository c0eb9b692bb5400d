"""Where a build's cube is held while its tiles arrive: a Zarr store, a raw file, or memory.

:class:`slicer.outputs.sink.CubeSink` grids tile by tile into a working copy of the cube and
writes the outputs from it once it is complete. On disk (:mod:`slicer.outputs.zarr_store`) that
copy can be larger than memory, become ``cube.zarr``, feed ``cube.nc`` and be read by worker
processes. A build that asks for the slice GeoTIFFs alone, on threads of one process, with a
cube of at most :data:`MEMORY_STAGING_BYTES`, keeps it in memory instead: no Zarr import, no
store to create, no chunks to compress and read back. The sink of a 24 x 400 x 400 cube took
0.53 s through the store and 0.31 s from memory, of a 24 x 835 x 835 one 1.65 and 0.90 s
(benchmarks/working_store.py).

A build on worker processes that writes the GeoTIFFs alone holds the cube in one raw float32
file (:class:`FileStore`): the workers write each tile whole into it (one ``os.pwrite``) and
read it back a slice at a time. Zarr's chunk files cost 1.3 s of CPU to write and 0.8 s to read back
for a 1 M-trace cube (24 x 1575 x 1582 cells, 1176 chunks; benchmarks/working_store.py).
"""

from __future__ import annotations

import errno
import os
from collections.abc import Collection
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.atomic import temp_file
from slicer.core.errors import OutputError, SettingsError
from slicer.outputs.cube import check_tile
from slicer.outputs.geotiff import tile_windows

if TYPE_CHECKING:
    import xarray as xr

#: Largest cube (bytes of float32 values) kept in memory while it is gridded: a 64 MiB cube is
#: 24 slices of 835 x 835 cells, more than a 400 k-trace survey at a 0.1 m cell.
MEMORY_STAGING_BYTES = 64 * 2**20


def working_kind(n_values: int, *, formats: Collection[str], offload: bool) -> str:
    """How a cube of ``n_values`` cells is held while it is gridded: ``"memory"`` (see
    :func:`stages_in_memory`), ``"file"`` (GeoTIFFs alone, written by worker processes:
    :class:`FileStore`) or ``"zarr"`` (``cube.zarr`` or ``cube.nc`` asked for)."""
    if stages_in_memory(n_values, formats=formats, offload=offload):
        return "memory"
    return "file" if set(formats) == {"tif"} and offload else "zarr"


def stages_in_memory(n_values: int, *, formats: Collection[str], offload: bool) -> bool:
    """Whether a cube of ``n_values`` cells is held in memory while it is gridded: only the
    slice GeoTIFFs asked for (``cube.zarr`` and ``cube.nc`` are written from a store on disk),
    no other process to read it (``offload``), and at most :data:`MEMORY_STAGING_BYTES`."""
    return set(formats) == {"tif"} and not offload and 4 * n_values <= MEMORY_STAGING_BYTES


class MemoryStore:
    """The working copy of a cube in memory, with the part of
    :class:`slicer.outputs.zarr_store.CubeStore`'s interface a sink uses.

    Parameters
    ----------
    shape : (int, int, int)
        ``(n_slices, ny, nx)``.
    name : str
        Name of the cube's values.
    """

    path = None  # nothing on disk for another process to open

    def __init__(self, shape: tuple[int, int, int], name: str):
        self.shape = tuple(shape)
        self.name = name
        self._values: np.ndarray | None = np.full(self.shape, np.nan, dtype=np.float32)

    def _check(self) -> np.ndarray:
        if self._values is None:
            raise OutputError("the working cube is already discarded", where=self.name)
        return self._values

    def write_tile(self, row0: int, col0: int, block) -> None:
        """Put the values of every slice over one tile (as
        :meth:`~slicer.outputs.zarr_store.CubeStore.write_tile`)."""
        values = check_tile(block, self.shape, row0, col0)
        _, h, w = values.shape
        self._check()[:, row0:row0 + h, col0:col0 + w] = values

    def read(self, index: int) -> np.ndarray:
        """Slice ``index`` as a float32 ``(ny, nx)`` array (a view: not to be modified)."""
        return self._check()[int(index)]

    def finalize(self) -> Path:
        raise OutputError("a cube held in memory is not written as cube.zarr", where=self.name)

    def discard(self) -> None:
        """Free the values."""
        self._values = None


class FileStore:
    """The working copy of a cube in one raw float32 file, shared by a build's worker
    processes (picklable: a path, a shape, a tile size and a name).

    The file holds the tiles of :func:`~slicer.outputs.geotiff.tile_windows` in turn, each
    as its ``(slice, y, x)`` block in C order, so that a tile is one write (``os.pwrite``):
    through a memory map of the cube's ``(slice, y, x)`` layout, each 6.3 MB tile of a
    1 M-trace cube took 16.9 ms in strided rows and page faults, against 1.4 ms written whole
    (benchmarks/working_store.py). Reading a slice gathers its part of every tile.

    The file starts empty (zeros): every tile must be written (a build's workers write them
    all; :meth:`fill_nan` marks any left out as having no data).
    """

    def __init__(self, path: Path, shape: tuple[int, int, int], name: str, tile: int):
        self.path = Path(path).resolve()
        self.shape = tuple(int(v) for v in shape)
        self.name = name
        self.tile = int(tile)

    @classmethod
    def create(cls, folder: Path, shape: tuple[int, int, int], name: str, *,
               tile: int) -> FileStore:
        """A new file in ``folder`` (the build's stage), sized for ``shape`` in tiles of
        ``tile`` x ``tile`` cells."""
        size = 4 * int(np.prod(shape))
        path = None
        try:
            path = temp_file(folder, prefix=".cube.", suffix=".raw")
            with open(path, "r+b") as f:
                try:
                    # the disk space reserved now: a full disk is found before any line
                    # is read, not at the last tile
                    os.posix_fallocate(f.fileno(), 0, size)
                except OSError as exc:
                    if exc.errno not in (errno.EOPNOTSUPP, errno.EINVAL, errno.ENOSYS):
                        raise
                    f.truncate(size)  # a file system that cannot reserve: sparse
        except OSError as exc:
            if path is not None:
                path.unlink(missing_ok=True)
            raise OutputError(f"cannot create the working cube of {size / 2**20:.0f} MiB "
                              f"({exc.strerror or exc})", where=str(folder)) from None
        return cls(path, shape, name, tile)

    def _offset(self, row0: int, col0: int, h: int) -> int:
        """Byte offset of the tile at ``row0, col0`` (``h`` rows high): the tile rows above
        it, then the tiles to its left in its own tile row."""
        n, _, nx = self.shape
        return 4 * n * (row0 * nx + h * col0)

    def write_tile(self, row0: int, col0: int, block) -> None:
        """Put the values of every slice over one tile of the grid (as
        :meth:`~slicer.outputs.zarr_store.CubeStore.write_tile`), in one write."""
        values = check_tile(block, self.shape, row0, col0)
        _, h, w = values.shape
        if (row0, col0, h, w) != _window(self.shape, self.tile, row0, col0):
            raise SettingsError(f"a {h} x {w} block at row {row0}, column {col0} is not a "
                                f"tile of the working cube's {self.tile}-cell grid",
                                where=self.name)
        data = memoryview(np.ascontiguousarray(values, dtype=np.float32)).cast("B")
        offset = self._offset(row0, col0, h)
        try:
            fd = os.open(self.path, os.O_WRONLY)
            try:
                while data:  # a write may take less than all (POSIX pwrite)
                    done = os.pwrite(fd, data, offset)
                    data, offset = data[done:], offset + done
            finally:
                os.close(fd)
        except OSError as exc:
            raise OutputError(f"cannot write the working cube ({exc.strerror or exc})",
                              where=str(self.path.parent)) from None

    def fill_nan(self, row0: int, col0: int, h: int, w: int) -> None:
        """Mark a tile never written as having no data."""
        self.write_tile(row0, col0, np.full((self.shape[0], h, w), np.nan, dtype=np.float32))

    def read(self, index: int) -> np.ndarray:
        """Slice ``index`` as a float32 ``(ny, nx)`` array (read, not mapped)."""
        n, ny, nx = self.shape
        out = np.empty((ny, nx), dtype=np.float32)
        try:
            with open(self.path, "rb") as f:
                for row0, col0, h, w in tile_windows(self.shape, self.tile):
                    f.seek(self._offset(row0, col0, h) + 4 * h * w * int(index))
                    part = np.fromfile(f, dtype=np.float32, count=h * w)
                    if part.size != h * w:
                        raise OutputError("the working cube is shorter than its slices",
                                          where=str(self.path))
                    out[row0:row0 + h, col0:col0 + w] = part.reshape(h, w)
        except OSError as exc:
            raise OutputError(f"cannot read the working cube ({exc.strerror or exc})",
                              where=str(self.path.parent)) from None
        return out

    def finalize(self) -> Path:
        raise OutputError("a raw working cube is not written as cube.zarr", where=self.name)

    def discard(self) -> None:
        """Remove the file."""
        self.path.unlink(missing_ok=True)


def _window(shape: tuple[int, ...], tile: int, row0: int, col0: int
            ) -> tuple[int, int, int, int] | None:
    """The tile window at ``row0, col0`` of ``tile_windows(shape, tile)``, None if none
    starts there."""
    ny, nx = shape[-2:]
    if row0 % tile or col0 % tile:
        return None
    return row0, col0, min(tile, ny - row0), min(tile, nx - col0)


def open_working_store(path: Path, template: xr.DataArray, *, tile: int, zarr_format: int,
                       kind: str):
    """The cube's working copy (``kind`` as :func:`working_kind` gives it): a
    :class:`MemoryStore`, a :class:`FileStore` beside ``path`` or a new Zarr store at ``path``
    (:func:`slicer.outputs.zarr_store.create_cube_store`)."""
    if kind == "memory":
        return MemoryStore(template.shape, str(template.name))
    if kind == "file":
        return FileStore.create(Path(path).parent, template.shape, str(template.name),
                                tile=tile)
    from slicer.outputs.zarr_store import create_cube_store  # zarr: only where used
    return create_cube_store(path, template, tile=tile, zarr_format=zarr_format)


__all__ = ["MEMORY_STAGING_BYTES", "FileStore", "MemoryStore", "open_working_store",
           "stages_in_memory", "working_kind"]
