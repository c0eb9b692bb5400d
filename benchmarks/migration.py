"""What migration adds to a build, and what it buys.

On the demo survey (:func:`slicer.synthetic.demo_survey`, written once as SEG-Y, timed apart)
this script measures, in one run on the same files:

* builds with ``migrate="off"`` against builds with ``migrate="auto"`` (Stolt here: one
  velocity, depth slices), alternating, several rounds: the median wall and CPU times and their
  ratio. ``slicer.build_cube`` (read, process, grid; nothing written) is the strict measure;
  ``slicer.build`` (every output written, as ``slicer build`` does) the one a user sees. The
  demo's lines are short (401 traces); on array-density surveys, whose lines hold thousands of
  traces, migration weighs far more: ``peers.py`` measures it there, in the same run. The
  Stolt operator cache is cleared before every build, so each pays its set-up as a fresh
  ``slicer build`` process does;
* migration's share of a migrated build: the thread CPU time spent in the migration cores
  (``stolt_blocks`` without the steps run in its reads and writes, ``phase_shift_core``),
  against the build's CPU time;
* per line, serially, the processing chain with and without migration;
* the Stolt mapping of one line's spectrum by the cached sparse operator against the library
  alternative the issue suggested, :func:`numpy.interp` per wavenumber (linear), each with its
  difference from Gazdag's phase shift (no interpolation) on a diffractor near the end of the
  record;
* (unless ``--no-focus``) what migration and the gain do to the slices of an invented survey
  with one pipe crossing the lines and three isolated stones, seen by the synthetic default
  antenna (``cos^2`` pattern) and by one radiating evenly in all directions (the worst case for
  flanks): how bright the hyperbola flanks are against the apex, where the pipe's bands lie,
  and the field drain's contrast on the demo.

Run ``python benchmarks/migration.py --help``; see ``benchmarks/README.md``.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import importlib.metadata as md
import importlib.util
import json
import math
import os
import platform
import statistics
import sys
import tempfile
import time
import warnings
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import numpy as np  # noqa: E402 - after the thread settings
import scipy.fft  # noqa: E402 - after the thread settings
from _common import _f, _table, compile_slicer  # noqa: E402

import slicer  # noqa: E402 - after the thread settings
import slicer.synthetic as syn  # noqa: E402 - after the thread settings

#: The settings of every build (the demo's contract: ns, ns, m/ns, m, m).
SETTINGS = dict(crs="EPSG:32633", sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.1,
                depths="0:2.4:0.1")

#: Gains compared by ``--focus``.
GAINS = ("none", "power:0.5", "power:1", "power:1.5", "power:2", "exp:0.1")


def _clear_caches() -> None:
    """Forget the Stolt operators built so far (a checkout from before them has none)."""
    try:
        from slicer.processing.fk import stolt_operator
    except ImportError:
        return
    stolt_operator.cache_clear()


def make_survey(folder: Path, ground=None, lines=None,
                radar=None) -> tuple[Path, float | None]:
    """The demo survey (or the one given) in ``folder``; reused when already there."""
    table = folder / "lines.csv"
    if table.exists():
        return table, None
    started = time.perf_counter()
    demo_ground, demo_radar, demo_lines, crs = syn.demo_survey()
    syn.write_survey(folder, ground or demo_ground, radar or demo_radar, lines or demo_lines,
                     format="segy", crs=crs, progress=False)
    return table, time.perf_counter() - started


# --- builds ------------------------------------------------------------------------------------

def _build(table: Path, migrate: str, out: Path | None) -> tuple[float, float]:
    _clear_caches()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if out is None:
            settings = slicer.load_settings(table, migrate=migrate, **SETTINGS)
            started, cpu = time.perf_counter(), time.process_time()
            slicer.build_cube(settings, progress=False)
        else:
            settings = slicer.load_settings(table, migrate=migrate, out=out, overwrite=True,
                                            **SETTINGS)
            started, cpu = time.perf_counter(), time.process_time()
            slicer.build(settings, progress=False)
    return time.perf_counter() - started, time.process_time() - cpu


def time_builds(table: Path, migrate: str, rounds: int, out: Path | None) -> dict:
    """Alternating off / migrated builds (the order swaps each round); medians and ratios."""
    _build(table, "off", out)  # warm: imports, FFT plans, page cache
    _build(table, migrate, out)
    runs = {"off": [], migrate: []}
    for k in range(rounds):
        for name in (("off", migrate) if k % 2 == 0 else (migrate, "off")):
            runs[name].append(_build(table, name, out))
    wall = {n: statistics.median(r[0] for r in v) for n, v in runs.items()}
    cpu = {n: statistics.median(r[1] for r in v) for n, v in runs.items()}
    return {"wall": wall, "cpu": cpu, "runs": runs,
            "wall_ratio": wall[migrate] / wall["off"], "cpu_ratio": cpu[migrate] / cpu["off"]}


def migration_share(table: Path, migrate: str, rounds: int) -> list[float]:
    """Thread CPU time in the migration cores (:func:`slicer.processing.fk.stolt_blocks` and
    ``phase_shift_core``, operators included, as both the line task and
    :func:`slicer.pipeline.line_chain.migrate_line` call them) over the build's CPU time, per
    migrated build. Since 2026-12-04 the line task's steps before and after migration run
    inside Stolt's reads and writes of each block of traces: their time is taken out."""
    from slicer.processing import migration
    originals = {name: getattr(migration, name) for name in ("stolt_blocks", "phase_shift_core")}
    spent = []

    def timed(core):
        def run(*args, **kwargs):
            started = time.thread_time()
            try:
                return core(*args, **kwargs)
            finally:
                spent.append(time.thread_time() - started)
        return run

    def timed_blocks(core):
        def run(shape, read, write, **kwargs):
            around = [0.0]  # the caller's steps, run inside the reads and writes

            def apart(step):
                def call(*args):
                    started = time.thread_time()
                    try:
                        return step(*args)
                    finally:
                        around[0] += time.thread_time() - started
                return call

            started = time.thread_time()
            try:
                return core(shape, apart(read), apart(write), **kwargs)
            finally:
                spent.append(time.thread_time() - started - around[0])
        return run

    shares = []
    for name, core in originals.items():
        setattr(migration, name, timed_blocks(core) if name == "stolt_blocks" else timed(core))
    try:
        for _ in range(rounds):
            spent.clear()
            _, cpu = _build(table, migrate, None)
            shares.append(sum(spent) / cpu)
    finally:
        for name, core in originals.items():
            setattr(migration, name, core)
    return shares


