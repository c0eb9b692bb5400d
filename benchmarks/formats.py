"""Build time against the outputs asked for (``--formats``), on one mid-size synthetic survey.

Builds the same survey (default about 65 000 traces, ``--traces``; the contract settings of
build_throughput.py, 24 depth slices of 0.1 m cells) once per way below and ``--repeat`` times,
each build in a fresh process, alternating between ways so that a busy spell of the machine
hits all of them alike:

``tif``
    The default: the slice GeoTIFFs only (and overview.png, record.json). The tiles go into a
    Zarr working store, deleted at the end; the GeoTIFFs are written whole from it.
``tif, streamed``
    The same outputs with the GeoTIFFs filled tile by tile as the tiles arrive (uncompressed
    staging files, made COGs at the end), as every build did before ``--formats``.
``tif,zarr``
    Plus the Zarr cube (the working store, kept).
``tif,zarr,nc``
    Plus the CF NetCDF cube, written from the store after the gridding.
``tif,zarr,nc, streamed``
    Every output with streamed GeoTIFFs: what every build wrote before ``--formats``.

The table gives the median and minimum wall time of ``slicer.build``, its ratio (medians) to the
default, the median of the record's ``grid_and_write`` phase, the median CPU time of the build
(every thread of its process: ``time.process_time``) and the size of the outputs.

    python benchmarks/formats.py
    python benchmarks/formats.py --traces 20000 --repeat 2
    python benchmarks/formats.py --ways 1,2 --repeat 6   # whole against streamed GeoTIFFs
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
from _common import _f, _table, in_fresh_process, survey_options, work_folder  # noqa: E402
from build_throughput import SETTINGS, make_survey  # noqa: E402

#: The ways measured: (label, formats, stream the GeoTIFFs).
WAYS = [("tif", "tif", False), ("tif, streamed", "tif", True), ("tif,zarr", "tif,zarr", False),
        ("tif,zarr,nc", "tif,zarr,nc", False),
        ("tif,zarr,nc, streamed", "tif,zarr,nc", True)]


def measure(table: str, out: str, formats: str, stream: bool, scheduler: str) -> dict:
    """One build in this (fresh) process: wall seconds and the record's phases."""
    import slicer
    import slicer.outputs.sink
    slicer.outputs.sink.STREAM_SLICES = stream
    settings = slicer.load_settings(Path(table), **SETTINGS, out=Path(out), overwrite=True,
                                    formats=formats, scheduler=scheduler)
    started, cpu = time.perf_counter(), time.process_time()
    result = slicer.build(settings, progress=False)
    return {"seconds": time.perf_counter() - started, "cpu": time.process_time() - cpu,
            "phases": dict(result.record["seconds"]), "traces": result.record["survey"]["traces"],
            "shape": tuple(int(n) for n in result.cube.shape)}


def parse_args(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    survey_options(p)
    p.add_argument("--ways", help="comma list of row numbers (from 1) to measure; default all")
    return p.parse_args(argv)


def main(argv=None) -> int:
    args = parse_args(argv)
    with work_folder(args.keep, "slicer-formats-") as root:
        table, _, made, _ = make_survey(root / "survey", args.traces)
        print(f"survey: {args.traces} traces requested, written in {_f(made, 1)} s; "
              f"scheduler {args.scheduler}; {args.repeat} builds per way")
        ways = WAYS if not args.ways else [WAYS[int(k) - 1] for k in args.ways.split(",")]
        if ways[0][0] != "tif":
            ways.insert(0, WAYS[0])  # the ratios' base
        runs = {label: [] for label, _, _ in ways}
        info = None
        for _ in range(args.repeat):
            for label, formats, stream in ways:
                out = root / "out" / label.replace(",", "_").replace(" ", "")
                info = in_fresh_process(measure, str(table), str(out), formats, stream,
                                        args.scheduler)
                runs[label].append({**info, "out": out})
        print(f"{info['traces']} traces -> cube {info['shape']}")
        base = statistics.median(r["seconds"] for r in runs["tif"])
        rows = []
        for label, _, _ in ways:
            seconds = [r["seconds"] for r in runs[label]]
            write = statistics.median(r["phases"].get("grid_and_write", float("nan"))
                                      for r in runs[label])
            cpu = statistics.median(r["cpu"] for r in runs[label])
            size = sum(p.stat().st_size for p in runs[label][-1]["out"].rglob("*")
                       if p.is_file()) / 2**20
            rows.append([label, _f(statistics.median(seconds)), _f(min(seconds)),
                         _f(statistics.median(seconds) / base), _f(write), _f(cpu), _f(size, 1)])
        print(_table(["formats", "median s", "min s", "x tif", "grid+write s", "CPU s", "MiB"],
                     rows))
    return 0


if __name__ == "__main__":
    sys.exit(main())
