"""The NetCDF cube of a build: streamed while the tiles arrive, or written from the finished store.

For each size this script writes (or reuses, with ``--keep``) a survey with
:func:`scale.make_survey` (array density, see ``benchmarks/scale.py``) and builds it with
``slicer.build`` several times, every build in a fresh spawned process so that its peak
resident memory (``VmHWM``) is its own, alternating the ways of writing ``cube.nc``:

threaded builds (``scheduler="threads"``)
    ``stream``: a side thread writes the NetCDF cube while the tiles arrive, reading each tile
    back from the Zarr store once it is complete; ``store``: the NetCDF cube is written from
    the finished Zarr store (:func:`slicer.outputs.sink.write_netcdf_from_store`) while the
    overview is drawn. ``store`` was faster and now is slicer's only way (see
    ``benchmarks/README.md``); the stream is measured only on the code before that change,
    whose ``slicer.outputs.sink`` has the private switch ``_STREAM_NETCDF``.
process-pool builds (``scheduler="processes"``, ``--process-sizes``)
    ``chunks``: the workers compress each slice's NetCDF chunks by hand
    (:mod:`slicer.outputs.netcdf_chunks`) and the calling process stores them with h5py's
    ``write_direct_chunk``; ``store``: a worker writes the NetCDF cube from the finished store
    with :func:`slicer.outputs.sink.write_netcdf_from_store` (xarray + h5netcdf, the library
    path) while the slice tasks write only the GeoTIFFs. ``store`` here is a variant made by
    this script (a subclass of ``WorkerSink``), not slicer's own code.

Then it checks that every build of a size wrote the same ``cube.nc``: the same values
(``np.array_equal``, NaN equal to NaN), coordinates, attributes (the ``history`` timestamp
aside), chunking and filters, and prints each run, the median of each way and their ratio.

Run ``python benchmarks/netcdf_write.py --help``; see ``benchmarks/README.md``.
"""

from __future__ import annotations

import argparse
import concurrent.futures
import datetime as _dt
import importlib.metadata as md
import math
import os
import platform
import re
import statistics
import sys
import time
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import numpy as np  # noqa: E402 - after the thread settings
import scale  # noqa: E402 - the surveys and the measured build of benchmarks/scale.py
from _common import _f, _table, in_fresh_process, work_root  # noqa: E402

import slicer  # noqa: E402 - after the thread settings
import slicer.outputs.sink as _sink  # noqa: E402 - after the thread settings

THREAD_MODES = ("stream", "store") if hasattr(_sink, "_STREAM_NETCDF") else ("store",)
PROCESS_MODES = ("chunks", "store")


# --- the ways of writing cube.nc, set inside the fresh process of a build ----------------------

class _Both:
    """Two futures waited for as one (what ``CubeSink._finish`` asks of its NetCDF future)."""

    def __init__(self, *futures):
        self._futures = futures

    def exception(self):
        errors = [f.exception() for f in self._futures]  # waits for every one
        return next((e for e in errors if e is not None), None)


def _store_netcdf_on_workers() -> None:
    """Process builds: a worker writes cube.nc from the finished store (no hand compression)."""
    from slicer.outputs.geotiff import write_slice_file
    from slicer.outputs.sink import CubeSink, write_netcdf_from_store
    from slicer.pipeline import worker_outputs
    from slicer.pipeline.worker_outputs import WorkerSink

    class StoreNetCDF(WorkerSink):
        def __enter__(self):
            CubeSink.__enter__(self)  # no empty NetCDF file made in advance
            return self

        def _start_netcdf(self, target):
            store = self._worker_path(self._store.path)
            netcdf = self._offload(write_netcdf_from_store, store, self._worker_path(target))
            jobs = [self._tiffs.slice_job(i, store) for i in range(self.shape[0])]
            pool = concurrent.futures.ThreadPoolExecutor(max_workers=1)
            tiffs = pool.submit(lambda: list(self._engine.map(write_slice_file, jobs, desc="slices",
                                                              progress=False)))
            pool.shutdown(wait=False)
            return _Both(netcdf, tiffs)

    worker_outputs.WorkerSink = StoreNetCDF  # build() imports it from there at each call


