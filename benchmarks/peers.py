"""slicer against its peers on the same synthetic surveys, in one run.

For each size (default 65 k, 400 k and 1 M traces; zigzag west-east lines 0.5 m apart, traces
0.05 m apart, 512 samples of 0.1 ns, eight point targets and a drain, as build_throughput.py)
this script measures, each in a fresh process (numpy loaded; each method's other imports
inside its time, as ``slicer.build`` imports lazily), on the same files:

* **slicer**: ``slicer.load_settings`` and ``slicer.build`` with the contract settings (0.1 m
  cells, 24 depth slices of 0.1 m, velocity 0.1 m/ns, time zero 3 ns) and everything else at
  its defaults; and the same build with ``migrate="off"``, so that what migration (on by
  default) adds to a build is measured in the same run, on the same files;
* **tuned floor**: every trace read once through a memory map (``segyio``'s ``f.mmap()``) and
  its envelope taken in float32 by real FFTs (``rfft``, times -i, ``irfft``: the Hilbert
  transform; ``scipy.fft``, buffers reused between lines): the least work any envelope build
  does (``_common.TunedFloor``); the ratios are to it. The floor of 2026-12-02 (one complex
  FFT and inverse per line, ``_common.ComplexFloor``) is printed below it, for comparison with
  ratios measured against it;
* **griddata script**: what a practitioner writes in 30 lines: segyio, dewow (running mean),
  mean-trace background removal, ``scipy.signal.hilbert``, window means, ONE
  ``scipy.interpolate.griddata`` call for all slices, cells farther than 0.75 line spacings
  from any trace masked, one GeoTIFF per slice with rasterio;
* **verde k-NN**: the same per-trace values gridded with ``verde.KNeighbors`` (k = 4, mean)
  slice by slice and masked with ``verde.distance_mask`` (skipped when verde is not installed:
  ``pip install verde``).

Target placement: for each point target, the distance (m) from its true position to the
brightest cell within 1 m of it in the slice holding its depth; the median and largest over
the targets are printed beside each time, so no method is faster by placing things worse.

Peak memory: ``VmHWM`` of the process that ran the method (a fresh one); for slicer also the
largest sum of the resident memory of that process and its worker processes, sampled every
50 ms during the build (:class:`TreeMemory`).

Rounds: the floor, slicer (migrated, then not) and the griddata script run ``--repeat`` times
(default 3) in turn, each time in a fresh process; the table gives each one's median and
range, and the ratios are of the medians (each round's slicer/floor and slicer/griddata
ratios, and what migration added, are printed too). This
machine's speed drifts by a fifth within minutes, so one run of each, minutes apart, says
little (a 400 k ratio of 2.06 and, a quarter of an hour later, 2.73). verde and the earlier
floor run once.

Run ``python benchmarks/peers.py [--sizes 65000,400000] [--repeat 3] [--keep DIR]``; see
benchmarks/README.md.
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import time
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import numpy as np  # noqa: E402
from _common import (  # noqa: E402
    ComplexFloor,
    TunedFloor,
    _f,
    _memory_mib,
    _table,
    compile_slicer,
    in_fresh_process,
    work_folder,
)

SETTINGS = dict(crs="EPSG:32633", sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.1,
                depths="0:2.4:0.1")
CELL, VELOCITY, T0, DT = 0.1, 0.1, 3.0, 0.1
TOPS = np.round(np.arange(0.0, 2.4, 0.1), 6)
LINE_SPACING = 0.5


# --- the peers (each runs in a fresh process) --------------------------------------------------

def _lines(table: Path):
    import csv
    with table.open() as f:
        return [(table.parent / r["file"], float(r["start_x"]), float(r["start_y"]),
                 float(r["end_x"]), float(r["end_y"])) for r in csv.DictReader(f)]


def _peaks() -> dict:
    """Peak resident memory (MiB) of this process."""
    return {"peak": _memory_mib()[1]}


class TreeMemory:
    """The largest sum of resident memory (MiB) of this process and all its descendants (a
    build's worker processes), sampled every ``interval`` s on a thread while in the with
    block. Sampled: a peak shorter than the interval can be missed."""

    def __init__(self, interval: float = 0.05):
        import threading
        self.interval, self.peak = interval, 0.0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()

    def _run(self) -> None:
        import os
        me = os.getpid()
        while not self._stop.wait(self.interval):
            self.peak = max(self.peak, sum(_rss_mib(p) for p in _tree(me)))


def _tree(pid: int) -> list[int]:
    found, todo = [], [pid]
    while todo:
        p = todo.pop()
        found.append(p)
        try:
            for task in Path(f"/proc/{p}/task").iterdir():
                todo += [int(c) for c in (task / "children").read_text().split()]
        except OSError:  # ended meanwhile
            pass
    return found


def _rss_mib(pid: int) -> float:
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmRSS:"):
                return float(line.split()[1]) / 1024
    except OSError:
        pass
    return 0.0


def run_slicer(table: str, out: str, place: bool = True, migrate: str = "auto") -> dict:
    import slicer
    with TreeMemory() as tree:
        # the line table read and checked inside the time, as the scripts read theirs
        started = time.perf_counter()
        settings = slicer.load_settings(table, **SETTINGS, out=out, overwrite=True,
                                        migrate=migrate)
        result = slicer.build(settings, progress=False)
        seconds = time.perf_counter() - started
    peaks = {**_peaks(), "tree_peak": tree.peak}  # before the untimed build below
    done = {"seconds": seconds, "engine": result.record["engine"], **peaks}
    if place:  # for placement, not timed (the same every round: asked for once)
        cube = slicer.build_cube(settings, progress=False).cube
        done["cube"] = _plain(cube.values, cube["x"].values, cube["y"].values)
    return done


def run_slicer_unmigrated(table: str, out: str, place: bool = False) -> dict:
    """:func:`run_slicer` with ``migrate="off"``; no placement (the migrated build's is
    printed)."""
    return run_slicer(table, out, False, "off")


def run_floor(table: str, kind: str = "real") -> dict:
    floor = TunedFloor() if kind == "real" else ComplexFloor()
    started = time.perf_counter()
    for path, *_ in _lines(Path(table)):
        floor(path)
    return {"seconds": time.perf_counter() - started, **_peaks()}


def _values_per_trace(table: Path):
    """The script's per-trace window values: dewow, mean background, hilbert, window means."""
    import scipy.ndimage
    import scipy.signal
    import segyio
    xs, ys, rows = [], [], []
    for path, x0, y0, x1, y1 in _lines(table):
        with segyio.open(str(path), "r", ignore_geometry=True) as f:
            data = f.trace.raw[:].astype(np.float32)
        data -= scipy.ndimage.uniform_filter1d(data, 37, axis=-1)  # 1.5 periods at 400 MHz
        data -= data.mean(axis=0)
        env = np.abs(scipy.signal.hilbert(data, axis=-1))
        start = int(round(T0 / DT))
        per = int(round(2 * 0.1 / VELOCITY / DT))  # samples per 0.1 m window
        usable = env[:, start:start + per * len(TOPS)]
        rows.append(usable.reshape(len(data), len(TOPS), per).mean(axis=-1))
        xs.append(np.linspace(x0, x1, len(data)))
        ys.append(np.linspace(y0, y1, len(data)))
    return np.concatenate(xs), np.concatenate(ys), np.concatenate(rows)


def _cells(x, y):
    west, south = math.floor(x.min() / CELL) * CELL, math.floor(y.min() / CELL) * CELL
    gx = west + CELL * (np.arange(int(math.ceil((x.max() - west) / CELL)) + 1) + 0.5)
    gy = south + CELL * (np.arange(int(math.ceil((y.max() - south) / CELL)) + 1) + 0.5)
    return gx, gy[::-1]


def _write_tifs(cube, gx, gy, folder: Path) -> None:
    import rasterio
    from rasterio.transform import from_origin
    folder.mkdir(parents=True, exist_ok=True)
    transform = from_origin(gx[0] - CELL / 2, gy[0] + CELL / 2, CELL, CELL)
    for k, band in enumerate(cube):
        with rasterio.open(folder / f"slice_{k:03d}.tif", "w", driver="GTiff",
                           height=band.shape[0], width=band.shape[1], count=1,
                           dtype="float32", crs=SETTINGS["crs"], transform=transform,
                           nodata=np.nan, tiled=True, compress="deflate") as dst:
            dst.write(band.astype(np.float32), 1)


def run_griddata(table: str, out: str, place: bool = True) -> dict:
    started = time.perf_counter()  # its imports timed, as slicer.build's are (lazy)
    import scipy.interpolate
    import scipy.spatial
    x, y, values = _values_per_trace(Path(table))
    gx, gy = _cells(x, y)
    mx, my = np.meshgrid(gx, gy)
    grid = scipy.interpolate.griddata((x - gx[0], y - gy[-1]), values,
                                      (mx - gx[0], my - gy[-1]), method="linear")
    far = scipy.spatial.cKDTree(np.column_stack([x, y])).query(
        np.column_stack([mx.ravel(), my.ravel()]))[0].reshape(mx.shape) > 0.75 * LINE_SPACING
    cube = np.moveaxis(grid, -1, 0)
    cube[:, far] = np.nan
    _write_tifs(cube, gx, gy, Path(out))
    seconds = time.perf_counter() - started
    return {"seconds": seconds, **_peaks(), **({"cube": _plain(cube, gx, gy)} if place else {})}


def run_verde(table: str, out: str, place: bool = True) -> dict:
    started = time.perf_counter()  # its imports timed, as slicer.build's are (lazy)
    import verde as vd
    x, y, values = _values_per_trace(Path(table))
    gx, gy = _cells(x, y)
    mx, my = np.meshgrid(gx, gy)
    mask = vd.distance_mask((x, y), maxdist=0.75 * LINE_SPACING, coordinates=(mx, my))
    cube = np.empty((values.shape[1], *mx.shape), dtype=np.float32)
    for k in range(values.shape[1]):
        gridder = vd.KNeighbors(k=4).fit((x, y), values[:, k])
        cube[k] = np.where(mask, gridder.predict((mx, my)), np.nan)
    _write_tifs(cube, gx, gy, Path(out))
    seconds = time.perf_counter() - started
    return {"seconds": seconds, **_peaks(), **({"cube": _plain(cube, gx, gy)} if place else {})}


def _plain(values, x, y) -> dict:
    return {"values": np.asarray(values, dtype=np.float32), "x": np.asarray(x),
            "y": np.asarray(y)}


# --- placement ---------------------------------------------------------------------------------

def placement(cube: dict, targets: list[tuple[float, float, float]]) -> tuple[float, float]:
    """Median and largest distance (m) from each point target to the brightest cell within 1 m
    of it, in the slice holding its depth."""
    x, y = cube["x"], cube["y"]
    mx, my = np.meshgrid(x, y)
    errors = []
    for tx, ty, depth in targets:
        k = min(int(depth / 0.1), cube["values"].shape[0] - 1)
        near = np.hypot(mx - tx, my - ty) <= 1.0
        band = np.where(near, cube["values"][k], -np.inf)
        i = np.unravel_index(int(np.nanargmax(band)), band.shape)
        errors.append(float(np.hypot(mx[i] - tx, my[i] - ty)))
    return float(np.median(errors)), float(max(errors))


# --- the run -----------------------------------------------------------------------------------

def measure_size(root: Path, n: int, use_verde: bool, rounds: int = 1) -> list[list[str]]:
    """Rows of the table for one size: the tuned floor, slicer and the griddata script run
    ``rounds`` times in turn (floor, slicer, slicer unmigrated, griddata, floor, ...; the two
    builds swapped every other round; each in a fresh process),
    their medians and ranges; the earlier floor and verde once. The ratios are of medians:
    this machine's speed drifts by a fifth within minutes (benchmarks/README.md), and one run
    of each, minutes apart, moved the 400 k ratio from 2.1 to 2.7."""
    import build_throughput as bt
    folder = root / f"traces_{n}"
    table, files, made, reused = bt.make_survey(folder / "survey", n)
    lines = bt.plan(n)
    targets = [(t.x, t.y, t.depth) for t in bt.ground_for(lines).targets
               if t.kind == "point"]
    _read_once(table)  # every method then finds the files in the page cache, as the first did
    timed = [("tuned floor", None), ("slicer build", run_slicer),
             ("slicer build, migrate off", run_slicer_unmigrated),
             ("griddata script", run_griddata)]
    runs: dict[str, list[dict]] = {name: [] for name, _ in timed}
    for k in range(rounds):
        # the migrated and unmigrated builds swap places every other round, so that neither
        # always runs first after the floor (their ratio is this run's one paired measure)
        order = timed if k % 2 == 0 else [timed[0], timed[2], timed[1], timed[3]]
        for name, run in order:
            if run is None:
                runs[name].append(in_fresh_process(run_floor, str(table)))
                continue
            # slicer in a user's environment (BLAS threads at the libraries' defaults: it
            # limits them itself); the peers with one BLAS thread, their best
            # (benchmarks/README.md)
            slicer_run = run in (run_slicer, run_slicer_unmigrated)
            out = folder / name.replace(",", "").replace(" ", "_")
            runs[name].append(in_fresh_process(run, str(table), str(out), k == 0,
                                               blas_default=slicer_run))
    floor = statistics.median(r["seconds"] for r in runs["tuned floor"])
    rows = [_row(n, "tuned floor", runs["tuned floor"], floor, None)]
    earlier = in_fresh_process(run_floor, str(table), "complex")
    rows.append(_row(n, "complex-FFT floor (to 2026-12-02)", [earlier], floor, None))
    for name, run in timed[1:]:
        rows.append(_row(n, name, runs[name], floor,
                         None if run is run_slicer_unmigrated else targets))
    if use_verde:  # far behind the others: once
        rows.append(_row(n, "verde k-NN", [in_fresh_process(
            run_verde, str(table), str(folder / "verde"))], floor, targets))
    if rounds > 1:
        per_round = [s["seconds"] / f["seconds"] for s, f in
                     zip(runs["slicer build"], runs["tuned floor"], strict=True)]
        ahead = [s["seconds"] / g["seconds"] for s, g in
                 zip(runs["slicer build"], runs["griddata script"], strict=True)]
        added = [s["seconds"] / o["seconds"] - 1.0 for s, o in
                 zip(runs["slicer build"], runs["slicer build, migrate off"], strict=True)]
        print(f"{n} traces, each round: slicer / floor "
              f"{', '.join(f'{r:.2f}' for r in per_round)}; slicer / griddata "
              f"{', '.join(f'{r:.2f}' for r in ahead)}; migration adds "
              f"{', '.join(f'{100 * r:+.0f} %' for r in added)}", flush=True)
    migrated, unmigrated = (statistics.median(r["seconds"] for r in runs[name])
                            for name in ("slicer build", "slicer build, migrate off"))
    print(f"{n} traces: migration adds {100 * (migrated / unmigrated - 1):+.1f} % to the "
          "build (medians)", flush=True)
    return rows


def _row(n: int, name: str, results: list[dict], floor: float, targets) -> list[str]:
    """One table row: the median time of ``results``, its range, the ratio of the median to
    ``floor``, the placement of the first result's cube (``targets`` given) and its memory."""
    seconds = [r["seconds"] for r in results]
    median = statistics.median(seconds)
    first = results[0]
    place = ["-", "-"] if targets is None else [_f(v, 3) for v in placement(first["cube"],
                                                                            targets)]
    label = f"{name} ({first['engine']})" if "engine" in first else name
    spread = f"{min(seconds):.2f}-{max(seconds):.2f}" if len(seconds) > 1 else "-"
    return [f"{n}", label, _f(median), spread, _f(median / floor), *place, _memory(first)]


def _read_once(table: Path) -> None:
    """Read every line file once, untimed: a survey kept from an earlier run may have left
    the page cache, and the first method measured would pay for reading it from disk (a
    1 M-trace floor of 53 s instead of 10-13 s was seen)."""
    for path, *_ in _lines(Path(table)):
        with open(path, "rb") as f:
            while f.read(1 << 24):
                pass


def _memory(result: dict) -> str:
    """Peak MiB of the measuring process; for slicer also that of it and its workers together
    (sampled)."""
    text = f"{result['peak']:.0f}"
    return text + (f" ({result['tree_peak']:.0f} with workers)" if "tree_peak" in result
                   else "")


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--sizes", default="65000,400000,1000000",
                   help="approximate trace counts, comma separated")
    p.add_argument("--keep", type=Path, help="write (and reuse) surveys and outputs here")
    p.add_argument("--repeat", type=int, default=3,
                   help="rounds of floor, slicer (migrated and not) and griddata, in turn "
                        "(default 3; verde once)")
    args = p.parse_args(argv)
    try:
        import verde  # noqa: F401
        use_verde = True
    except ModuleNotFoundError:
        print("verde not installed: its column is skipped (pip install verde)", file=sys.stderr)
        use_verde = False
    print(f"slicer's byte code compiled as pip install compiles it "
          f"({compile_slicer()} modules compiled now)", flush=True)
    with work_folder(args.keep, "slicer-peers-") as root:
        rows = []
        for n in (int(s) for s in args.sizes.split(",")):
            rows += measure_size(root, n, use_verde, max(1, args.repeat))
            print(_table(["traces", "method", "s (median)", "range s", "x floor",
                          "median miss m", "worst miss m", "peak MiB"], rows), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
