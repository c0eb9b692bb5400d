"""A build's slice GeoTIFFs written from a cube held in memory, in a raw file or in a Zarr store.

:class:`slicer.outputs.sink.CubeSink` grids into a working copy of the cube and writes the
outputs from it at the end. Since 2026-12-03 a cube of at most 64 MiB written as GeoTIFFs
alone, on threads of one process, is held in memory, and a build on worker processes that
writes the GeoTIFFs alone holds it in a raw float32 file (:mod:`slicer.outputs.working_store`);
before, always in a Zarr store in the build folder. This script times the sink all three ways
on the same cubes (24 slices of each ``--sizes`` grid, random values with a no-data corner,
tiles of 256 cells), alternating, in one process: from entering the sink to its exit (store
made, tiles written, slice COGs and overview written, store removed). It then times, in fresh
processes, the import of the sink with and without the Zarr store's module (zarr-python and
numcodecs), which a build without a Zarr store no longer imports.

Last, the raw file's tile writes alone: every tile of each cube written through a memory map of
the cube's ``(slice, y, x)`` layout (the raw file's layout until 2026-12-03 evening) against
:class:`slicer.outputs.working_store.FileStore`, which keeps each tile whole and writes it in
one ``os.pwrite``; ms per tile, median (minimum) of ``--repeat``, each into a new file.

    python benchmarks/working_store.py [--sizes 400x400,835x835] [--repeat 5]
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import numpy as np  # noqa: E402
from _common import _f, _table  # noqa: E402

import slicer.outputs.sink as sink_module  # noqa: E402
from slicer.outputs.cube import new_cube  # noqa: E402
from slicer.outputs.geotiff import tile_windows  # noqa: E402

TILE, N_SLICES = 256, 24


def make_cube(ny: int, nx: int):
    rng = np.random.default_rng(1)
    values = rng.gamma(2.0, 1.0, (N_SLICES, ny, nx)).astype(np.float32)
    values[:, : ny // 5, : nx // 5] = np.nan
    tops = 0.1 * np.arange(N_SLICES)
    return new_cube(values, west=500000.0, north=4650000.0, cell=0.1, crs="EPSG:32633",
                    top=tops, bottom=tops + 0.1, velocity=0.1)


def run(cube, out: Path, *, kind: str) -> float:
    """Seconds from entering the sink to leaving it, GeoTIFFs alone, the cube held as
    ``kind`` says (``"zarr"``: the sink as it was)."""
    rule = sink_module.working_kind
    sink_module.working_kind = lambda *a, **k: kind
    try:
        start = time.perf_counter()
        with sink_module.CubeSink(out, cube, tile=TILE, progress=False, formats=("tif",)) as s:
            for row0, col0, h, w in tile_windows(cube.shape, TILE):
                s.write(row0, col0, cube.values[:, row0:row0 + h, col0:col0 + w])
        return time.perf_counter() - start
    finally:
        sink_module.working_kind = rule


def mapped_tiles(cube, folder: Path) -> float:
    """Seconds to write every tile of ``cube`` into a new raw ``(slice, y, x)`` file through a
    memory map, as the raw file was written before it kept tiles whole."""
    import os
    path = folder / "mapped.raw"
    with open(path, "wb") as f:
        os.posix_fallocate(f.fileno(), 0, cube.values.nbytes)
    start = time.perf_counter()
    for row0, col0, h, w in tile_windows(cube.shape, TILE):
        mapped = np.memmap(path, dtype=np.float32, mode="r+", shape=cube.shape)
        mapped[:, row0:row0 + h, col0:col0 + w] = cube.values[:, row0:row0 + h, col0:col0 + w]
        del mapped
    seconds = time.perf_counter() - start
    path.unlink()
    return seconds


def whole_tiles(cube, folder: Path) -> float:
    """Seconds to write every tile of ``cube`` into a new FileStore."""
    from slicer.outputs.working_store import FileStore
    store = FileStore.create(folder, cube.shape, "envelope", tile=TILE)
    start = time.perf_counter()
    for row0, col0, h, w in tile_windows(cube.shape, TILE):
        store.write_tile(row0, col0, cube.values[:, row0:row0 + h, col0:col0 + w])
    seconds = time.perf_counter() - start
    store.discard()
    return seconds


def import_seconds(code: str) -> float:
    probe = f"import time; t = time.perf_counter(); {code}; print(time.perf_counter() - t)"
    return float(subprocess.run([sys.executable, "-c", probe], check=True,
                                capture_output=True, text=True).stdout)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sizes", default="400x400,835x835")
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args(argv)
    rows, tile_rows = [], []
    with tempfile.TemporaryDirectory() as tmp:
        for size in args.sizes.split(","):
            nx, ny = (int(v) for v in size.lower().split("x"))
            cube = make_cube(ny, nx)
            kinds = ("zarr", "file", "memory")
            for kind in kinds:  # warm-up: fonts, GDAL, zarr's event loop
                run(cube, Path(tmp) / "warm", kind=kind)
            times = {kind: [] for kind in kinds}
            for _ in range(args.repeat):
                for kind in kinds:
                    times[kind].append(run(cube, Path(tmp) / f"out_{kind}", kind=kind))
            median = {kind: statistics.median(t) for kind, t in times.items()}
            rows.append([f"{nx} x {ny}", _f(4 * cube.size / 2**20, 1),
                         *(f"{_f(median[k])} ({_f(min(times[k]))})" for k in kinds),
                         _f(median["zarr"] / median["file"]),
                         _f(median["zarr"] / median["memory"])])
            n_tiles = sum(1 for _ in tile_windows(cube.shape, TILE))
            ways = {"memory map": [], "whole tiles": []}
            for _ in range(args.repeat):
                ways["memory map"].append(mapped_tiles(cube, Path(tmp)) / n_tiles)
                ways["whole tiles"].append(whole_tiles(cube, Path(tmp)) / n_tiles)
            mid = {k: statistics.median(v) for k, v in ways.items()}
            tile_rows.append([f"{nx} x {ny}", str(n_tiles),
                              *(f"{_f(1000 * mid[k], 1)} ({_f(1000 * min(ways[k]), 1)})"
                                for k in ways),
                              _f(mid["memory map"] / mid["whole tiles"])])
    print(f"{N_SLICES} slices, tiles of {TILE}; seconds, median (minimum) of {args.repeat}")
    print(_table(["grid", "cube MiB", "Zarr store", "raw file", "memory", "Zarr/file",
                  "Zarr/memory"], rows))
    sink = statistics.median(import_seconds("import slicer.outputs.sink") for _ in range(5))
    both = statistics.median(import_seconds("import slicer.outputs.sink, "
                                            "slicer.outputs.zarr_store") for _ in range(5))
    print(f"imports in a fresh process (median of 5): slicer.outputs.sink {_f(sink)} s, "
          f"with slicer.outputs.zarr_store {_f(both)} s")
    print(f"raw file, ms per tile of {N_SLICES} slices, median (minimum) of {args.repeat}")
    print(_table(["grid", "tiles", "memory map of (slice, y, x)", "whole tiles (FileStore)",
                  "map/whole"], tile_rows))
    return 0


if __name__ == "__main__":
    sys.exit(main())
