"""Build throughput of slicer on synthetic surveys of a few sizes.

For each size this script writes a synthetic SEG-Y survey with :mod:`slicer.synthetic` (timed
apart, not part of the build), then measures on the same files in the same run:

* ``slicer.build_cube`` (in memory) and ``slicer.build`` (all outputs written), each in a fresh
  process so that its peak resident memory (``VmHWM`` from /proc, not ``ru_maxrss``, which a
  spawned child inherits from its parent) belongs to that build alone;
* the floor: every trace read once through a memory map (segyio) and its envelope computed in
  float32 by real FFTs with reused buffers (``_common.TunedFloor``), zero-padded as the
  pipeline pads;
* gridding alone: ``slicer.grid_slices`` on the survey's trace x slice table against
  :func:`scipy.interpolate.griddata` (``method="linear"``) looped over the slices, onto the same
  cell centres.

Run ``python benchmarks/build_throughput.py --help``; see ``benchmarks/README.md``.
"""

from __future__ import annotations

import argparse
import concurrent.futures
import contextlib
import cProfile
import datetime as _dt
import importlib.metadata as md
import io
import math
import os
import platform
import pstats
import subprocess
import sys
import tempfile
import threading
import time
import tracemalloc
import warnings
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import numpy as np  # noqa: E402 - after the thread settings
import scipy.fft  # noqa: E402 - after the thread settings
import scipy.interpolate  # noqa: E402 - after the thread settings
import scipy.signal  # noqa: E402 - after the thread settings
from _common import (  # noqa: E402
    TunedFloor,
    _f,
    _memory_mib,
    _table,
    compile_slicer,
    in_fresh_process,
    square_patch,
)

import slicer  # noqa: E402 - after the thread settings
import slicer.synthetic as syn  # noqa: E402 - after the thread settings

#: The contract settings every size is built with (ns, ns, m/ns, m, m).
SETTINGS = dict(crs="EPSG:32633", sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.1,
                depths="0:2.4:0.1")

#: Survey layout: lines 0.5 m apart, traces 0.05 m apart (a typical 400 MHz grid).
LINE_SPACING, TRACE_SPACING = 0.5, 0.05
WEST, SOUTH = 512000.0, 4650000.0
SAMPLES = 512

#: A build/floor ratio above this triggers the cProfile run.
PROFILE_ABOVE = 3.0


# --- synthetic surveys -------------------------------------------------------------------------

def plan(n_traces: int) -> list[syn.PlannedLine]:
    """Zigzag west-east lines over a roughly square patch holding about ``n_traces`` traces."""
    return square_patch(n_traces, line_spacing=LINE_SPACING, trace_spacing=TRACE_SPACING,
                        west=WEST, south=SOUTH)


def ground_for(lines: list[syn.PlannedLine]) -> syn.Ground:
    """A few point and line targets and one layer spread over the patch (invented, seeded)."""
    east = max(max(p.start_x, p.end_x) for p in lines) - WEST
    north = max(max(p.start_y, p.end_y) for p in lines) - SOUTH
    rng = np.random.default_rng(7)
    points = tuple(
        syn.PointTarget(WEST + float(u) * east, SOUTH + float(v) * north, float(d))
        for u, v, d in zip(rng.uniform(0.1, 0.9, 8), rng.uniform(0.1, 0.9, 8),
                           rng.uniform(0.3, 2.0, 8), strict=True))
    drain = syn.LineTarget(WEST + 0.3 * east, SOUTH, WEST + 0.7 * east, SOUTH + north, 0.95,
                           amplitude=0.8)
    return syn.Ground(velocity=0.1, attenuation_db_per_m=3.0, targets=(*points, drain),
                      layers=(syn.Layer(1.65, 0.3),))