def per_line(table: Path, migrate: str) -> tuple[float, float, int]:
    """Median CPU time (ms) of the processing chain of one line, off and migrated, serially."""
    from slicer.geometry.survey import load_line
    from slicer.pipeline.line_chain import process_line
    settings = slicer.load_settings(table, **SETTINGS)
    lines = [load_line(e, settings, sample_interval_ns=0.1) for e in settings.lines]
    times = {}
    for name in ("off", migrate):
        chosen = settings.replace(migrate=name)
        process_line(lines[0], chosen, dewow_ns=3.75)  # the operator is built here
        spent = []
        for line in lines * 3:
            started = time.process_time()
            process_line(line, chosen, dewow_ns=3.75)
            spent.append(time.process_time() - started)
        times[name] = 1e3 * statistics.median(spent)
    return times["off"], times[migrate], lines[0].sizes["trace"]


# --- the Stolt mapping: our operator against numpy.interp --------------------------------------

def mapping_step() -> list[list[str]]:
    """Time of the Stolt mapping of one 401 x 482 line, and its accuracy.

    The line is the worked diffractor of the tests moved to 4.8 m, near the end of a 102 ns
    record, where interpolation in frequency is least accurate. Accuracy is the relative RMS
    difference of the migrated line from Gazdag's phase shift, which interpolates nothing.
    """
    from slicer.processing import fk as m
    from slicer.synthetic import forward
    dx, dt, nx, nt, v = 0.05, 0.2, 401, 512, 0.1
    x = dx * np.arange(nx)
    times, amplitudes = forward.arrivals(x, np.zeros_like(x), (syn.PointTarget(10.0, 0.0, 4.8),),
                                         velocity=v, pattern_exponent=0.0)
    data = forward.render_reflections(dt * np.arange(nt), times, amplitudes, kind="ricker",
                                      frequency_ghz=0.4).astype(np.float32)
    steps = np.full(nt, v) + 1e-12 * np.arange(nt)  # distinct values: the per-sample recursion
    exact = m.gazdag_core(data, dx=dx, dt=dt, t_first=0.0, velocities=steps, taper=0.2,
                          band=None)
    nk = m.x_length(nx, dx, nt * dt, v)
    rows = []

    def error(image):
        return float(np.sqrt(((image - exact) ** 2).sum() / (exact ** 2).sum()))

    def best(function, repeat=15):
        function()
        spent = []
        for _ in range(repeat):
            started = time.process_time()
            function()
            spent.append(time.process_time() - started)
        return 1e3 * min(spent)

    for pad in (1.5, 2, 4):
        ntp = scipy.fft.next_fast_len(math.ceil(pad * nt), real=True)
        spectrum = scipy.fft.fft(scipy.fft.rfft(data, n=ntp, axis=1), n=nk, axis=0)
        nw = spectrum.shape[1]
        centre = 0.5 * nt * dt
        dw = 2 * np.pi / (ntp * dt)
        w = dw * np.arange(nw)
        kx, weight = m.kx_taper(nk, dx, 0.2)
        if pad in (1.5, 2):  # ours: least squares at 1.5 (the default) and 2
            started = time.process_time()
            m.stolt_operator.cache_clear()
            operator = m.stolt_operator(nk, ntp, nw, dx, dt, v, 0.2, centre, centre)
            built = 1e3 * (time.process_time() - started)

            def ours(operator=operator, spectrum=spectrum):
                return (operator @ spectrum.ravel()).reshape(spectrum.shape)

            image = scipy.fft.irfft(scipy.fft.ifft(ours(), axis=0)[:nx], n=ntp, axis=1)[:, :nt]
            rows.append([f"sparse operator, {m.TAPS}-point least squares", str(pad),
                         _f(best(ours)), _f(built), _f(error(image), 4)])
        if pad not in (2, 4):  # the library path, linear: 2 and 4
            continue
        w_in = np.sqrt(w[None, :] ** 2 + (0.5 * v * kx[:, None]) ** 2)
        with np.errstate(invalid="ignore", divide="ignore"):
            scale = np.where(w_in > 0, w[None, :] / w_in, 1.0) * weight[:, None]
        post = (scale * np.exp(-1j * w_in * centre)).astype(np.complex64)
        pre = np.exp(1j * w * centre).astype(np.complex64)

        def interp(spectrum=spectrum, w_in=w_in, post=post, pre=pre, w=w):
            referenced = spectrum * pre
            out = np.empty_like(spectrum)
            for k in range(spectrum.shape[0]):  # numpy.interp takes complex values
                out[k] = np.interp(w_in[k], w, referenced[k], right=0)
            return out * post

        image = scipy.fft.irfft(scipy.fft.ifft(interp(), axis=0)[:nx], n=ntp, axis=1)[:, :nt]
        rows.append(["numpy.interp per wavenumber, linear", str(pad), _f(best(interp, 5)), "-",
                     _f(error(image), 4)])
    return rows


