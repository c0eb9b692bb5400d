"""What the benchmark scripts share: one BLAS thread, slicer from the checkout, memory readings,
fresh processes and plain-text tables.

Import it before numpy: the thread settings only take effect if they precede numpy's import.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import math
import multiprocessing
import os
import resource
import sys
import tempfile
from pathlib import Path

# One BLAS thread unless the caller says otherwise, set before numpy loads. The pipeline and the
# floor are single-threaded, and griddata's point location makes thousands of tiny LAPACK calls:
# with OpenBLAS threads on 2 busy cores those calls were seen to run 10-100x slower, erratically,
# which would flatter slicer's gridding speed-up (see benchmarks/README.md).
# A process started by in_fresh_process(..., blas_default=True) keeps the libraries' defaults,
# as a user's process has them.
BLAS_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
if not os.environ.get("SLICER_BENCH_BLAS_DEFAULT"):
    for _variable in BLAS_VARIABLES:
        os.environ.setdefault(_variable, "1")

try:
    import slicer  # noqa: F401 - imported for the scripts, after the thread settings
except ModuleNotFoundError as missing:  # a checkout, not installed: the package is one level up
    if missing.name != "slicer":
        raise
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def compile_slicer(folder: Path | None = None) -> int:
    """Byte-compile slicer's modules (those of the package in ``folder``, default the one
    imported) into their ``__pycache__`` folders, as ``pip install .`` does at install time;
    returns how many were compiled anew.

    A checkout installed with ``pip install -e .`` under ``PYTHONDONTWRITEBYTECODE=1`` (set on
    this machine) never caches its byte code, so every process of a build compiled all of
    slicer's modules again (about 0.3 s of a 3 s build at 65 k traces), while the libraries it
    is compared with were compiled when pip installed them. Python still reads cached byte code
    under that setting; it only does not write it.
    """
    import compileall
    import io
    if folder is None:
        import slicer as package
        folder = Path(package.__file__).parent
    before = sum(1 for _ in folder.rglob("__pycache__/*.pyc"))
    with contextlib.redirect_stdout(io.StringIO()):
        compileall.compile_dir(folder, quiet=1)
    return sum(1 for _ in folder.rglob("__pycache__/*.pyc")) - before


def _f(value, digits: int = 2) -> str:
    return "-" if value is None or not math.isfinite(value) else f"{value:.{digits}f}"


def _memory_mib() -> tuple[float, float, str]:
    """Current and peak resident memory of this process (MiB), and where the peak came from.

    The peak is the kernel's high-water mark of this address space (``VmHWM``), which starts
    afresh at exec. ``getrusage(...).ru_maxrss`` is the fallback where /proc is missing: on
    Linux a spawned child inherits its parent's ru_maxrss through fork and exec (a 29 MiB child
    of a parent that had peaked at 790 MiB reports 790 MiB), so it would overstate the peak.
    """
    try:
        status = Path("/proc/self/status").read_text()
        kib = {k: float(v.split()[0]) for k, v in
               (line.split(":", 1) for line in status.splitlines() if ":" in line)
               if k in ("VmRSS", "VmHWM")}
        return kib["VmRSS"] / 1024, kib["VmHWM"] / 1024, "VmHWM"
    except (OSError, KeyError, ValueError):
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB on Linux
        return math.nan, peak, "ru_maxrss"


def in_fresh_process(function, *args, blas_default: bool = False):
    """Run ``function(*args)`` in a new spawned interpreter, so its peak memory is its own.

    ``blas_default``: without this module's one-BLAS-thread variables (a user's environment).
    """
    context = multiprocessing.get_context("spawn")
    saved = dict(os.environ)
    if blas_default:  # the child is started, with this environment, by the submit below
        for name in BLAS_VARIABLES:
            os.environ.pop(name, None)
        os.environ["SLICER_BENCH_BLAS_DEFAULT"] = "1"
    try:
        with concurrent.futures.ProcessPoolExecutor(max_workers=1, mp_context=context) as pool:
            future = pool.submit(function, *args)
            os.environ.clear()
            os.environ.update(saved)
            return future.result()
    finally:
        os.environ.clear()
        os.environ.update(saved)


def _table(header: list[str], rows: list[list[str]]) -> str:
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]
    line = "| " + " | ".join(h.rjust(w) for h, w in zip(header, widths, strict=True)) + " |"
    rule = "|" + "|".join("-" * (w + 1) + ":" for w in widths) + "|"
    body = ["| " + " | ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)) + " |"
            for r in rows]
    return "\n".join([line, rule, *body])


def square_patch(n_traces: int, *, line_spacing: float, trace_spacing: float, west: float,
                 south: float) -> list:
    """Zigzag west-east lines over a roughly square patch holding about ``n_traces`` traces."""
    from slicer.synthetic import grid_lines
    # a square patch: lines = sqrt(N x trace spacing / line spacing)
    n_lines = max(2, round(math.sqrt(n_traces * trace_spacing / line_spacing)))
    per_line = max(2, round(n_traces / n_lines))
    return grid_lines(west=west, south=south, length=trace_spacing * (per_line - 1),
                      width=line_spacing * (n_lines - 1), line_spacing=line_spacing,
                      trace_spacing=trace_spacing, direction="x", zigzag=True)


def work_root(keep: Path | None, prefix: str):
    """The folder for a benchmark's surveys and outputs: ``keep`` (created, kept) or a temporary
    one. Returns ``(root, cleanup)``; ``cleanup`` is None or a TemporaryDirectory to close."""
    if keep is not None:
        root = keep.resolve()
        root.mkdir(parents=True, exist_ok=True)
        return root, None
    cleanup = tempfile.TemporaryDirectory(prefix=prefix)
    return Path(cleanup.name), cleanup


@contextlib.contextmanager
def work_folder(keep: Path | None, prefix: str):
    """:func:`work_root` as a context: yields the folder and removes it at the end unless kept."""
    root, cleanup = work_root(keep, prefix)
    try:
        yield root
    finally:
        if cleanup is not None:
            cleanup.cleanup()


def survey_options(parser) -> None:
    """The options of a script that builds one synthetic survey several ways."""
    parser.add_argument("--traces", type=int, default=65_000,
                        help="survey size (default 65000)")
    parser.add_argument("--repeat", type=int, default=3, help="builds per way (default 3)")
    parser.add_argument("--scheduler", default="threads", help="engine (default threads)")
    parser.add_argument("--keep", type=Path, help="keep the survey and outputs in this folder")


class TunedFloor:
    """The least work any envelope build does, done well: each line read once through a
    memory map (segyio's ``f.mmap()``) and its envelope taken in float32 by real FFTs
    (``scipy.fft``): one ``rfft`` of the traces zero-padded to ``next_fast_len(2 n)`` as slicer
    pads, the spectrum times -i (DC and Nyquist zeroed) whose ``irfft`` is the Hilbert
    transform, and ``sqrt(x^2 + H^2)``, into buffers reused from line to line. One instance per
    thread. (:class:`ComplexFloor` is the same with one complex FFT and inverse, the floor of
    2026-12-02, about 1.6 times slower.)"""

    def __init__(self):
        self._padded = self._out = self._square = None

    def __call__(self, path) -> int:
        """Read and envelope one line file; returns its trace count."""
        import numpy as np
        import scipy.fft
        import segyio
        with segyio.open(str(path), "r", ignore_geometry=True) as f:
            f.mmap()
            data = f.trace.raw[:]
        m, n = data.shape
        nfft = scipy.fft.next_fast_len(2 * n, real=True)
        if self._padded is None or self._padded.shape != (m, nfft):
            self._padded = np.zeros((m, nfft), dtype=np.float32)  # the tail stays zero
            self._out = np.empty((m, n), dtype=np.float32)
            self._square = np.empty((m, n), dtype=np.float32)
        self._padded[:, :n] = data
        spectrum = scipy.fft.rfft(self._padded, axis=-1, workers=1)
        spectrum[:, 0] = 0
        if nfft % 2 == 0:
            spectrum[:, -1] = 0
        spectrum *= np.complex64(-1j)
        hilbert = scipy.fft.irfft(spectrum, n=nfft, axis=-1, overwrite_x=True, workers=1)
        np.multiply(data, data, out=self._out)
        np.multiply(hilbert[:, :n], hilbert[:, :n], out=self._square)
        self._out += self._square
        np.sqrt(self._out, out=self._out)
        return m

    @property
    def envelope(self):
        """The last line's envelope (traces, samples)."""
        return self._out


class ComplexFloor:
    """The floor of 2026-12-02: as :class:`TunedFloor`, but the analytic signal by one complex
    FFT and its inverse per line (complex64 buffers reused), about 1.6 times slower than by
    real FFTs. Kept to compare with the ratios measured against it."""

    def __init__(self):
        self._buffer = None
        self._weights = None
        self.envelope = None

    def __call__(self, path) -> int:
        """Read and envelope one line file; returns its trace count."""
        import numpy as np
        import scipy.fft
        import segyio
        with segyio.open(str(path), "r", ignore_geometry=True) as f:
            f.mmap()
            data = f.trace.raw[:]
        n = data.shape[-1]
        nfft = scipy.fft.next_fast_len(2 * n)
        if self._buffer is None or self._buffer.shape != (data.shape[0], nfft):
            self._buffer = np.empty((data.shape[0], nfft), dtype=np.complex64)
            h = np.zeros(nfft, dtype=np.float32)  # the analytic signal's one-sided weights
            h[0] = 1
            h[1:(nfft + 1) // 2] = 2
            if nfft % 2 == 0:
                h[nfft // 2] = 1
            self._weights = h
        buffer = self._buffer
        buffer[:, :n] = data
        buffer[:, n:] = 0
        scipy.fft.fft(buffer, axis=-1, overwrite_x=True, workers=1)
        buffer *= self._weights
        analytic = scipy.fft.ifft(buffer, axis=-1, overwrite_x=True, workers=1)
        self.envelope = np.abs(analytic[:, :n])
        return data.shape[0]