def make_survey(folder: Path, n_traces: int) -> tuple[Path, list[Path], float, bool]:
    """Write (or reuse) the survey of one size; its line table, files and seconds taken."""
    table = folder / "lines.csv"
    if table.exists():  # a kept survey from an earlier run
        files = sorted(folder.glob("*.sgy"))
        return table, files, math.nan, True
    lines = plan(n_traces)
    radar = syn.Radar(frequency_mhz=400.0, sample_interval_ns=0.1, samples=SAMPLES,
                      time_zero_ns=3.0, seed=20240611)
    started = time.perf_counter()
    survey = syn.write_survey(folder, ground_for(lines), radar, lines, format="segy",
                              crs=SETTINGS["crs"], progress=False)
    return survey.line_table, list(survey.files), time.perf_counter() - started, False


# --- measurements ------------------------------------------------------------------------------

def _settings(table: Path, out: Path | None = None):
    # the full build writes every output, as it did before --formats (its default is tif only)
    extra = {"formats": "tif,zarr,nc"} if out is not None else {}
    return slicer.load_settings(table, **SETTINGS, out=out, overwrite=out is not None, **extra)


def measure_build(table: str, out: str | None) -> dict:
    """Time one build in this (fresh) process: ``build_cube``, or ``build`` when ``out`` is set."""
    settings = _settings(Path(table), Path(out) if out else None)
    before, _, _ = _memory_mib()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        started = time.perf_counter()
        if out is None:
            result = slicer.build_cube(settings, progress=False)
        else:
            result = slicer.build(settings, progress=False)
        seconds = time.perf_counter() - started
    _, peak, source = _memory_mib()
    return {"seconds": seconds, "phases": dict(result.record.get("seconds", {})),
            "rss_before_mib": before, "rss_peak_mib": peak, "peak_source": source,
            "shape": tuple(int(n) for n in result.cube.shape),
            "warnings": sorted({f"{w.category.__name__}: {w.message}" for w in caught})}


def measure_floor(files: list[Path], *, workers: int = 1) -> tuple[float, int]:
    """Seconds to read every trace once and take its envelope, done well (:class:`TunedFloor`:
    memory-mapped reads, float32 FFTs into reused buffers).

    With ``workers > 1`` the files are shared out over that many threads (a floor each), for
    comparison with a build that uses several cores.
    """
    started = time.perf_counter()
    if workers == 1:
        floor = TunedFloor()
        count = sum(floor(path) for path in files)
    else:
        local = threading.local()

        def one(path):
            if not hasattr(local, "floor"):
                local.floor = TunedFloor()
            return local.floor(path)

        with concurrent.futures.ThreadPoolExecutor(max_workers=workers) as pool:
            count = sum(pool.map(one, files))
    return time.perf_counter() - started, count


def _grid_one_worker(values, grid_args: dict) -> float:
    """Seconds of ``grid_slices`` on one thread, to compare core for core with griddata.

    Uses the private engine module; NaN if this version of slicer has none.
    """
    try:
        from slicer.pipeline.engine import Engine, parse_scheduler
        engine = Engine(parse_scheduler("threads", workers=1))
    except (ImportError, TypeError):
        return math.nan
    with engine as one:
        started = time.perf_counter()
        slicer.grid_slices(values, engine=one, **grid_args)
        return time.perf_counter() - started


