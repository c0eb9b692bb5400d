"""Where a build's cube goes: every output written tile by tile, committed all at once.

A cube larger than memory is produced one tile (a block of rows x columns of the grid, every
slice) at a time. :class:`CubeSink` hands each tile to the slice GeoTIFFs and the Zarr store,
both kept under temporary names; when the build is done it writes the CF NetCDF cube and the
overview sheet from the Zarr store (lazily, chunk by chunk) and only then moves every file to
its final name. If anything fails on the way, every temporary file is removed and the final
names are left as they were, so a folder never holds a half-written output.

Layout of ``out_dir``::

    slices/slice_000_0.000-0.100m.tif ...   one GeoTIFF per slice
    cube.zarr/                               the cube, chunked (slice x tile x tile)
    cube.nc                                  the cube, CF-1.8 NetCDF-4
    overview.png                             every slice on one colour scale
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Mapping
from pathlib import Path

import dask
import xarray as xr

from ._atomic import atomic_path
from ._cube import TILE, _check_tile_size, _write_netcdf, check_tile, slice_axis
from ._errors import OutputError, SettingsError
from ._figures import plot_overview
from ._geotiff import SliceTiffWriter, tile_windows
from ._progress import progress_bar
from ._zarr import ZARR_FORMAT, create_cube_store, open_cube_zarr

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
        The cube's grid, windows, CRS and attrs (e.g. :func:`slicer._cube.empty_cube`); its
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
        Format of ``cube.zarr`` (see :mod:`slicer._zarr`).

    Attributes
    ----------
    files : list of pathlib.Path
        After a successful exit: the GeoTIFFs in slice order, then ``cube.zarr``, ``cube.nc``
        and ``overview.png``.
    """

    def __init__(self, out_dir: str | os.PathLike, cube_template: xr.DataArray, *,
                 tags: Mapping[str, object] | None = None, tile: int = TILE,
                 progress: bool = True, title: str | None = None,
                 zarr_format: int = ZARR_FORMAT):
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
        self._store = None
        self._bar = None
        self._created = [p for p in (self.out_dir, *self.out_dir.parents) if not p.exists()]

    def __enter__(self) -> CubeSink:
        out = self.out_dir
        if out.exists() and not out.is_dir():
            raise OutputError("output path is a file, not a folder", where=str(out))
        try:
            out.mkdir(parents=True, exist_ok=True)
            self._tiffs = SliceTiffWriter(self.template, out / SLICES_DIR, tags=self._tags,
                                          tile=self.tile)
            self._store = create_cube_store(out / ZARR_NAME, self.template, tile=self.tile,
                                            zarr_format=self._zarr_format)
        except BaseException:
            self._abort()
            raise
        n_tiles = sum(1 for _ in tile_windows(self.shape, self.tile))
        self._bar = progress_bar(total=n_tiles, desc="writing tiles", unit="tile",
                                 enabled=self._progress)
        return self

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
        self._tiffs.write(row0, col0, values)
        self._store.write_tile(row0, col0, values)
        self._bar.update(1)

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
        out = self.out_dir
        self._tiffs.close()
        # The NetCDF cube and the overview are made from the finished (still temporary)
        # store, lazily, on local threads whatever scheduler the build used: they read
        # local files and write one file each.
        with dask.config.set(scheduler="threads"):
            cube = open_cube_zarr(self._store.path)
            with atomic_path(out / NETCDF_NAME) as nc, atomic_path(out / OVERVIEW_NAME) as png:
                try:
                    _write_netcdf(cube, nc, title=None, source=None, history=None,
                                  complevel=4)
                except OSError as exc:
                    raise OutputError(f"cannot write NetCDF ({exc})",
                                      where=str(out / NETCDF_NAME)) from None
                figure = plot_overview(cube, title=self._title, dpi=OVERVIEW_DPI)
                try:
                    figure.savefig(png, format="png", dpi=OVERVIEW_DPI)
                except OSError as exc:
                    raise OutputError(f"cannot save figure ({exc})",
                                      where=str(out / OVERVIEW_NAME)) from None
                del figure, cube
                # Everything is complete under temporary names: now the renames.
                tiffs = self._tiffs.commit()
                store = self._store.finalize()
        self.files = [*tiffs, store, out / NETCDF_NAME, out / OVERVIEW_NAME]

    def _close_bar(self, *, keep: bool) -> None:
        if self._bar is not None:
            self._bar.leave = keep
            self._bar.close()
            self._bar = None

    def _abort(self) -> None:
        self._close_bar(keep=False)
        if self._tiffs is not None:
            self._tiffs.abort()
        if self._store is not None:
            self._store.discard()
        for folder in self._created:  # only folders the sink made, innermost first
            with contextlib.suppress(OSError):
                folder.rmdir()


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
        A cube as built by :func:`slicer._cube.new_cube`.
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
