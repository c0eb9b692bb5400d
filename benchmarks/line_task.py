"""The line task's phases, before and after the lean line task, on one synthetic survey.

A build's line task (:func:`slicer.pipeline.line_tasks.reduce_line`) reads a line, places it,
processes it and reduces it to slice values. This script times each phase over every line of a
synthetic SEG-Y survey (about 65 k traces of 512 samples by default, written with
:mod:`slicer.synthetic`, timed apart), two ways in the same run:

* before: the line read without memory mapping and with every trace header's coordinates
  (what the reader did for every line), processed with the labelled steps
  (:func:`slicer.pipeline.line_chain.process_line`: a DataArray per fused part, and the
  sliding Gaussian baseline removal of the dominant frequency as it was) and reduced through
  :func:`slicer.gridding.windows.window_values`;
* after: the line task's own path: :func:`slicer.geometry.survey.load_line` (memory-mapped,
  coordinates only for lines placed from them), :func:`slicer.pipeline.line_chain.process_samples`
  with the survey's migrated band (one Stolt operator for lines of one size; before, each line
  measured its own band) and the window core on plain arrays. The band changes the migrated
  values a little (frequencies between the two bands' tops are migrated or passed through), so
  the printed difference of the results is that, not rounding.

Times are CPU seconds of this process (``time.process_time``): every step here runs on one
thread, and on a shared machine wall-clock time mostly measured the neighbours. Processing is
timed with time zero fixed (3 ns, the line task's phases and their total) and
picked on each line (the default; a separate row). Both ways run on one thread, each line in
turn, the lines read once before timing so the page cache holds them for both, and the Stolt
operators' cache emptied before each pass, as in a fresh worker (the best of ``--repeat`` runs
per phase is kept). The lines read must be identical (checked), and the largest difference
of the slice values and envelopes is printed (float32 rounding at most).

It also measures the median trace of all traces against cheaper robust estimates (slicer's:
every k-th trace, k = n // 512, :func:`slicer.processing.background.background_median`; the
median of a fixed number of traces; a trimmed mean): their time, and their largest difference
from the exact median relative to the RMS amplitude of the line. Lines of fewer than 1024
traces (the default survey's 800) are taken whole by slicer's: give ``--traces 400000`` or
more to see it differ.

Run ``python benchmarks/line_task.py --help``.
"""

from __future__ import annotations

import argparse
import contextlib
import math
import time
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import numpy as np  # noqa: E402 - after the thread settings
import segyio  # noqa: E402 - after the thread settings
from _common import _f, _table, square_patch, work_root  # noqa: E402

import slicer  # noqa: E402 - after the thread settings
import slicer.synthetic as syn  # noqa: E402 - after the thread settings
from slicer.core.conventions import TWT  # noqa: E402 - after the thread settings

SETTINGS = dict(crs="EPSG:32633", sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.1,
                depths="0:2.4:0.1")
LINE_SPACING, TRACE_SPACING = 0.5, 0.05
WEST, SOUTH = 512000.0, 4650000.0
SAMPLES = 512


def make_survey(folder: Path, n_traces: int) -> tuple[Path, float]:
    """Write (or reuse) the survey; its line table and the seconds taken (NaN if reused)."""
    table = folder / "lines.csv"
    if table.exists():
        return table, math.nan
    lines = square_patch(n_traces, line_spacing=LINE_SPACING, trace_spacing=TRACE_SPACING,
                         west=WEST, south=SOUTH)
    rng = np.random.default_rng(7)
    east = max(max(p.start_x, p.end_x) for p in lines) - WEST
    north = max(max(p.start_y, p.end_y) for p in lines) - SOUTH
    targets = tuple(syn.PointTarget(WEST + float(u) * east, SOUTH + float(v) * north, float(d))
                    for u, v, d in zip(rng.uniform(0.1, 0.9, 8), rng.uniform(0.1, 0.9, 8),
                                       rng.uniform(0.3, 2.0, 8), strict=True))
    ground = syn.Ground(velocity=0.1, attenuation_db_per_m=3.0, targets=targets,
                        layers=(syn.Layer(1.65, 0.3),))
    radar = syn.Radar(frequency_mhz=400.0, sample_interval_ns=0.1, samples=SAMPLES,
                      time_zero_ns=3.0, seed=20240611)
    started = time.perf_counter()
    survey = syn.write_survey(folder, ground, radar, lines, format="segy", crs=SETTINGS["crs"],
                              progress=False)
    return survey.line_table, time.perf_counter() - started


# --- the two ways ------------------------------------------------------------------------------