def measure_gridding(table: str, slices_for_griddata: int | None) -> dict:
    """Time ``slicer.grid_slices`` against per-slice ``griddata(method="linear")``.

    Run in a fresh process, so that the memory rise of ``reduce_survey`` is its own.
    """
    settings = _settings(Path(table))
    before, _, _ = _memory_mib()
    started = time.perf_counter()
    reduced = slicer.reduce_survey(settings, progress=False)
    reduce_s = time.perf_counter() - started
    _, peak, source = _memory_mib()
    reduce_rise = peak - before if source == "VmHWM" else math.nan  # a fresh process: clean
    values = reduced.table
    grid_args = dict(cell=settings.cell, radius=settings.radius, crs=settings.crs,
                     velocity=settings.resolved_velocity, progress=False)

    started = time.perf_counter()
    cube, _ = slicer.grid_slices(values, **grid_args)
    ours_s = time.perf_counter() - started
    ours_one_s = _grid_one_worker(values, grid_args)
    # The high-water mark cannot be reset for one phase (freed memory stays resident for
    # reuse), so the gridding's peak comes from tracemalloc, which numpy reports its buffers to;
    # untimed, since tracing slows the run.
    tracemalloc.start()
    slicer.grid_slices(values, **grid_args)
    grid_traced = tracemalloc.get_traced_memory()[1] / 2**20
    tracemalloc.stop()

    # Same cell centres as our cube. Coordinates relative to the corner: Qhull triangulates
    # in double precision and UTM magnitudes would cost it digits (any careful user does this).
    x0, y0 = float(cube["x"].values[0]), float(cube["y"].values[0])
    points = np.column_stack([values["x"].values - x0, values["y"].values - y0])
    gx, gy = np.meshgrid(cube["x"].values - x0, cube["y"].values - y0)
    table_values = np.asarray(values.values, dtype=np.float64)
    n_slices = table_values.shape[1]
    k = n_slices if slices_for_griddata is None else max(1, min(slices_for_griddata, n_slices))
    chosen = np.unique(np.linspace(0, n_slices - 1, k).round().astype(int))
    filled, per_slice = [], []
    for s in chosen:  # the naive way: one call, hence one triangulation, per slice
        started = time.perf_counter()
        out = scipy.interpolate.griddata(points, table_values[:, s], (gx, gy), method="linear")
        per_slice.append(time.perf_counter() - started)
        filled.append(np.isfinite(out).mean())
    loop_s = sum(per_slice) * n_slices / len(chosen)  # scaled up if only some were run

    started = time.perf_counter()  # the careful way: all slices through one triangulation
    together = scipy.interpolate.griddata(points, table_values, (gx, gy), method="linear")
    one_call_s = time.perf_counter() - started
    return {"reduce_s": reduce_s, "ours_s": ours_s, "ours_one_s": ours_one_s,
            "reduce_rise_mib": reduce_rise, "grid_traced_mib": grid_traced,
            "griddata_loop_s": loop_s,
            "griddata_loop_slices_run": len(chosen),
            "griddata_median_s": float(np.median(per_slice)),
            "griddata_min_s": min(per_slice), "griddata_max_s": max(per_slice),
            "griddata_one_call_s": one_call_s,
            "n_slices": n_slices, "cells": int(gx.size),
            "filled_ours": float(np.isfinite(cube.values).mean()),
            "filled_griddata": float(np.mean(filled)),
            "filled_griddata_one_call": float(np.isfinite(together).mean())}


@contextlib.contextmanager
def _in_thread_engine():
    """An engine running every task in the calling thread, or None if slicer has no engines.

    cProfile sees only the thread it runs in; with slicer's default threaded engine it would
    show the main thread waiting on locks. Running the same tasks serially shows where they
    spend their time (private API: a benchmark helper, not a way to build).
    """
    try:
        from slicer.pipeline.engine import Engine, parse_scheduler
    except ImportError:
        yield None
        return
    if not hasattr(Engine, "_run_block"):
        yield None
        return

    class InThread(Engine):
        def _run_block(self, func, block):
            return [func(item) for item in block]

    with InThread(parse_scheduler("threads", workers=1)) as engine:
        yield engine


def profile_build(table: Path, top: int = 15) -> str:
    """cProfile of one ``build_cube``: the top functions by own time and by cumulative time."""
    settings = _settings(table)
    profiler = cProfile.Profile()
    with warnings.catch_warnings(), _in_thread_engine() as engine:
        warnings.simplefilter("ignore")
        extra = {} if engine is None else {"engine": engine}
        profiler.runcall(slicer.build_cube, settings, progress=False, **extra)
    text = io.StringIO()
    stats = pstats.Stats(profiler, stream=text)
    stats.strip_dirs().sort_stats("tottime").print_stats(top)
    stats.sort_stats("cumulative").print_stats(top)
    return text.getvalue()


# --- report ------------------------------------------------------------------------------------

