"""Time to draw and save the overview sheet, as a build does, before and after the one-mosaic
sheet.

A build's sink keeps every slice decimated as the tiles go by (every k-th row and column,
``k = panel_stride(cube, dpi=150)``) and at the end calls ``plot_overview(template,
panels=...)`` and saves the figure as a PNG (zlib level 1, 150 dpi): that is what is timed
here, for 24 slices of each ``--sizes`` grid, in each of these ways, ``--repeat`` times,
alternating between them so that a busy spell of the machine hits both alike:

``before``
    ``slicer/outputs/figures.py`` as it was at git revision ``--before`` (default ``6cfcfa5``,
    one Axes and one image per panel), loaded from git into a module of its own.
``now``
    ``slicer.outputs.figures`` of this checkout.

The table gives the median and minimum wall time of each, the ratio before/now of the
medians, and (``PNG alone``) the median time PIL takes to encode the new sheet's pixels as
matplotlib's PNG writer does, a part of ``now`` that no drawing change can remove.

The panels are made up: a smooth background, a few bright compact anomalies, speckle,
and no data (NaN) beyond a diagonal edge of the surveyed area, each value computed at the
decimated cells only (the same values decimating the whole slice would give, without holding
24 full slices in memory).

    python benchmarks/overview.py
    python benchmarks/overview.py --sizes 200x140,4000x3000 --repeat 5
"""

from __future__ import annotations

import argparse
import importlib.util
import io
import statistics
import subprocess
import sys
import time
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import dask.array as darray  # noqa: E402 - after the thread settings
import numpy as np  # noqa: E402
from _common import _f, _table  # noqa: E402
from PIL import Image  # noqa: E402

from slicer.outputs import figures  # noqa: E402
from slicer.outputs.cube import new_cube  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
DPI = 150  # slicer.outputs.sink.OVERVIEW_DPI
N_SLICES = 24


def load_before(revision: str):
    """``slicer/outputs/figures.py`` at git ``revision``, as a module of its own."""
    source = subprocess.run(["git", "show", f"{revision}:slicer/outputs/figures.py"], cwd=ROOT,
                            check=True, capture_output=True, text=True).stdout
    spec = importlib.util.spec_from_loader(f"figures_{revision}", loader=None)
    module = importlib.util.module_from_spec(spec)
    exec(compile(source, f"figures.py@{revision}", "exec"), module.__dict__)  # noqa: S102
    return module


def make_case(ny: int, nx: int, seed: int = 7):
    """A lazy template cube of 24 slices of ``ny`` x ``nx`` cells and its decimated panels."""
    tops = 0.1 * np.arange(N_SLICES)
    template = new_cube(darray.zeros((N_SLICES, ny, nx), chunks=(1, 256, 256),
                                     dtype=np.float32),
                        west=500000.0, north=4650000.0, cell=0.05, crs="EPSG:32633", top=tops,
                        bottom=tops + 0.1, axis="depth", velocity=0.1)
    k = figures.panel_stride(template, dpi=DPI)
    rng = np.random.default_rng(seed)
    yy, xx = np.meshgrid(np.arange(0, ny, k) / ny, np.arange(0, nx, k) / nx, indexing="ij")
    panels = []
    for i in range(N_SLICES):
        field = 1 + 0.5 * np.sin(6 * xx + i) * np.cos(4 * yy - i)
        for cy, cx, r in rng.uniform([0, 0, 0.01], [1, 1, 0.05], (6, 3)):
            field += 3 * np.exp(-((yy - cy) ** 2 + (xx - cx) ** 2) / (2 * r * r))
        field += 0.3 * rng.random(field.shape)
        field[xx + yy < 0.25] = np.nan  # beyond the surveyed area
        panels.append(field.astype(np.float32))
    return template, panels, k


def draw_and_save(module, template, panels) -> float:
    """Wall time (s) of one overview as the sink draws and saves it."""
    start = time.perf_counter()
    figure = module.plot_overview(template, dpi=DPI, panels=panels)
    figure.savefig(io.BytesIO(), format="png", dpi=DPI, pil_kwargs={"compress_level": 1})
    return time.perf_counter() - start


def encode_only(module, template, panels) -> float:
    """Wall time (s) of encoding the drawn sheet's RGBA pixels as PNG (zlib level 1) alone."""
    figure = module.plot_overview(template, dpi=DPI, panels=panels)
    figure.canvas.draw()
    picture = Image.fromarray(np.asarray(figure.canvas.buffer_rgba()))
    start = time.perf_counter()
    picture.save(io.BytesIO(), format="png", compress_level=1)
    return time.perf_counter() - start


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sizes", default="200x140,1000x1000,2000x2000",
                        help="slice sizes, columns x rows (default %(default)s)")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--before", default="6cfcfa5", help="git revision of the old sheet")
    args = parser.parse_args(argv)
    ways = {"before": load_before(args.before), "now": figures}
    rows = []
    for size in args.sizes.split(","):
        nx, ny = (int(v) for v in size.lower().split("x"))
        template, panels, k = make_case(ny, nx)
        times = {name: [] for name in ways}
        encode = []
        for module in ways.values():  # warm-up: fonts, caches
            draw_and_save(module, template, panels)
        for _ in range(args.repeat):
            for name, module in ways.items():
                times[name].append(draw_and_save(module, template, panels))
            encode.append(encode_only(figures, template, panels))
        median = {name: statistics.median(t) for name, t in times.items()}
        rows.append([f"{nx} x {ny}", str(k), f"{panels[0].shape[1]} x {panels[0].shape[0]}",
                     _f(median["before"]), _f(min(times["before"])), _f(median["now"]),
                     _f(min(times["now"])), _f(median["before"] / median["now"], 1),
                     _f(statistics.median(encode))])
        print(f"{size}: done", file=sys.stderr)
    print(f"{N_SLICES} slices, {DPI} dpi, PNG zlib level 1; before = {args.before}; "
          f"times in s, median and minimum of {args.repeat}")
    print(_table(["slice cells", "stride", "panel cells", "before", "before min", "now",
                  "now min", "before/now", "PNG alone"], rows))
    return 0


if __name__ == "__main__":
    sys.exit(main())