def build_with(table: str, out: str, scheduler: str, mode: str) -> dict:
    """One ``slicer.build`` in this fresh process, cube.nc written the ``mode`` way."""
    if scheduler == "threads" and hasattr(_sink, "_STREAM_NETCDF"):
        _sink._STREAM_NETCDF = mode == "stream"
    if scheduler == "processes" and mode == "store":
        _store_netcdf_on_workers()
    result = scale.measure_build(table, out, scheduler)
    result["mode"] = mode
    return result


# --- comparing the files -----------------------------------------------------------------------

def describe_netcdf(path: Path) -> dict:
    """What must match between two cube.nc files, read with xarray (h5netcdf) and h5py."""
    import h5py
    import xarray as xr

    with xr.open_dataset(path, engine="h5netcdf", decode_timedelta=False) as ds:
        ds = ds.load()
    attrs = dict(ds.attrs)
    # the one attribute that differs by design: when the file was written
    attrs["history"] = re.sub(r"^\S+: ", "<time>: ", str(attrs.get("history", "")))
    name = next(v for v, da in ds.data_vars.items() if da.ndim == 3)
    with h5py.File(path, "r") as f:
        d = f[name]
        layout = (d.chunks, d.compression, d.compression_opts, d.shuffle, str(d.dtype))
    rest = ds.drop_vars(name)
    rest.attrs = {}  # compared below, history's timestamp aside
    return {"data": ds[name].values, "dataset": rest, "attrs": attrs,
            "var_attrs": {v: dict(ds[v].attrs) for v in ds.variables},
            "layout": layout}


def same_netcdf(a: Path, b: Path) -> tuple[bool, str]:
    """Whether two cube.nc files hold the same cube; what differs if not."""
    x, y = describe_netcdf(a), describe_netcdf(b)
    problems = []
    if not np.array_equal(x["data"], y["data"], equal_nan=True):
        problems.append("values")
    if not x["dataset"].identical(y["dataset"]):
        problems.append("coordinates")
    if x["attrs"] != y["attrs"]:
        problems.append("global attributes")
    if x["var_attrs"] != y["var_attrs"]:
        problems.append("variable attributes")
    if x["layout"] != y["layout"]:
        problems.append(f"chunks/filters {x['layout']} vs {y['layout']}")
    return not problems, ", ".join(problems) or "identical"


# --- running -----------------------------------------------------------------------------------

def run_size(root: Path, size: int, scheduler: str, modes: tuple[str, ...],
             repeats: int) -> dict:
    folder = root / f"traces_{size}"
    table, files, gen_s = scale.make_survey(folder / "survey", size)
    data_mib = sum(f.stat().st_size for f in files) / 2**20
    print(f"{size} ({scheduler}): survey of {len(files)} lines, {data_mib:.0f} MiB; generation "
          f"{'reused (kept)' if math.isnan(gen_s) else f'{gen_s:.1f} s'}", flush=True)
    scale._warm(files)
    runs = []
    for k in range(repeats):
        order = modes if k % 2 == 0 else modes[::-1]  # alternate which way goes first
        for mode in order:
            out = folder / f"build_{scheduler}_{mode}"
            r = in_fresh_process(build_with, str(table), str(out), scheduler, mode)
            r["repeat"] = k
            runs.append(r)
            print(f"  {mode:6s} run {k + 1}: {r['seconds']:.2f} s (grid+write "
                  f"{r['phases'].get('grid_and_write', math.nan):.2f} s), peak "
                  f"{r['rss_peak_mib']:.0f} MiB, workers {r['worker_peak_mib']:.0f} MiB",
                  flush=True)
    checks = {}
    reference = folder / f"build_{scheduler}_{modes[0]}" / "cube.nc"
    for mode in modes[1:]:
        checks[mode] = same_netcdf(reference, folder / f"build_{scheduler}_{mode}" / "cube.nc")
        print(f"  cube.nc {modes[0]} vs {mode}: {checks[mode][1]}", flush=True)
    return {"size": size, "scheduler": scheduler, "modes": modes, "runs": runs,
            "checks": checks}


def _median(runs: list[dict], mode: str, key) -> float:
    return statistics.median(key(r) for r in runs if r["mode"] == mode)


