"""What every trace step reads off a line: its sample interval, its dominant frequency (after
a slow baseline is taken out), its name for messages, and the history it carries.

Kept apart from :mod:`slicer.processing.steps` so that the time-zero pick
(:mod:`slicer.processing.time_zero`) and the steps both build on it without a cycle.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import scipy.fft
import scipy.ndimage

from slicer.core.conventions import TWT
from slicer.core.errors import SettingsError
from slicer.core.line_checks import checked_line

if TYPE_CHECKING:
    import xarray as xr

__all__ = ["add_history", "dominant_frequency", "dominant_frequency_of", "line_name",
           "remove_baseline", "sample_interval"]


def add_history(line: xr.DataArray, step: str) -> xr.DataArray:
    """Append ``step`` to ``attrs["history"]`` (in place) and return ``line``."""
    history = line.attrs.get("history", "")
    line.attrs = {**line.attrs, "history": f"{history}; {step}" if history else step}
    return line


def sample_interval(line: xr.DataArray) -> float:
    """Sample interval (ns) of a line, from its ``twt`` coordinate."""
    twt = line[TWT].values
    if twt.size < 2:
        raise SettingsError("a line needs at least two samples per trace")
    return float(twt[1] - twt[0])


def remove_baseline(samples: np.ndarray) -> np.ndarray:
    """Subtract a Gaussian running mean, sigma a twentieth of the record (last axis).

    As :func:`scipy.ndimage.gaussian_filter1d` (``mode="nearest"``, 4 sigma each side), but
    by FFT (the kernel spans two fifths of the record; sliding it was the largest step of a
    picked time zero): :func:`scipy.signal.fftconvolve`'s "valid" convolution of the
    edge-padded traces, with :mod:`scipy.fft` because importing :mod:`scipy.signal` took
    0.6-0.7 s of every worker's start (benchmarks/startup.py).
    """
    sigma = max(1.0, samples.shape[-1] / 20)
    if samples.ndim == 1 or samples.shape[-1] < 64:
        return samples - scipy.ndimage.gaussian_filter1d(samples, sigma, axis=-1, mode="nearest")
    r = int(4.0 * sigma + 0.5)
    kernel = np.exp(-0.5 * (np.arange(-r, r + 1) / sigma) ** 2)
    kernel /= kernel.sum()
    padded = np.pad(samples, [(0, 0)] * (samples.ndim - 1) + [(r, r)], mode="edge")
    n = scipy.fft.next_fast_len(padded.shape[-1] + 2 * r, real=True)  # no wrap-around
    smooth = scipy.fft.irfft(scipy.fft.rfft(padded, n, axis=-1) * scipy.fft.rfft(kernel, n), n)
    return samples - smooth[..., 2 * r:2 * r + samples.shape[-1]]  # the "valid" part


def dominant_frequency(line: xr.DataArray) -> float:
    """Frequency (GHz) of the peak of the line's mean amplitude spectrum.

    Wow (a slow drift of the trace baseline) is first reduced by subtracting a Gaussian
    running mean (sigma a twentieth of the record), and frequencies below four cycles per
    record are ignored, so that the drift cannot be taken for the signal.

    Parameters
    ----------
    line : xarray.DataArray
        A line: a ``twt`` dim with evenly spaced two-way times (ns); the spectrum is averaged
        over every other dim (usually ``trace``).

    Returns
    -------
    float
        The dominant frequency, GHz.
    """
    line = checked_line(line, step="dominant_frequency")
    return dominant_frequency_of(line.values, dt=sample_interval(line), where=line_name(line))


def line_name(line: xr.DataArray) -> str:
    """The line's file or name, for messages."""
    return str(line.attrs.get("source", line.attrs.get("line", "line")))


def dominant_frequency_of(samples: np.ndarray, *, dt: float, where: str = "line") -> float:
    """:func:`dominant_frequency` of plain samples (last axis twt, ``dt`` ns apart)."""
    # a first running mean (sigma a twentieth of the record) takes out most of the wow, which would
    # otherwise dominate the low end of the spectrum
    # (a Gaussian, whose response has no side lobes to shift the peak)
    samples = remove_baseline(np.asarray(samples, dtype=np.float64))
    spectrum = np.abs(scipy.fft.rfft(samples, axis=-1)).mean(axis=tuple(range(samples.ndim - 1)))
    freqs = scipy.fft.rfftfreq(samples.shape[-1], d=dt)
    usable = freqs >= 4.0 / (samples.shape[-1] * dt)
    if not usable.any() or not np.isfinite(spectrum[usable]).any() or spectrum[usable].max() == 0:
        raise SettingsError("cannot find a dominant frequency in a silent or too short record",
                            where=where)
    return float(freqs[usable][np.argmax(spectrum[usable])])
