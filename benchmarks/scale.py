"""How slicer scales to array-density surveys of up to a million traces.

For each size this script writes (or reuses, with ``--keep``) a synthetic SEG-Y survey at
array density with :mod:`slicer.synthetic` - lines 0.1 m apart, traces 0.05 m apart, a few
point targets buried at known cell centres and mid-slice depths - and then measures, on the
same files in the same run:

* ``slicer.build`` (every output written) on the threaded engine, in a fresh spawned
  process so that its peak resident memory (``VmHWM``) belongs to that build alone;
* the floor: every trace read once with segyio (``f.trace.raw[:]``) and its envelope taken
  with :func:`scipy.signal.hilbert` (scipy.fft), on one thread and on two threads over files;
* gridding alone: ``slicer.grid_slices`` against per-slice
  :func:`scipy.interpolate.griddata` (``method="linear"``) on the same trace x slice table and
  the same cell centres, and where each method puts every buried target;
* on the largest size only, ``slicer.build`` on a ``local:1`` and on a ``local:2``
  dask.distributed LocalCluster;

then fits how build time grows with the number of traces and of grid cells. The memory
method and the one-BLAS-thread setting follow ``benchmarks/build_throughput.py``.

Run ``python benchmarks/scale.py --help``; see ``benchmarks/README.md``.
"""

from __future__ import annotations

import argparse
import concurrent.futures
import datetime as _dt
import importlib.metadata as md
import json
import math
import os
import platform
import sys
import time
import warnings
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import numpy as np  # noqa: E402 - after the thread settings
import scipy  # noqa: E402 - after the thread settings
import scipy.fft  # noqa: E402 - after the thread settings
import scipy.interpolate  # noqa: E402 - after the thread settings
import scipy.signal  # noqa: E402 - after the thread settings
import segyio  # noqa: E402 - after the thread settings
from _common import _f, _memory_mib, _table, in_fresh_process, square_patch, work_root  # noqa: E402

import slicer  # noqa: E402 - after the thread settings
import slicer.synthetic as syn  # noqa: E402 - after the thread settings
from slicer.pipeline.line_tasks import reduce_survey  # noqa: E402 - after the thread settings

#: The settings every build and table uses (ns, ns, m/ns, m, m); memory limit left at default.
SETTINGS = dict(crs="EPSG:32633", sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.05,
                depths="0:2.4:0.1")
CELL, SLICE_STEP = 0.05, 0.1
#: Array density: lines 0.1 m apart, traces 0.05 m apart.
LINE_SPACING, TRACE_SPACING = 0.1, 0.05
WEST, SOUTH = 512000.0, 4650000.0
SAMPLES = 512
#: Point targets as (east, north) fractions of the patch and depth (m, the middle of a slice).
TARGETS = ((0.2, 0.25, 0.45), (0.75, 0.2, 0.75), (0.5, 0.5, 1.05), (0.25, 0.75, 1.35),
           (0.8, 0.8, 1.65))
#: The brightest cell within this distance of a target (m) is taken as where a method put it.
SEARCH_M = 0.5
DEFAULT_SIZES = (50_000, 200_000, 1_000_000)


# --- synthetic surveys -------------------------------------------------------------------------

def plan(n_traces: int) -> list[syn.PlannedLine]:
    """Zigzag west-east lines over a roughly square patch holding about ``n_traces`` traces."""
    return square_patch(n_traces, line_spacing=LINE_SPACING, trace_spacing=TRACE_SPACING,
                        west=WEST, south=SOUTH)


def ground_for(lines: list[syn.PlannedLine]) -> syn.Ground:
    """Point targets at cell centres (corner on a multiple of the cell) and slice middles."""
    east = max(max(p.start_x, p.end_x) for p in lines) - WEST
    north = max(max(p.start_y, p.end_y) for p in lines) - SOUTH

    def centre(origin: float, extent: float, fraction: float) -> float:
        return round(origin + (math.floor(fraction * extent / CELL) + 0.5) * CELL, 6)

    points = tuple(syn.PointTarget(centre(WEST, east, u), centre(SOUTH, north, v), depth)
                   for u, v, depth in TARGETS)
    return syn.Ground(velocity=0.1, attenuation_db_per_m=3.0, targets=points)


