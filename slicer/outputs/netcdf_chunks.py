"""The CF NetCDF cube written from chunks compressed in parallel, on the workers.

HDF5 (under NetCDF-4) has one writer per file, and deflate compression is most of the cost of
writing the cube. So the file is made first with every chunk NaN (:func:`write_skeleton`,
through the project's one NetCDF writer, so metadata and filters are the usual ones). Then
each slice's chunks are compressed wherever a core is free, by HDF5's own filter pipeline
done by hand (:func:`compress_slice`: byte shuffle of the 4-byte floats, then zlib, the
``shuffle`` and ``deflate`` filters of the HDF5 specification). The one writer stores them
as they are (:func:`store_chunks`, h5py's ``write_direct_chunk``), which is plain file I/O.
A file whose variable uses any other filter is refused, so a mismatch cannot go unseen.
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import h5py
    import xarray as xr

from slicer.core.errors import OutputError

#: zlib level of the cube's chunks (level 4 made the file 1 % smaller and took longer).
COMPLEVEL = 1


@dataclass(frozen=True)
class ChunkLayout:
    """How the cube variable of a NetCDF file is chunked and filtered."""

    name: str
    chunks: tuple[int, int, int]
    shuffle: bool
    level: int


def write_skeleton(template: xr.DataArray, target: str | Path, *, tile: int) -> ChunkLayout:
    """The NetCDF cube of ``template`` (values not read) with every chunk NaN: its layout.

    Chunks are ``(1, tile, tile)``, as in the Zarr store (:func:`expected_layout`).
    """
    import dask
    import dask.array as darray  # here: builds without NetCDF never import it

    from slicer.outputs.cube import _write_netcdf
    layout = expected_layout(template, tile=tile)
    lazy = darray.full(template.shape, np.nan, dtype=np.float32, chunks=layout.chunks)
    # in this thread: inside a dask.distributed client the default scheduler would ship
    # every NaN chunk to the cluster (13 s instead of 2 s for a 1 M-trace cube here)
    with dask.config.set(scheduler="synchronous"):
        _write_netcdf(template.copy(data=lazy), Path(target), title=None, source=None, history=None,
                      complevel=COMPLEVEL)
    found = chunk_layout(target, layout.name)
    if found != layout:
        raise OutputError(f"the NetCDF variable came out as {found}, not {layout}",
                          where=str(target))
    return layout


def expected_layout(template: xr.DataArray, *, tile: int) -> ChunkLayout:
    """The chunks and filters :func:`write_skeleton` gives the cube of ``template``."""
    _, ny, nx = template.shape
    return ChunkLayout(str(template.name), (1, min(tile, ny), min(tile, nx)), True, COMPLEVEL)


def chunk_layout(path: str | Path, name: str) -> ChunkLayout:
    """Read the chunking and filters of variable ``name``; refuse unknown filters.

    Raises
    ------
    OutputError
        The variable is not chunked, or uses a filter other than shuffle and deflate.
    """
    import h5py  # here: builds without NetCDF never import it
    with h5py.File(path, "r") as f:
        d = f[name]
        if d.chunks is None or d.compression != "gzip" or d.fletcher32 or d.scaleoffset:
            raise OutputError(f"variable {name} has chunks {d.chunks}, compression "
                              f"{d.compression}; only chunked shuffle+deflate is written "
                              "directly", where=str(path))
        return ChunkLayout(name, tuple(d.chunks), bool(d.shuffle), int(d.compression_opts))


def compress_slice(values: np.ndarray, layout: ChunkLayout) -> list[tuple[int, int, bytes]]:
    """Every chunk of one slice ``(ny, nx)``, filtered as HDF5 would: ``(row0, col0, bytes)``.

    HDF5 stores edge chunks at full size; the part outside the grid is filled with NaN
    (never read).
    """
    _, cy, cx = layout.chunks
    ny, nx = values.shape
    out = []
    for row0 in range(0, ny, cy):
        for col0 in range(0, nx, cx):
            block = np.full((cy, cx), np.nan, dtype="<f4")
            part = values[row0:row0 + cy, col0:col0 + cx]
            block[:part.shape[0], :part.shape[1]] = part
            raw = block.tobytes()
            if layout.shuffle:  # HDF5 shuffle: all first bytes, then all second bytes, ...
                raw = np.frombuffer(raw, dtype=np.uint8).reshape(-1, 4).T.tobytes()
            out.append((row0, col0, zlib.compress(raw, layout.level)))
    return out


def store_chunks(f: h5py.File, layout: ChunkLayout, index: int,
                 chunks: list[tuple[int, int, bytes]]) -> None:
    """Write one slice's compressed chunks into an open file, as they are."""
    d = f[layout.name]
    for row0, col0, data in chunks:
        d.id.write_direct_chunk((index, row0, col0), data, filter_mask=0)
