"""The mean of every trace over every slice window: one matrix product against sums of runs.

A line task reduces each processed line (traces x samples, float32) to its window means, the
exact mean of the piecewise-linear trace over each window. Until 2026-12-03 this was summed in
double precision by runs of samples between the windows' ends (``numpy.add.reduceat``, a
cumulative sum and the partial samples at each end; reproduced here as ``runs``); now it is
``samples @ W`` with the weights of :func:`slicer.gridding.windows.window_weights` (BLAS,
float32 for float32 samples). This script times both, alternating, on lines of the peers'
sizes (24 windows of 2 ns from 0 ns, samples of 0.1 ns, the first 30 above time zero) and
prints the ratio and their largest difference relative to the line's largest mean.

    python benchmarks/window_means.py [--repeat 30]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import numpy as np  # noqa: E402
from _common import _f, _table  # noqa: E402

from slicer.gridding.windows import _window_means_core  # noqa: E402


def runs(samples: np.ndarray, *, twt: np.ndarray, t_top: np.ndarray,
         t_bottom: np.ndarray) -> np.ndarray:
    """The window means as slicer summed them before: by runs of samples, in float64."""
    y = np.asarray(samples)
    n = y.shape[-1]
    dt = float(twt[1] - twt[0])

    def position(t):
        pos = (t - twt[0]) / dt
        k = np.clip(np.floor(pos).astype(int), 0, n - 2)
        return k, pos - k

    (k_top, u_top), (k_bottom, u_bottom) = position(t_top), position(t_bottom)
    ends = np.unique(np.concatenate([k_top, k_bottom]) + 1)
    sums = np.cumsum(np.add.reduceat(y, np.concatenate([[0], ends]), axis=-1,
                                     dtype=np.float64)[..., :-1], axis=-1)
    first = y[..., :1].astype(np.float64)

    def integral_to(k, u):
        y0 = y[..., k].astype(np.float64)
        s_k = sums[..., np.searchsorted(ends, k + 1)]
        return dt * (s_k - 0.5 * (first + y0) + u * y0 + 0.5 * u * u * (y[..., k + 1] - y0))

    means = (integral_to(k_bottom, u_bottom) - integral_to(k_top, u_top)) / (t_bottom - t_top)
    return means.astype(np.float32)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--repeat", type=int, default=30)
    args = parser.parse_args(argv)
    rng = np.random.default_rng(0)
    twt = (np.arange(512) - 30) * 0.1
    top = 2.0 * np.arange(24)
    rows = []
    for traces in (800, 2000, 3165):
        env = np.abs(rng.standard_normal((traces, 512))).astype(np.float32) * 100
        ways = {"runs (before)": runs, "matrix product": _window_means_core}
        times = {k: [] for k in ways}
        for _ in range(args.repeat):
            for name, f in ways.items():
                start = time.perf_counter()
                f(env, twt=twt, t_top=top, t_bottom=top + 2.0)
                times[name].append(time.perf_counter() - start)
        before = runs(env, twt=twt, t_top=top, t_bottom=top + 2.0)
        now = _window_means_core(env, twt=twt, t_top=top, t_bottom=top + 2.0)
        mid = {k: statistics.median(v) for k, v in times.items()}
        rows.append([str(traces), *(f"{_f(1000 * mid[k], 2)} ({_f(1000 * min(times[k]), 2)})"
                                    for k in ways),
                     _f(mid["runs (before)"] / mid["matrix product"]),
                     f"{np.abs(now - before).max() / np.abs(before).max():.1e}"])
    print(f"24 windows of 512 samples; ms per line, median (minimum) of {args.repeat}")
    print(_table(["traces", "runs (before)", "matrix product", "before/now",
                  "largest difference"], rows))
    return 0


if __name__ == "__main__":
    sys.exit(main())