def make_survey(folder: Path, n_traces: int) -> tuple[Path, list[Path], float]:
    """Write (or reuse) one survey: line table, files and seconds taken (NaN if kept)."""
    table = folder / "lines.csv"
    if table.exists() and (folder / "truth.json").exists():
        return table, sorted(folder.glob("*.sgy")), math.nan
    radar = syn.Radar(frequency_mhz=400.0, sample_interval_ns=0.1, samples=SAMPLES,
                      time_zero_ns=3.0, seed=20240611)
    lines = plan(n_traces)
    started = time.perf_counter()
    survey = syn.write_survey(folder, ground_for(lines), radar, lines, format="segy",
                              crs=SETTINGS["crs"], overwrite=True, progress=False)
    return survey.line_table, list(survey.files), time.perf_counter() - started


def read_targets(folder: Path) -> list[dict]:
    """The point targets of a survey, from its ``truth.json`` (so a kept survey is judged by
    what was really buried in it)."""
    truth = json.loads((folder / "truth.json").read_text())
    return [{"x": t["x"], "y": t["y"], "depth": t["depth"]} for t in truth["targets"]
            if t["kind"] == "point"]


# --- measurements ------------------------------------------------------------------------------

def worker_peak_mib(_=None) -> tuple[int, float]:
    """``(pid, VmHWM in MiB)`` of the process running this (a build's worker)."""
    time.sleep(0.3)  # long enough that a pool hands the next call to another worker
    return os.getpid(), _memory_mib()[1]


def _watch_workers(peaks: dict) -> None:
    """Read every worker's VmHWM just before a build's engine closes (pool or cluster)."""
    from slicer.pipeline import engine as _engine

    close = _engine.Engine.__exit__

    def exit_reading_peaks(self, *exc_info):
        try:
            if self._client is not None:
                for pid, peak in self._client.run(worker_peak_mib).values():
                    peaks[pid] = peak
            elif self._pool is not None and self.spec.kind == "processes":
                for _ in range(4):  # until every worker has answered
                    futures = [self._pool.submit(worker_peak_mib)
                               for _ in range(self.spec.workers)]
                    peaks.update(f.result() for f in futures)
                    if len(peaks) >= self.spec.workers:
                        break
        finally:
            close(self, *exc_info)

    _engine.Engine.__exit__ = exit_reading_peaks


def measure_build(table: str, out: str, scheduler: str) -> dict:
    """Time one ``slicer.build`` (all outputs written) in this fresh process."""
    peaks: dict[int, float] = {}
    _watch_workers(peaks)
    settings = slicer.load_settings(table, **SETTINGS, scheduler=scheduler, out=out,
                                    overwrite=True, formats="tif,zarr,nc")
    before, _, _ = _memory_mib()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        started = time.perf_counter()
        result = slicer.build(settings, progress=False)
        seconds = time.perf_counter() - started
    _, peak, source = _memory_mib()
    grid = result.record["grid"]
    # Worker processes (a pool or a LocalCluster): each one's VmHWM, read in the worker just
    # before the engine closed (the few ms of the reading itself are not a build's work).
    workers = len(peaks)
    child_peak = max(peaks.values(), default=0.0)
    return {"scheduler": scheduler, "engine": result.record.get("engine"), "seconds": seconds,
            "phases": dict(result.record.get("seconds", {})),
            "memory_estimate_mib": result.record.get("memory_estimate_bytes", math.nan) / 2**20,
            "rss_before_mib": before, "rss_peak_mib": peak, "peak_source": source,
            "workers": workers, "worker_peak_mib": child_peak,
            "worker_peaks_mib": sorted(peaks.values()),
            "total_peak_bound_mib": peak + sum(peaks.values()),
            "cells": int(grid["nx"]) * int(grid["ny"]),
            "shape": [int(n) for n in result.cube.shape],
            "warnings": sorted({f"{w.category.__name__}: {w.message}" for w in caught})}