# --- focus: what migration and gain do to the slices -------------------------------------------

def _distance(target: dict, x, y):
    from slicer.synthetic.forward import distance_to_segment
    if target["kind"] == "point":
        return np.hypot(x - target["x"], y - target["y"])
    return distance_to_segment(x, y, target["x0"], target["y0"], target["x1"], target["y1"])


def isolated_survey(folder: Path, pattern: float) -> Path:
    """A 16 m x 12 m grid over one pipe crossing the lines (0.75 m) and three stones, seen by
    an antenna of pattern ``cos(theta)^pattern``."""
    e, n = 512000.0, 4650000.0
    ground = syn.Ground(velocity=0.1, attenuation_db_per_m=3.0, targets=(
        syn.LineTarget(e + 4.0, n, e + 4.0, n + 12.0, 0.75),
        syn.PointTarget(e + 10.05, n + 3.05, 0.45), syn.PointTarget(e + 10.05, n + 9.05, 1.05),
        syn.PointTarget(e + 13.55, n + 6.05, 1.65)))
    lines = syn.grid_lines(west=e, south=n, length=16.0, width=12.0, line_spacing=0.5,
                           trace_spacing=0.05, direction="x", zigzag=True)
    radar = syn.Radar(frequency_mhz=400.0, sample_interval_ns=0.1, samples=512,
                      time_zero_ns=3.0, seed=5, pattern_exponent=pattern)
    return make_survey(folder, ground, lines, radar)[0]


