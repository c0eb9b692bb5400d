"""Background removal cores: the line's average trace, subtracted whole, fitted, or in a window.

The average (mean or median) trace of a line holds what is the same on every trace: the direct
wave, antenna ringing, and any flat layer that runs under the whole line. Subtracting it as it is
(``"mean"``, ``"median"``) takes all of them out, and where a strong reflector above shadows a
layer, the layer's average is subtracted from traces that never held it: a *ghost* of opposite
polarity appears under the reflector at the layer's time, as bright in the envelope as the layer
was, and in a slice it reads as a target.

``"scaled"`` (the default) fits the median trace to each trace in a window sliding down the
record, about one and a half periods of the background's dominant frequency long, and
subtracts the fitted amount (least squares: ``a = sum(x b) / sum(b b)`` over the window, kept
between 0 and :data:`MAX_SCALE`). Ringing and the direct wave, the same on every trace, are
fitted with ``a`` near 1 and removed as before; under a reflector that shadows a layer, the
trace holds little of the layer, ``a`` falls, and no ghost is made. A target whose wavelet
coincides in time and shape with the background's leaks into ``a`` in proportion to its
correlation with it, and is partly removed, as with the plain median (common practice for
adaptive subtraction).

The median trace of ``"median"`` and ``"scaled"`` is taken over every k-th trace of the line,
k = n // :data:`MEDIAN_TRACES` (so at least 512 traces; every trace of a line of fewer than
1024), spread evenly from end to end: the exact median of a line of 3 000 traces took half as
long as its migration. After dewow it differs from the median of all traces by at most 0.52 %
of the line's RMS amplitude on lines of 2 000 traces (median 0.24 %, benchmarks/line_task.py
--traces 400000, 4.4 times faster) and 0.75 % on lines of 3 165 (median 0.29 %, 6.8 times
faster; benchmarks/README.md). A background that is the same on every trace (ringing, the
direct wave) is the same in any subset, and the noise of the estimate, a few hundredths of the
noise on one trace, is a weak stripe along the line that adds to an envelope in quadrature:
slices of the 400 k benchmark survey show the same line-to-line spread either way.

A *time window* ``(top, bottom)`` (ns) limits any method to that part of the record, tapered
over half a period at each end inside it: ``median:0-12`` removes the ringing of the first
12 ns and keeps every flat layer below.

Written as a string (the build's ``background`` setting): ``"scaled"``, ``"median"``,
``"mean"``, each optionally followed by ``":TOP-BOTTOM"`` in ns; ``"off"`` for none
(:func:`parse_background`).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from slicer.core.errors import SettingsError

#: Background methods.
METHODS = ("scaled", "median", "mean")
#: Largest factor the ``"scaled"`` fit may give the background on one trace.
MAX_SCALE = 2.0
#: The ``"scaled"`` fit's window, in periods of the background's dominant frequency.
FIT_PERIODS = 1.5
#: Fewest traces the median trace of a background removal is taken over (every k-th trace,
#: k = n // MEDIAN_TRACES: :func:`background_median`).
MEDIAN_TRACES = 512

_SPEC = re.compile(r"^\s*(?P<method>[a-z]+)\s*(?::\s*(?P<top>[-+0-9.eE]+)\s*-\s*"
                   r"(?P<bottom>[-+0-9.eE]+)\s*)?$")


@dataclass(frozen=True)
class Background:
    """A background removal: ``method`` and an optional ``window`` ``(top, bottom)`` in ns."""

    method: str = "scaled"
    window: tuple[float, float] | None = None

    def __post_init__(self):
        if self.method not in METHODS:
            raise SettingsError(f"the method must be one of {', '.join(METHODS)}, got "
                                f"{self.method!r}", where="--background")
        if self.window is not None:
            top, bottom = self.window
            if not (math.isfinite(top) and math.isfinite(bottom) and 0 <= top < bottom):
                raise SettingsError(f"the window must be TOP-BOTTOM in ns with 0 <= TOP < "
                                    f"BOTTOM, got {top:g}-{bottom:g}", where="--background")

    def __str__(self) -> str:
        if self.window is None:
            return self.method
        return f"{self.method}:{self.window[0]:g}-{self.window[1]:g}"

    def describe(self) -> str:
        """Words for the processing history."""
        what = {"scaled": "median trace fitted per trace", "median": "median trace",
                "mean": "mean trace"}[self.method]
        if self.window is not None:
            what += f", {self.window[0]:g}-{self.window[1]:g} ns"
        return f"background removal ({what})"


def parse_background(spec: str | Background | None) -> Background | None:
    """A :class:`Background` from its text (``"scaled"``, ``"median:0-12"``...), or None for
    ``"off"`` / None."""
    if spec is None or isinstance(spec, Background):
        return spec
    if not isinstance(spec, str):
        raise SettingsError(f"expected text such as 'scaled' or 'median:0-12', got {spec!r}",
                            where="--background")
    if spec.strip() == "off":
        return None
    m = _SPEC.match(spec)
    if m is None:
        raise SettingsError(f"expected scaled, median or mean, optionally with :TOP-BOTTOM in "
                            f"ns, or off; got {spec!r}", where="--background")
    window = None
    if m["top"] is not None:
        try:
            window = (float(m["top"]), float(m["bottom"]))
        except ValueError:
            raise SettingsError(f"cannot read the window of {spec!r} as TOP-BOTTOM ns",
                                where="--background") from None
    return Background(m["method"], window)


def transposed(samples: np.ndarray) -> np.ndarray:
    """A C-contiguous float32 copy of ``samples`` with its last two axes swapped.

    Copied in bands of 32 traces, which stay in the CPU cache: a plain strided copy of a
    line took seven times longer, more than the median itself.
    """
    if samples.ndim != 2:
        return np.ascontiguousarray(np.swapaxes(samples, -1, -2), dtype=np.float32)
    out = np.empty(samples.shape[::-1], dtype=np.float32)
    for i in range(0, samples.shape[0], 32):
        out[:, i:i + 32] = samples[i:i + 32].T
    return out


def median_trace(samples: np.ndarray) -> np.ndarray:
    """Median over the trace axis (-2) of ``(..., trace, twt)`` samples: ``(..., twt)``.

    One partition of a contiguous ``(twt, trace)`` copy: NumPy's median along the strided
    trace axis is about a third slower. A column holding NaN gives NaN, as ``np.median``.
    """
    t = transposed(samples)
    n = t.shape[-1]
    k = n // 2
    t.partition(k, axis=-1)
    median = t[..., k].copy()
    if n % 2 == 0:  # the mean of the two middle values; the lower one leads the left part
        median += t[..., :k].max(axis=-1)
        median *= np.float32(0.5)
    median[np.isnan(t).any(axis=-1)] = np.nan
    return median


def estimate_rows(n: int) -> slice:
    """The traces (of ``n``) a median background is taken over: every k-th, k = n //
    :data:`MEDIAN_TRACES`, starting with the first; all of a line of fewer than twice that."""
    return slice(None, None, max(1, n // MEDIAN_TRACES))


def background_median(samples: np.ndarray) -> np.ndarray:
    """The median trace a background removal subtracts: :func:`median_trace` of every k-th
    trace (axis -2), k = n // :data:`MEDIAN_TRACES`, starting with the first; all traces of a
    line of fewer than twice that many."""
    return median_trace(samples[..., estimate_rows(samples.shape[-2]), :])


def _period_samples(background: np.ndarray) -> float:
    """The period, in samples, of the peak of the background trace's amplitude spectrum
    (averaged over any leading axes); 8 samples when it has no clear peak."""
    import scipy.fft  # here, not at module level: a build's settings are read without scipy
    flat = background.reshape(-1, background.shape[-1]).astype(np.float64)
    spectrum = np.abs(scipy.fft.rfft(np.nan_to_num(flat), axis=-1)).mean(axis=0)
    spectrum[0] = 0.0
    k = int(np.argmax(spectrum))
    return background.shape[-1] / k if k > 0 else 8.0


def _taper(n: int, window: tuple[int, int], ramp: int) -> np.ndarray:
    """Weights over ``n`` samples: 1 inside ``window`` (sample indices ``[top, bottom)``), a
    half-cosine ramp of ``ramp`` samples inside each end that lies within the record, 0
    outside."""
    w = np.zeros(n, dtype=np.float32)
    top, bottom = max(window[0], 0), min(window[1], n)
    if bottom <= top:
        return w
    w[top:bottom] = 1.0
    ramp = min(ramp, (bottom - top) // 2)
    if ramp > 0:
        rise = (0.5 - 0.5 * np.cos(np.pi * (np.arange(ramp) + 0.5) / ramp)).astype(np.float32)
        if window[0] > 0:  # a window from the record's start needs no ramp at its top
            w[top:top + ramp] = rise
        if window[1] < n:
            w[bottom - ramp:bottom] = rise[::-1]
    return w


@dataclass(frozen=True)
class Removal:
    """A line's background, ready to be taken off any block of its traces (:func:`remove`).

    ``background`` is the trace subtracted (``(..., 1, twt)``, tapered to its window); for
    ``"scaled"``, ``denominator`` is the sliding ``sum(b b)`` (plus its floor) and ``size`` the
    fit's window (samples).
    """

    method: str
    background: np.ndarray
    denominator: np.ndarray | None = None
    size: int = 0


def removal_of(taken: np.ndarray, *, method: str, window: tuple[int, int] | None = None
               ) -> Removal:
    """The :class:`Removal` of a line from ``taken``, the traces it is estimated over: every
    trace for ``"mean"``, the traces :func:`estimate_rows` picks for ``"median"`` and
    ``"scaled"`` (``(..., trace, twt)``, dewowed as the traces it is taken off)."""
    if method == "mean":  # accumulated in double: thousands of traces per line
        background = taken.mean(axis=-2, dtype=np.float64).astype(np.float32)
    else:
        background = median_trace(taken)
    period = None
    if window is not None:
        period = _period_samples(background)
        background = background * _taper(taken.shape[-1], window, int(period / 2))
    b = background[..., None, :].astype(np.float32)
    if method != "scaled":
        return Removal(method, b)
    period = period or _period_samples(background)
    size = max(3, int(round(FIT_PERIODS * period)) | 1)
    import scipy.ndimage
    bb = scipy.ndimage.uniform_filter1d(b * b, size, axis=-1, mode="nearest")
    floor = np.float32(1e-6) * np.nanmax(bb, axis=-1, keepdims=True) + np.float32(1e-30)
    return Removal(method, b, bb + floor, size)


def remove(samples: np.ndarray, removal: Removal) -> np.ndarray:
    """``samples`` (``(..., trace, twt)``, any of the line's traces) minus their background,
    float32."""
    b = removal.background
    if removal.method != "scaled":
        return np.subtract(samples, b, dtype=np.float32)
    # a = <x b> / <b b> over a sliding window; the floor keeps `a` quiet where b is silent
    import scipy.ndimage
    xb = scipy.ndimage.uniform_filter1d(samples * b, removal.size, axis=-1, mode="nearest")
    # in place on xb (float32, as the samples): the scale, then the fitted background
    scale = xb.astype(np.float32, copy=False)
    scale /= removal.denominator
    np.clip(scale, 0.0, MAX_SCALE, out=scale)
    scale *= b
    return np.subtract(samples, scale, dtype=np.float32)


def background_core(samples: np.ndarray, *, method: str,
                    window: tuple[int, int] | None = None) -> np.ndarray:
    """Samples ``(..., trace, twt)`` minus their background, float32.

    ``method`` is one of :data:`METHODS`; ``window`` limits the removal to samples
    ``[top, bottom)`` (indices along twt), tapered inside each end.
    """
    taken = samples if method == "mean" else samples[..., estimate_rows(samples.shape[-2]), :]
    return remove(samples, removal_of(taken, method=method, window=window))


def window_samples(window: tuple[float, float] | None, *, dt: float, twt0: float
                   ) -> tuple[int, int] | None:
    """A ``(top, bottom)`` window in ns as sample indices of an axis starting at ``twt0``."""
    if window is None:
        return None
    return (int(math.floor((window[0] - twt0) / dt + 0.5)),
            int(math.floor((window[1] - twt0) / dt + 0.5)) + 1)


__all__ = ["Background", "MEDIAN_TRACES", "METHODS", "Removal", "background_core",
           "background_median", "estimate_rows", "median_trace", "parse_background", "remove",
           "removal_of", "window_samples"]