def _floor_one(path: Path) -> int:
    with segyio.open(str(path), "r", ignore_geometry=True) as f:
        data = f.trace.raw[:]
    n = data.shape[-1]
    # The pipeline's zero padding and precision (float32 in, complex64 FFT), so the floor does
    # the work any correct envelope must do and no more.
    nfft = scipy.fft.next_fast_len(2 * n, real=False)
    env = np.abs(scipy.signal.hilbert(data, N=nfft, axis=-1)[..., :n])
    return env.shape[0]


def measure_floor(files: list[Path], *, workers: int = 1) -> tuple[float, int]:
    """Seconds to read every trace once and take its envelope; files shared over threads."""
    started = time.perf_counter()
    if workers == 1:
        count = sum(_floor_one(path) for path in files)
    else:
        with concurrent.futures.ThreadPoolExecutor(max_workers=workers) as pool:
            count = sum(pool.map(_floor_one, files))
    return time.perf_counter() - started, count


def _warm(files: list[Path]) -> None:
    """Read every file once, untimed, so the page cache is warm for all that follows."""
    for path in files:
        with open(path, "rb") as f:
            while f.read(1 << 24):
                pass


def brightest_near(image: np.ndarray, xs: np.ndarray, ys: np.ndarray, x: float,
                   y: float) -> dict:
    """The brightest cell within :data:`SEARCH_M` of ``(x, y)``: its distance to it (m)."""
    cols = np.flatnonzero(np.abs(xs - x) <= SEARCH_M)
    rows = np.flatnonzero(np.abs(ys - y) <= SEARCH_M)
    if not cols.size or not rows.size:
        return {"error_m": math.nan, "value": math.nan}
    block = image[rows[0]:rows[-1] + 1, cols[0]:cols[-1] + 1]
    gx, gy = np.meshgrid(xs[cols], ys[rows])
    inside = (np.hypot(gx - x, gy - y) <= SEARCH_M) & np.isfinite(block)
    if not inside.any():
        return {"error_m": math.nan, "value": math.nan}
    k = np.argmax(np.where(inside, block, -np.inf))
    return {"error_m": round(float(np.hypot(gx.flat[k] - x, gy.flat[k] - y)), 4),
            "value": float(block.flat[k])}


