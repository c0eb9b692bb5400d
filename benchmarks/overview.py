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
    ``slicer.outputs.figures`` of this checkout (matplotlib: the sheet a user's
    ``plot_overview`` returns).
``build``
    the page a build saves since 2026-12-03 (:mod:`slicer.outputs.sheet_png`: the same sheet
    drawn with NumPy and Pillow, written as a palette PNG), all slices on one page as above.

The table gives the median and minimum wall time of each, the ratios before/now and
now/build of the medians, and (``PNG alone``) the median time PIL takes to encode the
matplotlib sheet's pixels as matplotlib's PNG writer does, a part of ``now`` that no drawing
change can remove. A last line gives the time each way's modules take to import.

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


def build_page(template, panels) -> float:
    """Wall time (s) of the same sheet drawn and encoded as a build's page."""
    from slicer.outputs.display import Display
    from slicer.outputs.overview_plan import OverviewPlan
    from slicer.outputs.sheet_png import page_png
    start = time.perf_counter()
    plan = OverviewPlan(template, Display(), title=None, dpi=DPI, panels=panels)
    ncols, nrows, pages = plan.pages(N_SLICES)
    for first, stop, page in pages:
        page_png(plan.drawn[first:stop], **plan.page(first, stop, page=page), ncols=ncols,
                 nrows=nrows)
    return time.perf_counter() - start


IMPORTS = {"now": "slicer.outputs.figures",
           "build": "slicer.outputs.sheet_png, slicer.outputs.overview_plan"}


def import_seconds(modules: str) -> float:
    """Seconds to import ``modules`` in a fresh interpreter that has imported what a build has
    when it draws the overview: the sink that calls it and the radargrams' drawing."""
    code = ("import time, slicer.outputs.sink, slicer.outputs.radargram_pages; "
            f"t = time.perf_counter(); import {modules}; print(time.perf_counter() - t)")
    return float(subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                                text=True).stdout)


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
        times = {name: [] for name in [*ways, "build"]}
        encode = []
        for module in ways.values():  # warm-up: fonts, caches
            draw_and_save(module, template, panels)
        build_page(template, panels)
        for _ in range(args.repeat):
            for name, module in ways.items():
                times[name].append(draw_and_save(module, template, panels))
            times["build"].append(build_page(template, panels))
            encode.append(encode_only(figures, template, panels))
        median = {name: statistics.median(t) for name, t in times.items()}
        rows.append([f"{nx} x {ny}", str(k), f"{panels[0].shape[1]} x {panels[0].shape[0]}",
                     _f(median["before"]), _f(min(times["before"])), _f(median["now"]),
                     _f(min(times["now"])), _f(median["before"] / median["now"], 1),
                     _f(statistics.median(encode)), _f(median["build"]),
                     _f(min(times["build"])), _f(median["now"] / median["build"], 1)])
        print(f"{size}: done", file=sys.stderr)
    print(f"{N_SLICES} slices, {DPI} dpi, PNG zlib level 1; before = {args.before}; "
          f"times in s, median and minimum of {args.repeat}")
    print(_table(["slice cells", "stride", "panel cells", "before", "before min", "now",
                  "now min", "before/now", "PNG alone", "build", "build min", "now/build"],
                 rows))
    imports = {name: statistics.median(import_seconds(m) for _ in range(3))
               for name, m in IMPORTS.items()}
    print("imports in a fresh process (median of 3, s): " + ", ".join(
        f"{name} ({IMPORTS[name]}) {_f(v)}" for name, v in imports.items()))
    return 0


if __name__ == "__main__":
    sys.exit(main())