def flank_ratios(cube, targets: list[dict]) -> list[float]:
    """For each target, the brightest cell 0.3-1.5 m from it (in plan) in the slices from two
    below its own down, over the brightest within 0.15 m of it in its own slice."""
    x, y = np.meshgrid(cube.x.values, cube.y.values)
    south, north = float(y.min()), float(y.max())
    out = []
    for t in targets:
        d = _distance(t, x, y)
        if t["kind"] == "line":  # away from the pipe's ends
            d = np.where((y > south + 2) & (y < north - 2), d, np.inf)
        k = int(np.argmin(np.abs(cube.depth.values - t["depth"])))
        apex = np.nanmax(cube.values[k][d <= 0.15])
        flank = np.nanmax(cube.values[k + 2:][:, (d >= 0.3) & (d <= 1.5)])
        out.append(float(flank / apex))
    return out


def pipe_bands(cube, x_pipe: float) -> list[tuple[float, float, float]]:
    """Per slice at and below the pipe: where the mean across-pipe profile peaks (m from the
    pipe) and that peak over the peak in the pipe's own slice."""
    y = cube.y.values
    rows = (y > y.min() + 3) & (y < y.max() - 3)
    offset = cube.x.values - x_pipe
    near = np.abs(offset) <= 1.5
    result, top = [], None
    for depth in (0.75, 0.95, 1.15, 1.45):
        k = int(np.argmin(np.abs(cube.depth.values - depth)))
        profile = np.nanmean(cube.values[k][rows][:, near], axis=0)
        top = top or float(profile.max())
        result.append((depth, float(offset[near][np.argmax(profile)]), float(profile.max()) / top))
    return result


def focus(folder: Path, demo_table: Path) -> tuple[list[list[str]], list[list[str]], list[str]]:
    """The flank/apex tables over :data:`GAINS` and two antenna patterns (the synthetic
    default, cos^2, and an antenna radiating evenly, the worst case for flanks), the pipe's
    bands and the demo drain."""
    ratios, bands = [], []
    for pattern in (2.0, 0.0):
        table = isolated_survey(folder / f"pattern_{pattern:g}" / "survey", pattern)
        targets = json.loads((table.parent / "truth.json").read_text())["targets"]
        for gain in GAINS:
            for migrate in ("off", "auto"):
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    cube = slicer.build_cube(slicer.load_settings(
                        table, migrate=migrate, gain=gain, **SETTINGS), progress=False).cube
                r = flank_ratios(cube, targets)
                ratios.append([f"cos^{pattern:g}", gain, migrate, *(_f(v) for v in r),
                               _f(max(r))])
                if gain == "power:1" and pattern == 2.0:
                    bands += [[migrate, f"{d:.2f}", f"{o:+.2f}", _f(p, 3)]
                              for d, o, p in pipe_bands(cube, targets[0]["x0"])]
    drain = []
    truth = json.loads((demo_table.parent / "truth.json").read_text())["targets"]
    pipe = next(t for t in truth if t["kind"] == "line" and t["depth"] == 0.95)
    for migrate in ("off", "auto"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cube = slicer.build_cube(slicer.load_settings(demo_table, migrate=migrate,
                                                          **SETTINGS), progress=False).cube
        k = int(np.argmin(np.abs(cube.depth.values - 0.95)))
        x, y = np.meshgrid(cube.x.values, cube.y.values)
        on = (_distance(pipe, x, y) <= 0.1) & (y > pipe["y1"] + 1.5) & (y < pipe["y0"] - 1.5)
        contrast = np.nanmean(cube.values[k][on]) / np.nanmedian(cube.values[k])
        drain.append(f"{migrate}: {contrast:.0f}")
    return ratios, bands, drain


# --- main --------------------------------------------------------------------------------------

def parse_args(argv=None):
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--rounds", type=int, default=7,
                   help="alternating off/migrated build_cube pairs (default 7)")
    p.add_argument("--full-rounds", type=int, default=3,
                   help="alternating pairs of full builds, outputs written (default 3; 0 skips)")
    p.add_argument("--migrate", default="auto",
                   help="the migrated side (default auto; 'stolt' for checkouts before auto)")
    p.add_argument("--keep", type=Path, metavar="DIR",
                   help="write the surveys and outputs under DIR and keep them (reused)")
    p.add_argument("--no-focus", action="store_true", help="skip the focus and gain tables")
    return p.parse_args(argv)