def measure_gridding(table: str, survey: str, n_griddata: int, run_griddata: bool) -> dict:
    """Time ``grid_slices`` and per-slice griddata on one trace x slice table; locate targets.

    griddata runs on ``n_griddata`` slices, the targets' slices first, and its time is scaled
    to every slice; target slices not among them are gridded afterwards in one untimed call.
    """
    settings = slicer.load_settings(table, **SETTINGS)
    started = time.perf_counter()
    values = reduce_survey(settings, progress=False).table
    reduce_s = time.perf_counter() - started
    grid_args = dict(cell=settings.cell, radius=settings.radius, crs=settings.crs,
                     velocity=settings.resolved_velocity, progress=False)
    started = time.perf_counter()
    cube, _ = slicer.grid_slices(values, **grid_args)
    ours_s = time.perf_counter() - started

    xs, ys = cube["x"].values, cube["y"].values
    top, bottom = values["top"].values, values["bottom"].values
    targets = read_targets(Path(survey))
    for t in targets:
        t["slice"] = int(np.flatnonzero((top <= t["depth"]) & (t["depth"] < bottom))[0])
        t["ours"] = brightest_near(cube.values[t["slice"]], xs, ys, t["x"], t["y"])
    out = {"reduce_s": reduce_s, "ours_s": ours_s, "cells": int(xs.size * ys.size),
           "n_slices": int(top.size), "filled_ours": float(np.isfinite(cube.values[0]).mean()),
           "targets": targets, "griddata_slices_timed": 0, "griddata_loop_s": math.nan,
           "griddata_per_slice_s": []}
    if not run_griddata:
        return out

    # Coordinates relative to the grid corner: Qhull works in double precision and UTM
    # magnitudes would cost it digits (a careful user does this).
    x0, y0 = float(xs[0]), float(ys[0])
    points = np.column_stack([values["x"].values - x0, values["y"].values - y0])
    cells = tuple(np.meshgrid(xs - x0, ys - y0))
    data = np.asarray(values.values, dtype=np.float64)
    wanted = sorted({t["slice"] for t in targets})
    spread = np.linspace(0, top.size - 1, max(n_griddata, 1)).round().astype(int)
    chosen = [*wanted, *(int(s) for s in spread if s not in wanted)][:max(n_griddata, 1)]
    images, per_slice = {}, []
    for s in chosen:  # the naive way: one call, hence one triangulation, per slice
        started = time.perf_counter()
        images[s] = scipy.interpolate.griddata(points, data[:, s], cells, method="linear")
        per_slice.append(time.perf_counter() - started)
    rest = [s for s in wanted if s not in images]
    if rest:  # untimed: all remaining target slices through one triangulation
        together = scipy.interpolate.griddata(points, data[:, rest], cells, method="linear")
        images.update({s: together[..., k] for k, s in enumerate(rest)})
    for t in targets:
        t["griddata"] = brightest_near(images[t["slice"]], xs, ys, t["x"], t["y"])
    out.update(griddata_slices_timed=len(chosen), griddata_per_slice_s=per_slice,
               griddata_loop_s=float(np.mean(per_slice)) * top.size,
               filled_griddata=float(np.isfinite(images[chosen[0]]).mean()))
    return out


# --- report ------------------------------------------------------------------------------------

def _max_error(targets: list[dict], method: str) -> float:
    errors = [t[method]["error_m"] for t in targets if method in t]
    if not errors:
        return math.nan
    return math.inf if any(not math.isfinite(e) for e in errors) else max(errors)


def _slope(x: list[float], y: list[float]) -> float:
    """Exponent of ``y ~ x**k``: the slope of a straight-line fit of log y on log x."""
    if len(x) < 2 or len(set(x)) < 2:
        return math.nan
    return float(np.polyfit(np.log(x), np.log(y), 1)[0])


def _plain(value):
    """``value`` with NaN and infinities as None, so the JSON file is standard JSON."""
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if isinstance(value, float | np.floating):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    return value


def _ratio(a, b) -> float:
    return a / b if b and math.isfinite(a) and math.isfinite(b) else math.nan


def parse_args(argv=None):
    p = argparse.ArgumentParser(
        description="Scale benchmark of slicer at array density (see benchmarks/README.md).")
    p.add_argument("--sizes", type=lambda s: [int(float(v)) for v in s.split(",")],
                   default=list(DEFAULT_SIZES),
                   help="approximate trace counts, comma-separated (default 50000,200000,1e6)")
    p.add_argument("--keep", type=Path, metavar="DIR",
                   help="write surveys and outputs under DIR and keep them; a survey already "
                        "there is reused (its generation time is then shown as -)")
    p.add_argument("--griddata-slices", type=int, default=3, metavar="K",
                   help="per-slice griddata calls timed per size, scaled to every slice "
                        "(default 3)")
    p.add_argument("--griddata-slices-large", type=int, default=2, metavar="K",
                   help="the same above 500000 traces (default 2)")
    p.add_argument("--griddata-max-traces", type=float, default=math.inf, metavar="N",
                   help="skip griddata on sizes above N traces (default: run it on all)")
    p.add_argument("--no-cluster", action="store_true",
                   help="skip the local:1 / local:2 builds on the largest size")
    p.add_argument("--json", type=Path, metavar="PATH", help="also write the results as JSON")
    return p.parse_args(argv)


