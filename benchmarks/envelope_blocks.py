"""The envelope of a line whole against a block of traces at a time.

:func:`slicer.processing.hilbert.envelope_core` takes the Hilbert transform by real FFTs. Done
on a whole line at once, each step (transform, product, inverse, squares) streams the line's
spectrum through memory; in blocks of traces whose spectra take about ``BLOCK_BYTES`` the
spectrum stays in the processor's cache. This script times both on lines of synthetic radar
traces (``--traces`` traces of 512 samples: a Ricker-like wavelet train in noise, made here)
and several block sizes, in CPU seconds of this process (best of ``--repeat``), and checks that
every way gives the same envelope as ``scipy.signal.hilbert`` (largest difference relative to
the line's peak, float32 rounding). A second table times the rest of the line chain before
migration, dewow and the fitted (``"scaled"``) background removal
(:func:`slicer.processing.steps._chain_core`), whole and by the default blocks, and checks that
both give the same values. With ``--pair`` the timing runs in two processes at once,
as a build's two workers do.

    python benchmarks/envelope_blocks.py [--traces 800,2000,3165] [--repeat 11] [--pair]
"""

from __future__ import annotations

import argparse
import concurrent.futures
import sys
import time

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
import numpy as np  # noqa: E402
import scipy.fft  # noqa: E402
import scipy.signal  # noqa: E402
from _common import _f, _table  # noqa: E402

import slicer.processing.hilbert as hilbert  # noqa: E402

SAMPLES = 512
BLOCKS = (64, 128, 256, 512)


def make_line(n: int) -> np.ndarray:
    rng = np.random.default_rng(n)
    t = np.arange(SAMPLES) * 0.1  # ns
    line = rng.normal(scale=0.02, size=(n, SAMPLES))
    for delay in (5.0, 12.0, 20.0, 33.0):
        arrival = delay + rng.normal(scale=0.5, size=(n, 1))
        a = (np.pi * 0.4 * (t - arrival)) ** 2  # 400 MHz Ricker
        line += (1 - 2 * a) * np.exp(-a) / (1 + delay / 10)
    return line.astype(np.float32)


def timed(line: np.ndarray, block_bytes: int, repeat: int) -> float:
    saved = hilbert.BLOCK_BYTES
    hilbert.BLOCK_BYTES = block_bytes
    try:
        best = np.inf
        for _ in range(repeat):
            start = time.process_time()
            hilbert.envelope_core(line)
            best = min(best, time.process_time() - start)
        return best
    finally:
        hilbert.BLOCK_BYTES = saved


def bytes_for(traces: int) -> int:
    """BLOCK_BYTES that gives blocks of ``traces`` traces of SAMPLES samples."""
    nfft = scipy.fft.next_fast_len(2 * SAMPLES, real=False)
    return traces * 8 * (nfft // 2 + 1)


def run(n: int, repeat: int) -> list[str]:
    line = make_line(n)
    reference = np.abs(scipy.signal.hilbert(line.astype(np.float64), N=2 * SAMPLES,
                                            axis=-1)[:, :SAMPLES])
    peak = float(reference.max())
    worst = 0.0
    times = {"whole": timed(line, 1 << 40, repeat),
             "default": timed(line, hilbert.BLOCK_BYTES, repeat)}
    for b in BLOCKS:
        times[b] = timed(line, bytes_for(b), repeat)
    for b in (1 << 40, *(bytes_for(b) for b in BLOCKS)):
        saved, hilbert.BLOCK_BYTES = hilbert.BLOCK_BYTES, b
        try:
            worst = max(worst, float(np.abs(hilbert.envelope_core(line) - reference).max()))
        finally:
            hilbert.BLOCK_BYTES = saved
    default = hilbert.block_traces(SAMPLES)
    return [str(n), _f(1000 * times["whole"]), *(_f(1000 * times[b]) for b in BLOCKS),
            f"{default}: {_f(1000 * times['default'])}",
            _f(times["whole"] / times["default"], 2), f"{worst / peak:.1e}"]


def chain_row(n: int, repeat: int) -> list[str]:
    """Dewow and the fitted background of a line: whole against the default blocks."""
    from slicer.processing.steps import _chain_core
    line = make_line(n)
    kwargs = dict(size=39, background={"method": "scaled", "window": None}, factor=None,
                  take_envelope=False)
    out = {}
    for name, block_bytes in (("whole", 1 << 40), ("blocks", hilbert.BLOCK_BYTES)):
        saved, hilbert.BLOCK_BYTES = hilbert.BLOCK_BYTES, block_bytes
        try:
            best = np.inf
            for _ in range(repeat):
                start = time.process_time()
                values = _chain_core(line, **kwargs)
                best = min(best, time.process_time() - start)
        finally:
            hilbert.BLOCK_BYTES = saved
        out[name] = (best, values)
    same = np.array_equal(out["whole"][1], out["blocks"][1])
    return [str(n), _f(1000 * out["whole"][0]), _f(1000 * out["blocks"][0]),
            _f(out["whole"][0] / out["blocks"][0], 2), "yes" if same else "NO"]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--traces", default="800,2000,3165")
    parser.add_argument("--repeat", type=int, default=11)
    parser.add_argument("--pair", action="store_true", help="two processes at once")
    args = parser.parse_args(argv)
    sizes = [int(v) for v in args.traces.split(",")]
    rows = []
    for n in sizes:
        if args.pair:
            with concurrent.futures.ProcessPoolExecutor(2) as pool:
                both = list(pool.map(run, [n, n], [args.repeat] * 2))
            rows += both
        else:
            rows.append(run(n, args.repeat))
    print(f"envelope of one line of 512 samples, ms of CPU (best of {args.repeat})"
          + (", two processes at once (a row each)" if args.pair else ""))
    print(_table(["traces", "whole", *(f"blocks of {b}" for b in BLOCKS), "default block: ms",
                  "whole/default", "largest difference / peak"], rows))
    print("dewow (39 samples) and the fitted background, ms of CPU (best of "
          f"{args.repeat})")
    print(_table(["traces", "whole", "blocks", "whole/blocks", "same values"],
                 [chain_row(n, args.repeat) for n in sizes]))
    return 0


if __name__ == "__main__":
    sys.exit(main())
