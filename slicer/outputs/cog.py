"""Cloud Optimized GeoTIFF layout of the slice files, left to GDAL's COG driver.

A COG keeps every image file directory (IFD) at the start of the file and stores the reduced
resolution overviews before the full resolution tiles, so a reader fetching a corner or a small
preview over HTTP needs a few range requests. GDAL's COG driver only copies a finished dataset
(``CreateCopy``); rasterio gives it one of two sources here:

* a whole slice in memory: ``rasterio.open(path, "w", driver="COG", ...)`` buffers the slice in
  a GDAL MEM dataset and copies it into the file on close (:func:`cog_profile`);
* a slice streamed tile by tile into an uncompressed tiled GeoTIFF on disk, copied at the end
  with :func:`copy_to_cog`, which reads it block by block, so no slice is held in memory.

Either way the driver builds the overviews itself (``OVERVIEWS=AUTO``): levels 2, 4, 8, ...
until the smallest fits in one block, and none when the slice already fits in one block.
"""

from __future__ import annotations

import contextlib
import math
import os

import rasterio
import rasterio.shutil

#: Default TIFF block edge, pixels; TIFF tiles must be multiples of 16.
TILE = 256
#: Largest TIFF block edge chosen for a large output tile, pixels.
MAX_BLOCK = 512

#: Overview resampling. GDAL's "average" leaves nodata (NaN here) out of each mean, so a reduced
#: cell holding any valid value keeps the mean of the valid ones and only all-NaN blocks stay
#: NaN; "nearest" would keep one pixel of four, which may be a hole beside valid data, and
#: aliases the small anomalies slices are looked at for. The cubic default of the COG driver
#: spreads a NaN over its neighbours and overshoots at the edges of the surveyed area.
OVERVIEW_RESAMPLING = "average"

#: Profile keys describing the raster itself, as opposed to the driver's creation options.
_BASE = ("width", "height", "count", "dtype", "crs", "transform", "nodata")


def tile_block(tile: int) -> int:
    """Largest TIFF block edge (a multiple of 16, at most 512) that divides ``tile``, pixels.

    Every window written then fills whole TIFF blocks (TIFF 6.0 section 15: tile edges are
    multiples of 16), so GDAL never compresses a half-filled block and rewrites it later.
    """
    for size in range(min(MAX_BLOCK, tile) // 16 * 16, 15, -16):
        if tile % size == 0:
            return size
    return TILE


def block(n: int, tile: int = TILE) -> int:
    """Block edge for a raster side of ``n`` pixels written in windows of ``tile``, pixels.

    Whole blocks for large rasters; one block (rounded up to 16) for small ones, so a small
    slice is not padded out to a mostly empty 256 x 256 block.
    """
    return min(tile_block(tile), 16 * math.ceil(n / 16))


def cog_profile(base: dict, *, tile: int = TILE) -> dict:
    """rasterio profile writing a COG: ``base`` (size, dtype, CRS, transform, nodata) + options.

    Parameters
    ----------
    base : dict
        ``width``, ``height``, ``count``, ``dtype``, ``crs``, ``transform``, ``nodata``.
    tile : int
        Edge of the windows the slice is written in, cells; the square COG block is
        :func:`block` of the larger side, so a small slice is one block and has no overviews.
        Write with :func:`cog_env` in force.
    """
    return {
        **{k: base[k] for k in _BASE}, "driver": "COG",
        "blocksize": block(max(base["width"], base["height"]), tile),
        # zlib level 1: envelope slices compress no better at the default level 6 (the
        # floating-point predictor does the work), which took a fifth longer to write
        "compress": "deflate", "predictor": "floating_point", "level": 1,
        "overviews": "auto", "overview_resampling": OVERVIEW_RESAMPLING,
        # Key directory version 1.1 as in OGC 19-008r4 (GeoTIFF 1.1).
        "geotiff_version": "1.1",
    }


@contextlib.contextmanager
def cog_env():
    """GDAL settings under which slicer writes COGs.

    GDAL's COG driver lists 128 as the least BLOCKSIZE and warns below it (GDAL 3.10), yet
    writes smaller blocks that GDAL, tifffile and rio-cogeo's validator all accept. slicer keeps
    them: a small slice is one block rounded up to 16 pixels rather than a mostly empty 128 x 128
    one, and blocks keep dividing the build's tile. So creation options are not checked against
    the driver's list here; the tests read every option back from the files instead.
    """
    with rasterio.Env(GDAL_VALIDATE_CREATION_OPTIONS=False):
        yield


def staging_profile(base: dict, *, tile: int = TILE) -> dict:
    """rasterio profile of the uncompressed tiled GeoTIFF a slice is streamed into first.

    Uncompressed, because :func:`copy_to_cog` reads it once and compresses the COG itself:
    compressing the staged file too made streaming 2000 x 2000 slices about 1.6x slower
    (benchmarks/cog_write.py). Its blocks divide ``tile``, so each window fills whole blocks.
    Blocks never written stay off the disk and read back as nodata (GDAL's ``SPARSE_OK``):
    otherwise closing an abandoned file would first fill it with NaN blocks.
    """
    return {**{k: base[k] for k in _BASE}, "driver": "GTiff", "tiled": True,
            "blockxsize": block(base["width"], tile), "blockysize": block(base["height"], tile),
            "compress": "none", "sparse_ok": True}


def copy_to_cog(source: str | os.PathLike, target: str | os.PathLike, profile: dict) -> None:
    """Copy the GeoTIFF ``source`` into the COG ``target`` with ``profile`` (:func:`cog_profile`).

    Tags, band description, unit and nodata go along with the pixels (GDAL ``CreateCopy``).
    The driver reads the source block by block and keeps the overviews it builds in a
    temporary file beside ``target`` until it lays them out.
    """
    options = {k: v for k, v in profile.items() if k not in (*_BASE, "driver")}
    with cog_env():
        rasterio.shutil.copy(str(source), str(target), driver="COG", **options)