def run_size(root: Path, size: int, args, *, largest: bool) -> dict:
    folder = root / f"traces_{size}"
    table, files, gen_s = make_survey(folder / "survey", size)
    data_mib = sum(f.stat().st_size for f in files) / 2**20
    print(f"{size}: survey of {len(files)} lines, {data_mib:.0f} MiB; generation "
          f"{'reused (kept)' if math.isnan(gen_s) else f'{gen_s:.1f} s'}", flush=True)
    _warm(files)
    floor_s, n_traces = measure_floor(files)
    floor2_s, _ = measure_floor(files, workers=2)
    print(f"  floor {floor_s:.1f} s (1 thread), {floor2_s:.1f} s (2 threads)", flush=True)
    # the default scheduler (auto: threads below 100 000 traces, processes from there), then
    # the threaded engine on its own for comparison
    build = in_fresh_process(measure_build, str(table), str(folder / "build"), "auto")
    threaded = (build if build["engine"].startswith("threads") else
                in_fresh_process(measure_build, str(table), str(folder / "build"), "threads"))
    print(f"  build {build['seconds']:.1f} s on {build['engine']}, peak "
          f"{build['rss_peak_mib']:.0f} MiB (with workers at most "
          f"{build['total_peak_bound_mib']:.0f} MiB); threads {threaded['seconds']:.1f} s",
          flush=True)
    for w in build["warnings"]:
        print(f"    warning during build: {w}")
    k = args.griddata_slices_large if n_traces > 500_000 else args.griddata_slices
    grid = in_fresh_process(measure_gridding, str(table), str(folder / "survey"), k,
                            n_traces <= args.griddata_max_traces)
    print(f"  grid_slices {grid['ours_s']:.1f} s, griddata loop {_f(grid['griddata_loop_s'], 1)}"
          f" s (scaled from {grid['griddata_slices_timed']} slices)", flush=True)
    row = {"size": size, "traces": n_traces, "lines": len(files), "segy_mib": data_mib,
           "generate_s": gen_s, "floor_1thread_s": floor_s, "floor_2threads_s": floor2_s,
           "build": build, "build_threads": threaded, "gridding": grid, "cluster": None}
    if largest and not args.no_cluster:
        runs = {n: in_fresh_process(measure_build, str(table), str(folder / f"build_local{n}"),
                                    f"local:{n}") for n in (1, 2)}
        row["cluster"] = {f"local:{n}": r for n, r in runs.items()}
        print(f"  local:1 {runs[1]['seconds']:.1f} s, local:2 {runs[2]['seconds']:.1f} s",
              flush=True)
    return row


def summarise(rows: list[dict]) -> dict:
    table = []
    for r in rows:
        b, g = r["build"], r["gridding"]
        table.append({
            "traces": r["traces"], "build_s": b["seconds"],
            "traces_per_s": r["traces"] / b["seconds"],
            "build_over_floor_1thread": b["seconds"] / r["floor_1thread_s"],
            "build_over_floor_2threads": b["seconds"] / r["floor_2threads_s"],
            "engine": b["engine"], "threads_build_s": r["build_threads"]["seconds"],
            "threads_over_floor_1thread": r["build_threads"]["seconds"] / r["floor_1thread_s"],
            "griddata_over_ours": _ratio(g["griddata_loop_s"], g["ours_s"]),
            "target_error_ours_m": _max_error(g["targets"], "ours"),
            "target_error_griddata_m": _max_error(g["targets"], "griddata"),
            "peak_rss_mib": b["rss_peak_mib"], "cells": b["cells"],
            "total_peak_bound_mib": b["total_peak_bound_mib"]})
    out = {"table": table, "cluster_speedup": math.nan,
           "exponent_traces": _slope([t["traces"] for t in table], [t["build_s"] for t in table]),
           "exponent_cells": _slope([t["cells"] for t in table], [t["build_s"] for t in table])}
    cluster = rows[-1]["cluster"] if rows else None
    if cluster:
        out["cluster_speedup"] = cluster["local:1"]["seconds"] / cluster["local:2"]["seconds"]
    return out