def read_before(entry, settings):
    """The reader as it was: plain reads, every trace header's coordinates, then placement."""
    from slicer.geometry.positioning import positioned
    from slicer.io import segy
    from slicer.io.lines import _choose_interval, _make_line, _zero_nonfinite
    layout = segy._inspect(entry.file)
    interval = _choose_interval(entry.file, layout.interval_ns, 0.1, "the SEG-Y header")
    with segyio.open(str(entry.file), "r", ignore_geometry=True) as f:
        data = np.asarray(f.trace.raw[:], dtype=np.float32).reshape(layout.n_traces,
                                                                    layout.n_samples)
        header_xy = segy._header_coordinates(f, entry.file)
    line = _make_line(_zero_nonfinite(data, entry.file), interval_ns=interval, path=entry.file,
                      name=None, header_xy=header_xy)
    return positioned(line, entry, settings)


def read_after(entry, settings):
    from slicer.geometry.survey import load_line
    return load_line(entry, settings, sample_interval_ns=0.1)


def _old_remove_baseline(samples):
    """The baseline removal as it was: scipy.ndimage.gaussian_filter1d, sliding."""
    import scipy.ndimage
    sigma = max(1.0, samples.shape[-1] / 20)
    return samples - scipy.ndimage.gaussian_filter1d(samples, sigma, axis=-1, mode="nearest")


def process_before(line, settings, dewow_ns):
    """The labelled chain, with the sliding baseline removal it had (used by a picked time
    zero: the dominant frequency, taken again for each use)."""
    from unittest import mock

    from slicer.pipeline.line_chain import process_line
    with (mock.patch("slicer.processing.trace_basics.remove_baseline", _old_remove_baseline),
          mock.patch("slicer.processing.time_zero.remove_baseline", _old_remove_baseline)):
        return process_line(line, settings, dewow_ns=dewow_ns)


def process_after(line, settings, dewow_ns):
    """The line task's chain, with the survey's migrated band as a build gives it (four times
    the first line's dominant frequency, which also sets ``dewow_ns``: 1.5 periods)."""
    from slicer.pipeline.line_chain import process_samples
    return process_samples(line.values, line[TWT].values, settings, dewow_ns=dewow_ns,
                           distance=line["distance"].values, frequency=1.5 / dewow_ns)


def reduce_before(env, windows, velocity):
    from slicer.gridding.windows import window_values
    from slicer.pipeline.line_tasks import depth_axis_for
    return window_values(depth_axis_for(env, windows, velocity), windows, velocity=velocity)


def reduce_after(done, windows, velocity):
    from slicer.gridding.windows import _window_means_core, window_limits
    lo, hi = window_limits(windows, velocity)
    return _window_means_core(done.envelope, twt=done.twt, t_top=lo, t_bottom=hi)


def _timed(function, items, repeat: int) -> tuple[float, list]:
    function(*items[0])  # once untimed: operators cached per line size, imports
    best, out = math.inf, []
    for _ in range(repeat):
        started = time.process_time()
        out = [function(*item) for item in items]
        best = min(best, time.process_time() - started)
    return best, out


def _paired(before, after, items_before, items_after, repeat: int):
    """Best seconds of ``before`` and ``after`` over their items, run in turn ``repeat``
    times (so a busy spell of a shared machine falls on both), and their last results."""
    before(*items_before[0]), after(*items_after[0])  # untimed: caches, imports
    from slicer.processing.fk import stolt_operator
    best, out = [math.inf, math.inf], [None, None]
    for _ in range(repeat):
        for k, (function, items) in enumerate(((before, items_before),
                                               (after, items_after))):
            stolt_operator.cache_clear()  # each pass from a cold cache, as a build's worker
            started = time.process_time()
            out[k] = [function(*item) for item in items]
            best[k] = min(best[k], time.process_time() - started)
    return best, out


