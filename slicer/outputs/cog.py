"""Cloud Optimized GeoTIFF layout of the slice files, left to GDAL's COG driver.

A COG keeps every image file directory (IFD) at the start of the file and stores the reduced
resolution overviews before the full resolution tiles, so a reader fetching a corner or a small
preview over HTTP needs a few range requests. GDAL's COG driver only copies a finished dataset
(``CreateCopy``); rasterio gives it one of two sources here:

* a whole slice in memory: ``rasterio.open(path, "w", driver="COG", ...)`` buffers the slice in
  a GDAL MEM dataset and copies it into the file on close (:func:`cog_profile`);
* a slice streamed tile by tile into an uncompressed tiled GeoTIFF on disk, copied at the end
  with :func:`copy_to_cog`, which reads it block by block, so no slice is held in memory.

Either way the overviews are built first, on the source (levels 2, 4, 8, ... until the
smallest fits in one block, none when the slice already fits in one block:
:func:`overview_factors`), and the driver lays them out as they are
(``OVERVIEWS=FORCE_USE_EXISTING``). Left to the driver (``OVERVIEWS=AUTO``), the same overviews
cost 38 of the 83 ms a 1000 x 1000 slice took to write, against 6-7 ms built on the source
(benchmarks/cog_write.py).
"""

from __future__ import annotations

import contextlib
import math
import os

import numpy as np

# rasterio is imported where a file is written: the process that plans a build on worker
# processes makes the profiles and never writes a slice (0.13 s of its start).

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
        "overview_resampling": OVERVIEW_RESAMPLING,
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
    import rasterio
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


def overview_factors(width: int, height: int, block_size: int) -> list[int]:
    """Overview levels of a ``width`` x ``height`` raster in square blocks of ``block_size``:
    2, 4, 8, ... until the reduced raster (sides rounded up) fits in one block; none when the
    raster does (common practice; GDAL's COG driver does the same for ``OVERVIEWS=AUTO``).

    Levels stop once the shorter side is down to one cell: a level that cannot reduce it
    reads as a decimation of 1, which rio-cogeo's validator refuses (a slice one cell wide
    had five such levels under ``OVERVIEWS=AUTO``).
    """
    factors, f = [], 1
    while max(-(-width // f), -(-height // f)) > block_size and \
            min(-(-width // f), -(-height // f)) > 1:
        f *= 2
        factors.append(f)
    return factors


def _add_overviews(dataset, factors: list[int]) -> None:
    """Build the overviews of ``dataset`` (open for writing), each level from the full
    resolution: asked for together, a GeoTIFF's levels are each reduced from the level
    before, and a mean of means weights a block with missing cells wrongly (seen with GDAL
    3.10; a MEM dataset reduces each from the full resolution either way)."""
    from rasterio.enums import Resampling
    for f in factors:
        dataset.build_overviews([f], Resampling[OVERVIEW_RESAMPLING])


def _cog_options(profile: dict, factors: list[int]) -> dict:
    """The COG driver's creation options of ``profile``, laying out the source's overviews."""
    options = {k: v for k, v in profile.items() if k not in (*_BASE, "driver")}
    options["overviews"] = "force_use_existing" if factors else "none"
    return options


def write_cog(target: str | os.PathLike, values: np.ndarray, profile: dict, *,
              label=None) -> None:
    """Write ``values`` (rows, columns) as the COG ``target`` with ``profile``
    (:func:`cog_profile`); ``label(dataset)``, if given, sets tags, description and unit first.

    The slice goes into a GDAL MEM dataset with its averaged overviews, which the COG driver
    copies (tags, band description, unit and nodata along with the pixels). Memory: the slice
    twice, and a third more for the overviews.
    """
    import rasterio
    import rasterio.shutil
    base = {k: profile[k] for k in _BASE}
    factors = overview_factors(base["width"], base["height"], profile["blocksize"])
    with cog_env(), rasterio.open("slice", "w", driver="MEM", **base) as source:
        if label is not None:
            label(source)
        source.write(values, 1)
        _add_overviews(source, factors)
        rasterio.shutil.copy(source, str(target), driver="COG",
                             **_cog_options(profile, factors))


def copy_to_cog(source: str | os.PathLike, target: str | os.PathLike, profile: dict) -> None:
    """Copy the GeoTIFF ``source`` into the COG ``target`` with ``profile`` (:func:`cog_profile`).

    The overviews are first added to ``source`` itself (uncompressed, as the source is), read
    block by block; tags, band description, unit and nodata go along with the pixels (GDAL
    ``CreateCopy``).
    """
    import rasterio
    import rasterio.shutil
    with cog_env():
        with rasterio.open(str(source), "r+") as staged:
            factors = overview_factors(staged.width, staged.height, profile["blocksize"])
            _add_overviews(staged, factors)
        rasterio.shutil.copy(str(source), str(target), driver="COG",
                             **_cog_options(profile, factors))