def report(rows: list[dict], summary: dict) -> None:
    lines = [[f"{t['traces']}", _f(t["build_s"], 1), f"{t['traces_per_s']:.0f}",
              _f(t["build_over_floor_1thread"]), _f(t["build_over_floor_2threads"]),
              _f(t["griddata_over_ours"], 1),
              f"{_f(t['target_error_ours_m'], 3)} / {_f(t['target_error_griddata_m'], 3)}",
              _f(t["peak_rss_mib"], 0), _f(t["total_peak_bound_mib"], 0)]
             for t in summary["table"]]
    print()
    print(_table(["traces", "build s", "traces/s", "build/floor 1 thr", "build/floor 2 thr",
                  "griddata/ours", "target error ours / griddata (m)", "peak RSS MiB",
                  "with workers MiB"], lines))
    for r in rows:
        g, b = r["gridding"], r["build"]
        note = (f"griddata timed on {g['griddata_slices_timed']} of {g['n_slices']} slices and "
                "scaled" if g["griddata_slices_timed"] else "griddata skipped")
        print(f"{r['traces']} traces: {r['lines']} lines, {b['cells']} cells, build on "
              f"{b['engine']}, phases {b['phases']} (threads: {r['build_threads']['seconds']:.1f}"
              f" s, {r['build_threads']['seconds'] / r['floor_1thread_s']:.2f} x the floor), "
              f"memory estimate {b['memory_estimate_mib']:.0f} MiB; floor "
              f"{r['floor_1thread_s']:.2f} s / {r['floor_2threads_s']:.2f} s; table "
              f"(reduce_survey) {g['reduce_s']:.1f} s, grid_slices {g['ours_s']:.2f} s, {note}")
        for t in g["targets"]:
            gd = t.get("griddata", {}).get("error_m", math.nan)
            print(f"    target at depth {t['depth']:.2f} m (slice {t['slice']}): ours "
                  f"{_f(t['ours']['error_m'], 3)} m, griddata {_f(gd, 3)} m")
    print(f"\ncluster speed-up (largest size, local:1 / local:2 build time): "
          f"{_f(summary['cluster_speedup'])}")
    if rows and rows[-1]["cluster"]:
        for name, c in rows[-1]["cluster"].items():
            print(f"  {name}: {c['seconds']:.1f} s, phases {c['phases']}, peak "
                  f"{c['rss_peak_mib']:.0f} MiB calling process, largest worker "
                  f"{c['worker_peak_mib']:.0f} MiB")
    print(f"scaling exponent of build time: {_f(summary['exponent_traces'])} against traces, "
          f"{_f(summary['exponent_cells'])} against grid cells (numpy.polyfit of log-log)")


def main(argv=None) -> int:
    args = parse_args(argv)
    begun = time.perf_counter()
    root, cleanup = work_root(args.keep, "slicer-scale-")
    environment = {
        "slicer": slicer.__version__, "python": platform.python_version(),
        "numpy": np.__version__, "scipy": scipy.__version__, "segyio": md.version("segyio"),
        "dask": md.version("dask"), "cpus": os.cpu_count(),
        "openblas_threads": os.environ["OPENBLAS_NUM_THREADS"],
        "started": _dt.datetime.now().isoformat(timespec="minutes"),
        "load_start": os.getloadavg()}
    print(f"environment {environment}; data in {root}"
          f"{' (deleted at the end)' if cleanup else ''}")
    rows = []
    sizes = sorted(args.sizes)
    try:
        for size in sizes:
            rows.append(run_size(root, size, args, largest=size == sizes[-1]))
    finally:
        if cleanup is not None:
            cleanup.cleanup()
    summary = summarise(rows)
    report(rows, summary)
    environment.update(load_end=os.getloadavg(), total_s=time.perf_counter() - begun)
    print(f"load average {environment['load_start']} at the start, {environment['load_end']} "
          f"at the end; total wall time {environment['total_s']:.0f} s")
    if args.json is not None:
        args.json.write_text(json.dumps(_plain({"environment": environment, **summary,
                                                "rows": rows}), indent=2) + "\n")
        print(f"results written to {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