def report(rows: list[dict]) -> None:
    per_run = []
    for row in rows:
        for r in row["runs"]:
            per_run.append([str(row["size"]), row["scheduler"], r["mode"], str(r["repeat"] + 1),
                            _f(r["seconds"]), _f(r["phases"].get("grid_and_write")),
                            _f(r["rss_peak_mib"], 0),
                            _f(r["rss_peak_mib"] - r["rss_before_mib"], 0),
                            _f(r["worker_peak_mib"], 0) if r["workers"] else "-"])
    print()
    print(_table(["size", "engine", "cube.nc", "run", "build s", "grid+write s", "peak MiB",
                  "rise MiB", "largest worker MiB"], per_run))
    summary = []
    for row in rows:
        modes, runs = row["modes"], row["runs"]
        base = modes[0]
        for mode in modes:
            seconds = _median(runs, mode, lambda r: r["seconds"])
            ratio = seconds / _median(runs, base, lambda r: r["seconds"])
            pairs = [b["seconds"] / a["seconds"] for a in runs if a["mode"] == base
                     for b in runs if b["mode"] == mode and b["repeat"] == a["repeat"]]
            summary.append([
                str(row["size"]), row["scheduler"], mode,
                str(sum(r["mode"] == mode for r in runs)), _f(seconds),
                _f(_median(runs, mode, lambda r: r["phases"].get("grid_and_write", math.nan))),
                _f(_median(runs, mode, lambda r: r["rss_peak_mib"]), 0),
                _f(_median(runs, mode, lambda r: r["worker_peak_mib"]), 0)
                if runs[0]["workers"] else "-",
                f"{_f(ratio, 3)} ({base})", f"{min(pairs):.3f}-{max(pairs):.3f}",
                "reference" if mode == base else row["checks"][mode][1]])
    print()
    print(_table(["size", "engine", "cube.nc", "runs", "median build s",
                  "median grid+write s", "median peak MiB", "median worker MiB",
                  "median build / first way's", "per-repeat ratio range",
                  "cube.nc vs reference"], summary))


def parse_args(argv=None):
    sizes = lambda s: [int(float(v)) for v in s.split(",") if v]  # noqa: E731
    p = argparse.ArgumentParser(description="NetCDF cube: streamed or written from the store "
                                            "(see benchmarks/README.md).")
    p.add_argument("--sizes", type=sizes, default=[50_000, 200_000],
                   help="threaded builds: approximate trace counts (default 50000,200000)")
    p.add_argument("--repeats", type=int, default=3,
                   help="builds of each way per size, alternating (default 3)")
    p.add_argument("--process-sizes", type=sizes, default=[],
                   help="process-pool builds: trace counts (default none; e.g. 1000000)")
    p.add_argument("--process-repeats", type=int, default=2,
                   help="process-pool builds of each way per size (default 2)")
    p.add_argument("--keep", type=Path, metavar="DIR",
                   help="write surveys and outputs under DIR and keep them; a survey there is "
                        "reused (the layout of benchmarks/scale.py, so its surveys serve)")
    return p.parse_args(argv)


def main(argv=None) -> int:
    args = parse_args(argv)
    begun = time.perf_counter()
    root, cleanup = work_root(args.keep, "slicer-netcdf-")
    environment = {
        "slicer": slicer.__version__, "python": platform.python_version(),
        "numpy": np.__version__, "xarray": md.version("xarray"),
        "h5netcdf": md.version("h5netcdf"), "h5py": md.version("h5py"),
        "dask": md.version("dask"), "cpus": os.cpu_count(),
        "started": _dt.datetime.now().isoformat(timespec="minutes"),
        "load_start": os.getloadavg()}
    print(f"environment {environment}; data in {root}"
          f"{' (deleted at the end)' if cleanup else ''}", flush=True)
    rows = []
    try:
        for size in sorted(args.sizes):
            rows.append(run_size(root, size, "threads", THREAD_MODES, args.repeats))
        for size in sorted(args.process_sizes):
            rows.append(run_size(root, size, "processes", PROCESS_MODES, args.process_repeats))
    finally:
        if cleanup is not None:
            cleanup.cleanup()
    report(rows)
    print(f"\nload average {environment['load_start']} at the start, {os.getloadavg()} at the "
          f"end; total wall time {time.perf_counter() - begun:.0f} s")
    return 0 if all(ok for row in rows for ok, _ in row["checks"].values()) else 1


if __name__ == "__main__":
    sys.exit(main())