def _source() -> str:
    """Where slicer was imported from, with its git commit when it is a checkout."""
    folder = Path(slicer.__file__).resolve().parent
    try:
        commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=folder,
                                capture_output=True, text=True, timeout=10, check=True)
        dirty = subprocess.run(["git", "status", "--porcelain", "--", "."], cwd=folder,
                               capture_output=True, text=True, timeout=10, check=True)
    except (OSError, subprocess.SubprocessError):
        return str(folder)
    state = " with uncommitted changes" if dirty.stdout.strip() else ""
    return f"{folder} (commit {commit.stdout.strip()}{state})"


def _load() -> str:
    return "/".join(f"{v:.2f}" for v in os.getloadavg())


def parse_args(argv=None):
    p = argparse.ArgumentParser(
        description="Build throughput of slicer on synthetic surveys (see benchmarks/README.md).")
    p.add_argument("--sizes", type=lambda s: [int(float(v)) for v in s.split(",")],
                   default=[10_000, 50_000, 100_000],
                   help="approximate trace counts, comma-separated (default 10000,50000,100000)")
    p.add_argument("--keep", type=Path, metavar="DIR",
                   help="write surveys and outputs under DIR and keep them; a survey already "
                        "there is reused (its generation time is then not reported)")
    p.add_argument("--griddata-slices", type=int, metavar="K", default=4,
                   help="run the per-slice griddata loop on K slices spread over the depth "
                        "range and scale its time to all slices (default 4; 0 means all: "
                        "about 1.5 minutes more at the default sizes)")
    p.add_argument("--no-full-build", action="store_true",
                   help="skip slicer.build (writing GeoTIFFs, cube, overview, record)")
    p.add_argument("--profile", choices=("auto", "always", "never"), default="auto",
                   help=f"cProfile build_cube on the largest size: 'auto' when the build/floor "
                        f"ratio exceeds {PROFILE_ABOVE:g} (default)")
    return p.parse_args(argv)