def measure_phases(table: Path, repeat: int) -> tuple[list[list[str]], float, int]:
    """Rows of the phase table, the largest relative difference of the results, traces."""
    from slicer.geometry.survey import survey_info
    from slicer.pipeline.line_tasks import plan_windows
    from slicer.processing.steps import correct_time_zero, dominant_frequency
    settings = slicer.load_settings(table, **SETTINGS)
    info = survey_info(settings.lines, sample_interval_ns=0.1)
    windows = plan_windows(settings, info)
    velocity = settings.resolved_velocity
    entries = list(settings.lines)
    for entry in entries:  # warm the page cache for both ways
        entry.file.read_bytes()
    first = read_after(entries[0], settings)
    dewow_ns = 1.5 / dominant_frequency(correct_time_zero(first, time_zero=3.0))
    rows = []
    items = [(e, settings) for e in entries]
    (tb, ta), (lines, lines_after) = _paired(read_before, read_after, items, items, repeat)
    rows.append(["reading", _f(tb, 3), _f(ta, 3), _f(tb / ta)])
    items = [(ln, settings, dewow_ns) for ln in lines_after]
    (tb, ta), (envs, dones) = _paired(process_before, process_after, items, items, repeat)
    rows.append(["processing", _f(tb, 3), _f(ta, 3), _f(tb / ta)])
    picked = settings.replace(time_zero="auto")  # the default: time zero picked on each line
    items = [(ln, picked, dewow_ns) for ln in lines_after]
    (tb_p, ta_p), (envs_p, dones_p) = _paired(process_before, process_after, items, items,
                                              repeat)
    extra = ["processing, t0 picked", _f(tb_p, 3), _f(ta_p, 3), _f(tb_p / ta_p)]
    (tb, ta), (values_b, values_a) = _paired(
        reduce_before, reduce_after, [(e, windows, velocity) for e in envs],
        [(d, windows, velocity) for d in dones], repeat)
    rows.append(["reduction", _f(tb, 3), _f(ta, 3), _f(tb / ta)])
    total_b = sum(float(r[1]) for r in rows)
    total_a = sum(float(r[2]) for r in rows)
    rows.append(["line task", _f(total_b, 3), _f(total_a, 3), _f(total_b / total_a)])
    rows.append(extra)
    results = max(float(np.nanmax(np.abs(a - b)) / np.nanmax(np.abs(b)))
                  for a, b in zip(values_a, values_b, strict=True))
    results = max(results, *(float(np.nanmax(np.abs(a.envelope - b.values))
                                   / np.nanmax(np.abs(b.values)))
                             for a, b in zip(dones_p, envs_p, strict=True)))
    for a, b in zip(lines, lines_after, strict=True):
        np.testing.assert_array_equal(a.values, b.values)
        np.testing.assert_array_equal(a["x"].values, b["x"].values)
    return rows, results, info.n_traces


# --- robust background estimates ---------------------------------------------------------------

def subsample_median(samples: np.ndarray, count: int = 128) -> np.ndarray:
    """Median trace of ``count`` traces spread evenly over the line."""
    from slicer.processing.background import median_trace
    if samples.shape[0] <= count:
        return median_trace(samples)
    pick = np.linspace(0, samples.shape[0] - 1, count).round().astype(int)
    return median_trace(samples[pick])


def trimmed_mean(samples: np.ndarray, cut: float = 0.25) -> np.ndarray:
    """Mean of the middle half of the traces at every sample (scipy.stats.trim_mean)."""
    import scipy.stats
    return scipy.stats.trim_mean(samples, cut, axis=0).astype(np.float32)


def measure_background(table: Path, repeat: int) -> list[list[str]]:
    """Time and accuracy of the robust estimates against the exact median trace."""
    from slicer.processing.background import median_trace
    from slicer.processing.steps import _dewow_core
    settings = slicer.load_settings(table, **SETTINGS)
    # the background is taken after dewow, as in the chain (window 3.8 ns: 1.5 periods)
    lines = [_dewow_core(read_after(e, settings).values, size=39) for e in settings.lines]
    exact_s, exact = _timed(median_trace, [(x,) for x in lines], repeat)
    rows = [["median (exact)", _f(exact_s, 3), "1.00", "0", "0"]]
    from slicer.processing.background import background_median
    for name, function in (("every (n // 512)-th trace (slicer)", background_median),
                           ("median of 128 traces", subsample_median),
                           ("median of 256 traces", lambda x: subsample_median(x, 256)),
                           ("trimmed mean (25 %)", trimmed_mean)):
        seconds, got = _timed(function, [(x,) for x in lines], repeat)
        rel = [float(np.max(np.abs(g - e)) / np.sqrt(np.mean(np.square(x, dtype=np.float64))))
               for g, e, x in zip(got, exact, lines, strict=True)]
        rows.append([name, _f(seconds, 3), _f(exact_s / seconds), _f(max(rel), 4),
                     _f(float(np.median(rel)), 4)])
    return rows


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--traces", type=int, default=65536, help="survey size (traces)")
    parser.add_argument("--repeat", type=int, default=5, help="runs per phase (best kept)")
    parser.add_argument("--keep", type=Path, default=None,
                        help="folder to write the survey into and keep (reused if present)")
    args = parser.parse_args(argv)
    root, cleanup = work_root(args.keep, "slicer-line-task-")
    with cleanup if cleanup is not None else contextlib.nullcontext():
        table, written = make_survey(root, args.traces)
        print(f"survey: {table} (written in {_f(written, 1)} s)")
        rows, diff, traces = measure_phases(table, args.repeat)
        print(f"\nLine phases over {traces} traces of {SAMPLES} samples, one thread, CPU seconds "
              f"(best of {args.repeat}); results differ by at most {diff:.1e} of the largest "
              "value\n")
        print(_table(["phase", "before", "after", "before/after"], rows))
        print("\nMedian trace of the background against cheaper robust estimates "
              "(after dewow; difference = max |estimate - exact| / line RMS)\n")
        print(_table(["estimate", "seconds", "speed-up", "max diff", "median diff"],
                     measure_background(table, args.repeat)))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
