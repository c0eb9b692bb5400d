"""Cost of writing slice GeoTIFFs as Cloud Optimized GeoTIFFs, against the layout before them.

Writes the same slices (default four of 2000 x 2000 float32 cells, ``--size``/``--slices``) in
each of these ways, ``--repeat`` times, alternating between ways so that a busy spell of the
machine hits all of them alike:

``before``
    The layout slicer wrote until the slices became COGs, re-made here with rasterio: a tiled
    DEFLATE GeoTIFF (level 1, floating-point predictor), pixels written in 256 x 256 windows,
    then the tags, band description and unit, which made GDAL rewrite the header at the end.
``tags first``
    The same file with the tags, description and unit set right after opening (no overviews).
``COG whole``
    slicer's whole-slice path (``SliceTiffWriter(deferred=True).write_slice``, which is
    ``write_slice_file``): the slice in a GDAL MEM dataset with its averaged overviews, which
    GDAL's COG driver copies (``slicer.outputs.cog.write_cog``).
``COG streamed``
    slicer's streaming path (``SliceTiffWriter.write_band`` in 256 x 256 windows, as
    ``CubeSink`` does): an uncompressed staging GeoTIFF per slice, given its overviews and
    copied into a COG on commit.
``COG streamed, deflate staging``
    The same with the staging file compressed as the final file is (a variant made by this
    script), to show why the staging file is left uncompressed.

The table gives the median and minimum wall time, their ratio to ``before``, the size of one
file and what rio-cogeo's ``cog_validate`` says of it. The slice is made up: a smooth
background, a dozen bright compact anomalies, speckle, and no data (NaN) beyond a diagonal edge
of the surveyed area and in a gap, like an envelope slice of a field survey.

    python benchmarks/cog_write.py
    python benchmarks/cog_write.py --size 4000 --slices 2 --repeat 3
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import numpy as np  # noqa: E402 - after the thread settings
from _common import _f, _table  # noqa: E402

import slicer.outputs.geotiff as _geotiff  # noqa: E402 - after the thread settings
from slicer.outputs.cube import new_cube  # noqa: E402

WINDOW = 256  # the build's tile edge (slicer.pipeline.cube_build.TILE)


def make_cube(size: int, n: int, seed: int = 11):
    """``n`` made-up envelope slices of ``size`` x ``size`` cells (see the module docstring)."""
    from scipy import ndimage
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:size, :size].astype(np.float32) / size
    slices = []
    for _ in range(n):
        field = ndimage.gaussian_filter(rng.standard_normal((size, size)), size / 100) * 40
        for cy, cx, r in rng.uniform([0, 0, 0.005], [1, 1, 0.03], (12, 3)):
            field += 3 * np.exp(-((yy - cy) ** 2 + (xx - cx) ** 2) / (2 * r * r))
        field = np.abs(field) + 0.2 * rng.random((size, size))
        field[xx + yy < 0.25] = np.nan  # beyond the surveyed area
        field[(np.abs(yy - 0.6) < 0.01) & (xx > 0.5)] = np.nan  # a gap between lines
        slices.append(field.astype(np.float32))
    tops = 0.1 * np.arange(n)
    return new_cube(np.stack(slices), west=500000.0, north=4650000.0, cell=0.05,
                    crs="EPSG:32633", top=tops, bottom=tops + 0.1, axis="depth",
                    velocity=0.1, processing="dewow; background removal; envelope")


def _gtiff_profile(writer) -> dict:
    """The tiled DEFLATE GeoTIFF profile slicer used before the COGs (from its git history)."""
    p = writer._profile
    return {"driver": "GTiff", "width": p["width"], "height": p["height"], "count": 1,
            "dtype": "float32", "crs": p["crs"], "transform": p["transform"],
            "nodata": np.nan, "tiled": True, "blockxsize": WINDOW, "blockysize": WINDOW,
            "compress": "deflate", "predictor": 3, "zlevel": 1, "geotiff_version": "1.1"}


def _plain(cube, folder: Path, *, tags_first: bool) -> None:
    import rasterio
    from rasterio.windows import Window
    writer = _geotiff.SliceTiffWriter(cube, folder, deferred=True)  # names, tags, profile
    profile = _gtiff_profile(writer)
    for i, path in enumerate(writer.paths):
        with rasterio.open(path, "w", **profile) as dst:
            label = (writer._tags[i], writer._descriptions[i], writer._units)
            if tags_first:
                _geotiff._label(dst, *label)
            for row0, col0, h, w in _geotiff.tile_windows(cube.shape, WINDOW):
                dst.write(cube.values[i, row0:row0 + h, col0:col0 + w], 1,
                          window=Window(col0, row0, w, h))
            if not tags_first:
                _geotiff._label(dst, *label)
    writer.abort()  # only its reserved temporary names are removed


def _whole(cube, folder: Path) -> None:
    with _geotiff.SliceTiffWriter(cube, folder, tile=WINDOW, deferred=True) as writer:
        for i in range(cube.shape[0]):
            writer.write_slice(i, cube.values[i])


def _streamed(cube, folder: Path) -> None:
    with _geotiff.SliceTiffWriter(cube, folder, tile=WINDOW) as writer:
        for row0, col0, h, w in _geotiff.tile_windows(cube.shape, WINDOW):
            for i in range(cube.shape[0]):
                writer.write_band(i, row0, col0, cube.values[i, row0:row0 + h, col0:col0 + w])


def _streamed_deflate(cube, folder: Path) -> None:
    real = _geotiff.staging_profile

    def deflate(base, *, tile):
        return {**real(base, tile=tile), "compress": "deflate", "predictor": 3, "zlevel": 1}

    _geotiff.staging_profile = deflate
    try:
        _streamed(cube, folder)
    finally:
        _geotiff.staging_profile = real


WAYS = {
    "before": lambda cube, folder: _plain(cube, folder, tags_first=False),
    "tags first": lambda cube, folder: _plain(cube, folder, tags_first=True),
    "COG whole": _whole,
    "COG streamed": _streamed,
    "COG streamed, deflate staging": _streamed_deflate,
}


def _validate(path: Path) -> str:
    from rio_cogeo.cogeo import cog_validate
    valid, errors, warnings = cog_validate(str(path), quiet=True)
    first = (errors or warnings or [""])[0]
    return f"{'yes' if valid else 'no'} {len(errors)}e {len(warnings)}w {first[:38]}".rstrip()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=2000, help="slice edge, cells")
    parser.add_argument("--slices", type=int, default=4)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()

    import rasterio
    cube = make_cube(args.size, args.slices)
    times: dict[str, list[float]] = {name: [] for name in WAYS}
    with tempfile.TemporaryDirectory(prefix="cog_write.") as tmp:
        for r in range(args.repeat + 1):  # the first round warms caches and is not counted
            for name, way in WAYS.items():
                folder = Path(tmp) / name.replace(" ", "_").replace(",", "")
                start = time.perf_counter()
                way(cube, folder)
                if r:
                    times[name].append(time.perf_counter() - start)
        rows = []
        base = statistics.median(times["before"])
        for name in WAYS:
            folder = Path(tmp) / name.replace(" ", "_").replace(",", "")
            first = sorted(folder.glob("*.tif"))[0]
            with rasterio.open(first) as src:
                overviews = ",".join(map(str, src.overviews(1))) or "-"
            med = statistics.median(times[name])
            rows.append([name, _f(med, 3), _f(min(times[name]), 3), _f(med / base, 2),
                         _f(first.stat().st_size / 2**20, 1), overviews, _validate(first)])
    print(f"{args.slices} slices of {args.size} x {args.size} float32, {args.repeat} runs each "
          f"(median), {os.cpu_count()} cores, python {sys.version.split()[0]}, rasterio "
          f"{rasterio.__version__}, GDAL {rasterio.__gdal_version__}")
    print(_table(["way", "median s", "min s", "x before", "MiB/file", "overviews",
                  "cog_validate"], rows))


if __name__ == "__main__":
    main()