def _load() -> str:
    return "/".join(f"{v:.2f}" for v in os.getloadavg())


def main(argv=None) -> int:
    args = parse_args(argv)
    compile_slicer()  # as pip install does (see _common)
    versions = ", ".join(f"{p} {md.version(p)}" for p in ("numpy", "scipy"))
    print(f"# migration benchmark, {_dt.datetime.now():%Y-%m-%d %H:%M}, {os.cpu_count()} CPUs, "
          f"Python {platform.python_version()}, {versions}, slicer from "
          f"{Path(slicer.__file__).parent}")
    print(f"load average at start: {_load()}")
    with tempfile.TemporaryDirectory() as scratch:
        root = args.keep or Path(scratch)
        table, made = make_survey(root / "demo" / "survey")
        made = f"generated in {_f(made)} s" if made else "reused"
        print(f"demo survey: {table.parent} ({made})")
        result = time_builds(table, args.migrate, args.rounds, None)
        rows = [["build_cube", str(args.rounds), _f(result["wall"]["off"]),
                 _f(result["wall"][args.migrate]), _f(result["wall_ratio"]),
                 _f(result["cpu"]["off"]), _f(result["cpu"][args.migrate]),
                 _f(result["cpu_ratio"])]]
        if args.full_rounds > 0:
            full = time_builds(table, args.migrate, args.full_rounds, root / "out")
            rows.append(["build (writes outputs)", str(args.full_rounds),
                         _f(full["wall"]["off"]), _f(full["wall"][args.migrate]),
                         _f(full["wall_ratio"]), _f(full["cpu"]["off"]),
                         _f(full["cpu"][args.migrate]), _f(full["cpu_ratio"])])
        print()
        print(_table(["build", "rounds", "off s", f"{args.migrate} s", "wall ratio",
                      "off CPU s", f"{args.migrate} CPU s", "CPU ratio"], rows))
        shares = migration_share(table, args.migrate, 3)
        print(f"\nmigration's share of a migrated build_cube's CPU time: "
              f"{', '.join(f'{100 * s:.0f} %' for s in shares)}")
        off_ms, on_ms, traces = per_line(table, args.migrate)
        print(f"one line ({traces} traces x 512 samples), processing chain CPU time, median: "
              f"off {off_ms:.2f} ms, {args.migrate} {on_ms:.2f} ms (+{on_ms - off_ms:.2f} ms)")
        if importlib.util.find_spec("slicer.processing.fk") is not None:
            print()
            print(_table(["Stolt mapping of one line's spectrum", "time pad", "ms (best)",
                          "set-up ms", "diff. from phase shift"], mapping_step()))
        if not args.no_focus:
            ratios, bands, drain = focus(root / "isolated", table)
            print("\nflank / apex on the isolated-target survey (1 = as bright as the apex)")
            print(_table(["antenna", "gain", "migrate", "pipe 0.75 m", "stone 0.45 m",
                          "stone 1.05 m", "stone 1.65 m", "largest"], ratios))
            print("\nthe pipe with gain power:1: where its across-line profile peaks")
            print(_table(["migrate", "slice m", "peak at m from pipe", "peak / pipe's own"],
                         bands))
            print(f"\ndemo field drain (0.95 m): mean on the drain / median of its slice: "
                  f"{', '.join(drain)}")
    print(f"\nload average at end: {_load()}")
    sys.stdout.flush()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
