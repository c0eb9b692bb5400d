"""Where a build's cube is held while its tiles arrive: a Zarr store on disk, or memory.

:class:`slicer.outputs.sink.CubeSink` grids tile by tile into a working copy of the cube and
writes the outputs from it once it is complete. On disk (:mod:`slicer.outputs.zarr_store`) that
copy can be larger than memory, become ``cube.zarr``, feed ``cube.nc`` and be read by worker
processes. A build that asks for the slice GeoTIFFs alone, on threads of one process, with a
cube of at most :data:`MEMORY_STAGING_BYTES`, keeps it in memory instead: no Zarr import, no
store to create, no chunks to compress and read back. The sink of a 24 x 400 x 400 cube took
0.53 s through the store and 0.31 s from memory, of a 24 x 835 x 835 one 1.65 and 0.90 s
(benchmarks/working_store.py).
"""

from __future__ import annotations

from collections.abc import Collection
from pathlib import Path

import numpy as np
import xarray as xr

from slicer.core.errors import OutputError
from slicer.outputs.cube import check_tile

#: Largest cube (bytes of float32 values) kept in memory while it is gridded: a 64 MiB cube is
#: 24 slices of 835 x 835 cells, more than a 400 k-trace survey at a 0.1 m cell.
MEMORY_STAGING_BYTES = 64 * 2**20


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


def open_working_store(path: Path, template: xr.DataArray, *, tile: int, zarr_format: int,
                       in_memory: bool):
    """The cube's working copy: a :class:`MemoryStore` (``in_memory``) or a new Zarr store at
    ``path`` (:func:`slicer.outputs.zarr_store.create_cube_store`)."""
    if in_memory:
        return MemoryStore(template.shape, str(template.name))
    from slicer.outputs.zarr_store import create_cube_store  # zarr: only where used
    return create_cube_store(path, template, tile=tile, zarr_format=zarr_format)


__all__ = ["MEMORY_STAGING_BYTES", "MemoryStore", "open_working_store", "stages_in_memory"]