def main(argv=None) -> int:
    args = parse_args(argv)
    compile_slicer()  # as pip install does (see _common)
    begun = time.perf_counter()
    if args.keep is not None:
        root = args.keep.resolve()
        root.mkdir(parents=True, exist_ok=True)
        cleanup = None
    else:
        cleanup = tempfile.TemporaryDirectory(prefix="slicer-bench-")
        root = Path(cleanup.name)
    print(f"slicer {slicer.__version__}, Python {platform.python_version()}, numpy "
          f"{np.__version__}, scipy {scipy.__version__}, segyio {md.version('segyio')}; "
          f"{os.cpu_count()} CPUs; OPENBLAS_NUM_THREADS={os.environ['OPENBLAS_NUM_THREADS']}; "
          f"{_dt.datetime.now().isoformat(timespec='minutes')}")
    print(f"slicer from {_source()}")
    print(f"load average at the start {_load()} (well above 0: other processes share the "
          "cores and timings are noisier)")
    print(f"data in {root}{'' if cleanup is None else ' (deleted at the end)'}")
    results = []
    try:
        for size in sorted(args.sizes):
            folder = root / f"traces_{size}"
            table, files, gen_s, reused = make_survey(folder / "survey", size)
            data_mib = sum(f.stat().st_size for f in files) / 2**20
            floor_s, n_traces = measure_floor(files)
            floor_all_s, _ = measure_floor(files, workers=os.cpu_count() or 1)
            cube = in_fresh_process(measure_build, str(table), None)
            full = None
            if not args.no_full_build:
                out = folder / "build"
                full = in_fresh_process(measure_build, str(table), str(out))
            grid = in_fresh_process(measure_gridding, str(table), args.griddata_slices or None)
            row = dict(size=size, traces=n_traces, lines=len(files), data_mib=data_mib,
                       gen_s=gen_s, reused=reused, floor_s=floor_s,
                       floor_all_s=floor_all_s, cube=cube, full=full,
                       grid=grid)
            results.append(row)
            print(f"  {n_traces} traces ({len(files)} lines, {data_mib:.0f} MiB): "
                  f"generated in {_f(gen_s, 1)} s, build_cube {cube['seconds']:.1f} s, "
                  f"floor {floor_s:.1f} s", flush=True)
            for w in cube["warnings"]:
                print(f"    warning during build_cube: {w}")
    finally:
        profile_text = None
        if results:
            ratios = [r["cube"]["seconds"] / r["floor_s"] for r in results]
            if args.profile == "always" or (args.profile == "auto"
                                            and max(ratios) > PROFILE_ABOVE):
                profile_text = profile_build(root / f"traces_{results[-1]['size']}" / "survey"
                                             / "lines.csv")
        if cleanup is not None:
            cleanup.cleanup()

    main_rows, build_rows, grid_rows = [], [], []
    threads = os.cpu_count() or 1
    for r in results:
        c, g, full = r["cube"], r["grid"], r["full"]
        main_rows.append([
            f"{r['traces']}", _f(c["seconds"]), f"{r['traces'] / c['seconds']:.0f}",
            _f(c["seconds"] / r["floor_s"], 1),
            _f(g["griddata_median_s"] * g["n_slices"] / g["ours_s"], 1),
            _f(c["rss_peak_mib"], 0), _f(c["rss_peak_mib"] - c["rss_before_mib"], 0)])
        phases = c["phases"]
        build_rows.append([
            f"{r['traces']}", f"{r['lines']}", _f(r["data_mib"], 0), _f(r["gen_s"], 1),
            _f(r["floor_s"]), f"{r['traces'] / r['floor_s']:.0f}", _f(r["floor_all_s"]),
            _f(c["seconds"] / r["floor_all_s"], 1),
            _f(phases.get("read_and_process", math.nan)), _f(phases.get("grid", math.nan)),
            _f(full["seconds"] if full else math.nan),
            _f(full["phases"].get("write", math.nan) if full else math.nan),
            _f(full["rss_peak_mib"] if full else math.nan, 0),
            _f(g["reduce_rise_mib"], 0), _f(g["grid_traced_mib"], 0)])
        grid_rows.append([
            f"{r['traces']}", f"{g['cells']}x{g['n_slices']}", _f(g["ours_s"]),
            _f(g["ours_one_s"]), _f(g["griddata_loop_s"]),
            _f(g["griddata_loop_s"] / g["ours_one_s"], 1), _f(g["griddata_one_call_s"]),
            _f(g["griddata_one_call_s"] / g["ours_s"], 1)])
    print()
    print(_table(["traces", "time (s)", "traces/s", "build/floor", "grid speed-up",
                  "peak RSS (MiB)", "RSS rise (MiB)"], main_rows))
    if results:
        print(f"peak RSS: {results[0]['cube']['peak_source']} of a fresh process running only "
              "that build; rise = peak minus the RSS just before the build")
    print()
    print(_table(["traces", "lines", "SEG-Y MiB", "generate s", "floor s", "floor traces/s",
                  f"floor s, {threads} thr", f"build/floor {threads} thr", "read+process s",
                  "grid s", "full build s", "write s", "full peak MiB", "reduce rise MiB",
                  "grid traced MiB"], build_rows))
    print()
    print(_table(["traces", "cells x slices", "grid_slices s", "grid_slices 1 thr s",
                  "griddata loop s", "loop / ours 1 thr", "griddata 1-call s",
                  "1-call / ours"], grid_rows))
    print()
    for r in results:
        g = r["grid"]
        note = ("" if g["griddata_loop_slices_run"] == g["n_slices"] else
                f", loop timed on {g['griddata_loop_slices_run']} slices and scaled")
        print(f"{r['traces']} traces: griddata per slice min/median/max "
              f"{g['griddata_min_s']:.3f}/{g['griddata_median_s']:.3f}/"
              f"{g['griddata_max_s']:.3f} s (speed-up on the loop's total "
              f"{g['griddata_loop_s'] / g['ours_s']:.1f}x{note}); "
              f"cells filled: grid_slices {g['filled_ours']:.1%}, griddata "
              f"{g['filled_griddata']:.1%}; cube {r['cube']['shape']}")
    if profile_text:
        print(f"\ncProfile of build_cube, {results[-1]['traces']} traces:\n{profile_text}")
    print(f"load average at the end {_load()}; total wall time "
          f"{time.perf_counter() - begun:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
