"""Trace processing: time zero, dewow, background removal, gain and the amplitude envelope.

Each step is a function from a line ``DataArray`` (dims ``trace, twt``) to a new one, appending
to ``attrs["history"]``. Per-trace steps are written once as NumPy functions over the last axis
and wrapped once by :func:`_per_trace` with ``xr.apply_ufunc(..., dask="parallelized")``, so the
same code runs eagerly or on dask arrays (chunked along ``trace``; ``twt`` in one chunk).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
import scipy.fft
import scipy.ndimage

from slicer.core.conventions import C_M_PER_NS, TRACE, TWT
from slicer.core.errors import SettingsError, warn
from slicer.core.line_checks import checked_line
from slicer.core.physics import check_separation
from slicer.processing.background import (
    Background,
    background_core,
    estimate_rows,
    parse_background,
    removal_of,
    remove,
    window_samples,
)
from slicer.processing.gain import gain_core, gain_curve
from slicer.processing.hilbert import block_traces
from slicer.processing.hilbert import envelope_core as _envelope_core

if TYPE_CHECKING:
    import xarray as xr


def _per_trace(core, line: xr.DataArray, step: str, **kwargs) -> xr.DataArray:
    """Apply ``core(samples, **kwargs)`` (last axis = twt) to every trace of ``line``."""
    import xarray as xr
    data = line
    if data.chunks is not None:
        data = data.chunk({TWT: -1})
    out = xr.apply_ufunc(
        core, data, kwargs=kwargs,
        input_core_dims=[[TWT]], output_core_dims=[[TWT]],
        dask="parallelized", output_dtypes=[np.float32], keep_attrs=True)
    return _add_history(out, step)


def _add_history(line: xr.DataArray, step: str) -> xr.DataArray:
    history = line.attrs.get("history", "")
    line.attrs = {**line.attrs, "history": f"{history}; {step}" if history else step}
    return line


def sample_interval(line: xr.DataArray) -> float:
    """Sample interval (ns) of a line, from its ``twt`` coordinate."""
    twt = line[TWT].values
    if twt.size < 2:
        raise SettingsError("a line needs at least two samples per trace")
    return float(twt[1] - twt[0])


# ---------------------------------------------------------------------------- dominant frequency

def _remove_baseline(samples: np.ndarray) -> np.ndarray:
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
    """
    line = checked_line(line, step="dominant_frequency")
    return dominant_frequency_of(line.values, dt=sample_interval(line), where=_name(line))


def _name(line: xr.DataArray) -> str:
    return str(line.attrs.get("source", line.attrs.get("line", "line")))


def dominant_frequency_of(samples: np.ndarray, *, dt: float, where: str = "line") -> float:
    """:func:`dominant_frequency` of plain samples (last axis twt, ``dt`` ns apart)."""
    # a first running mean (sigma a twentieth of the record) takes out most of the wow, which would
    # otherwise dominate the low end of the spectrum
    # (a Gaussian, whose response has no side lobes to shift the peak)
    samples = _remove_baseline(np.asarray(samples, dtype=np.float64))
    spectrum = np.abs(scipy.fft.rfft(samples, axis=-1)).mean(axis=tuple(range(samples.ndim - 1)))
    freqs = scipy.fft.rfftfreq(samples.shape[-1], d=dt)
    usable = freqs >= 4.0 / (samples.shape[-1] * dt)
    if not usable.any() or not np.isfinite(spectrum[usable]).any() or spectrum[usable].max() == 0:
        raise SettingsError("cannot find a dominant frequency in a silent or too short record",
                            where=where)
    return float(freqs[usable][np.argmax(spectrum[usable])])


# ------------------------------------------------------------------------------------ time zero

#: Within one period of the direct wave's first crossing, the first lobe reaching this share
#: of the largest is its main peak: a wavelet of two nearly equal lobes (a Gaussian
#: derivative's) then gives every line the same lobe, where noise had flipped lines between
#: them, a half period apart.
LOBE_SHARE = 0.9


def _first_peak(trace: np.ndarray, threshold: float, period: int) -> float:
    """Fractional index of the main peak of ``|trace|`` within one period of its first
    crossing of ``threshold * max|trace|``: the first lobe there reaching :data:`LOBE_SHARE`
    of the largest."""
    a = np.abs(trace)
    top = a.max()
    if not np.isfinite(top) or top == 0:
        return math.nan
    first = int(np.argmax(a >= threshold * top))
    window = a[first:first + max(period, 1) + 1]
    i = first + int(np.argmax(window >= LOBE_SHARE * window.max()))
    while i + 1 < a.size and a[i + 1] > a[i]:  # up to that lobe's peak
        i += 1
    if 0 < i < a.size - 1:  # parabola through the peak and its neighbours: sub-sample time
        y0, y1, y2 = a[i - 1], a[i], a[i + 1]
        denom = y0 - 2 * y1 + y2
        if denom != 0:
            return i + 0.5 * (y0 - y2) / denom
    return float(i)


def pick_time_zero(line: xr.DataArray, *, threshold: float = 0.5) -> float:
    """Pick time zero (ns, on the line's current time axis) from the direct wave.

    The pick is made on the line's mean trace, after removing its slow baseline (a Gaussian
    running mean, sigma a twentieth of the record): the first sample whose absolute amplitude
    reaches ``threshold`` times the largest starts the first arrival, and the largest absolute
    amplitude within one dominant period after it is its main peak, refined to a fraction of a
    sample by a parabola through the peak. The direct (air-ground) wave is the strongest and
    earliest arrival on a ground-coupled antenna; its main peak is the project's definition of
    time zero (see the glossary in DEVELOPERS.md). Looking one period on keeps a side lobe
    that crosses the threshold first from being taken for the peak.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``.
    threshold : float
        Fraction (0-1] of the largest absolute amplitude that the direct wave must reach.
    """
    line = checked_line(line, step="pick_time_zero", traces=True)
    return pick_time_zero_of(line.data, line[TWT].values, mean=line.mean(TRACE).values,
                             threshold=threshold, where=_name(line))


def pick_time_zero_of(samples: np.ndarray, twt: np.ndarray, *, mean: np.ndarray | None = None,
                      threshold: float = 0.5, frequency: float | None = None,
                      where: str = "line") -> float:
    """:func:`pick_time_zero` of plain ``(trace, twt)`` samples on the axis ``twt`` (ns);
    ``mean`` is their mean trace and ``frequency`` their :func:`dominant_frequency_of`, if
    already known."""
    if not 0 < threshold <= 1:
        raise SettingsError(f"time-zero threshold must be in (0, 1], got {threshold:g}")
    if twt.size < 2:
        raise SettingsError("a line needs at least two samples per trace")
    dt = float(twt[1] - twt[0])
    if mean is None:  # as xarray's mean: NaN skipped
        mean = np.nanmean(samples, axis=0)
    mean = _remove_baseline(np.asarray(mean, dtype=np.float64))
    if not np.any(mean):
        index = math.nan
    else:
        if frequency is None:
            frequency = dominant_frequency_of(samples, dt=dt, where=where)
        period = int(round(1.0 / (frequency * dt)))
        index = _first_peak(mean, threshold, period)
    if not math.isfinite(index):
        raise SettingsError("cannot pick time zero on a silent line; give --time-zero NS",
                            where=where)
    _warn_earlier_arrival(mean, index, period, threshold, twt, where)
    return float(twt[0] + index * dt)


#: An arrival more than a period before the picked one is named when it stands this many times
#: above the median level before it and reaches :data:`EARLIER_SHARE` of the largest.
EARLIER_NOISE, EARLIER_SHARE = 10.0, 0.05


def _warn_earlier_arrival(mean: np.ndarray, index: float, period: int, threshold: float,
                          twt: np.ndarray, where: str) -> None:
    """Warn when the mean trace holds a clear arrival before the picked one: the direct wave
    is the earliest arrival, and one weaker than ``threshold`` of a later reflector is passed
    over (every depth then comes out too shallow, silently)."""
    a = np.abs(mean)
    before = a[:max(0, int(index) - 2 * max(period, 1))]  # the picked arrival's flank excluded
    if before.size < 4:
        return
    k = int(np.argmax(before))
    if before[k] > max(EARLIER_NOISE * float(np.median(before)), EARLIER_SHARE * a.max()):
        dt = float(twt[1] - twt[0])
        warn(f"{where}: time zero picked at {twt[0] + index * dt:.2f} ns, but an earlier "
             f"arrival at {twt[k]:.2f} ns reaches {before[k] / a.max():.2f} of the strongest "
             f"(below the threshold {threshold:g}): if it is the direct wave, lower "
             "--time-zero-threshold or give --time-zero")


def correct_time_zero(line: xr.DataArray, *, time_zero: float | str = "auto",
                      threshold: float = 0.5, separation: float = 0.0) -> xr.DataArray:
    """Shift the time axis so that ``twt = 0`` at time zero.

    Only the ``twt`` coordinate changes (no resampling); samples before time zero keep negative
    times. ``attrs["time_zero_ns"]`` accumulates the shift applied.

    Time zero is the moment the transmitter fires. With the antennas ``s`` metres apart the
    direct air wave reaches the receiver ``s / c`` later, so a picked time zero is the direct
    wave's main peak minus ``s / c`` (``c`` = 0.2998 m/ns; a 0.1 m separation moves it
    0.33 ns). A time zero given in ns is taken as the firing time, as it is.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``.
    time_zero : float or "auto"
        Time zero in ns on the line's current time axis, or ``"auto"`` for
        :func:`pick_time_zero`.
    threshold : float
        Passed to :func:`pick_time_zero` when ``time_zero="auto"``.
    separation : float
        Transmitter-receiver separation (m), for a picked time zero.
    """
    line = checked_line(line, step="correct_time_zero", traces=True)
    twt = line[TWT].values
    t0, how = time_zero_of(line.data, twt, time_zero=time_zero, threshold=threshold,
                           separation=separation,
                           mean=line.mean(TRACE).values if time_zero == "auto" else None,
                           where=_name(line))
    out = line.assign_coords({TWT: (TWT, twt - t0, line[TWT].attrs)})
    out.attrs = {**line.attrs, "time_zero_ns": float(line.attrs.get("time_zero_ns", 0.0)) + t0}
    return _add_history(out, how)


def time_zero_of(samples: np.ndarray, twt: np.ndarray, *, time_zero: float | str = "auto",
                 threshold: float = 0.5, separation: float = 0.0,
                 mean: np.ndarray | None = None, frequency: float | None = None,
                 where: str = "line") -> tuple[float, str]:
    """Time zero (ns on ``twt``) of plain ``(trace, twt)`` samples as
    :func:`correct_time_zero` finds it, and the words for the history."""
    s = check_separation(separation)
    if isinstance(time_zero, str):
        if time_zero != "auto":
            raise SettingsError(f"time zero must be a number of ns or 'auto', got {time_zero!r}",
                                where="--time-zero")
        t0 = pick_time_zero_of(samples, twt, mean=mean, threshold=threshold,
                               frequency=frequency, where=where) - s / C_M_PER_NS
        how = (f"time zero {t0:.3f} ns (picked" +
               (f", direct wave minus {s:g} m / c)" if s else ")"))
    else:
        t0 = float(time_zero)
        if not math.isfinite(t0):
            raise SettingsError("time zero must be finite", where="--time-zero")
        how = f"time zero {t0:.3f} ns"
    if not twt[0] <= t0 < twt[-1]:
        raise SettingsError(
            f"time zero {t0:g} ns lies outside the record ({twt[0]:g} to {twt[-1]:g} ns)",
            where="--time-zero")
    return t0, how


# ---------------------------------------------------------------------------------------- dewow

def _wow_window(line, dt: float, window_ns: float | None = None) -> int:
    """Samples (odd) of the dewow window: ``window_ns``, else 1.5 periods of the dominant
    frequency of ``line`` (a DataArray or plain samples)."""
    if window_ns is None:  # a DataArray, or plain samples (NumPy, dask): no xarray for those
        window_ns = 1.5 / (dominant_frequency(line) if hasattr(line, "coords")
                           else dominant_frequency_of(line, dt=dt))
    if not math.isfinite(window_ns) or window_ns <= 0:
        raise SettingsError(f"dewow window must be positive, got {window_ns:g} ns",
                            where="--dewow")
    return max(3, int(round(window_ns / dt)) | 1)  # odd, so the mean is centred


def _dewow_core(samples: np.ndarray, *, size: int) -> np.ndarray:
    samples = samples.astype(np.float32, copy=False)
    return samples - scipy.ndimage.uniform_filter1d(samples, size, axis=-1, mode="nearest")


def dewow(line: xr.DataArray, *, window_ns: float | None = None) -> xr.DataArray:
    """Remove wow, the slow drift of each trace's baseline, by subtracting a running mean.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``.
    window_ns : float, optional
        Length of the running mean (ns). Default 1.5 periods of the line's dominant frequency
        (:func:`dominant_frequency`): long enough to leave the wavelet, short enough to follow
        the drift (common practice: one to two periods).
    """
    checked_line(line, step="dewow")
    dt = sample_interval(line)
    size = _wow_window(line, dt, window_ns)
    return _per_trace(_dewow_core, line, f"dewow {size * dt:.2f} ns", size=size)


# ---------------------------------------------------------------------------- background removal

def remove_background(line: xr.DataArray, *, method: str | Background = "scaled"
                      ) -> xr.DataArray:
    """Subtract the line's background: what is the same on every trace (direct wave, ringing).

    See :mod:`slicer.processing.background` for the methods and what each removes.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``; ``twt`` in ns.
    method : str or Background
        ``"scaled"`` (the median trace fitted to each trace in a sliding window: no ghosts
        under strong reflectors), ``"median"`` or ``"mean"`` (subtracted as they are), each
        optionally limited to a time window, ``"median:0-12"`` (ns).
    """
    import xarray as xr
    # Not NaN-aware: readers have set non-finite samples to 0, and NaN-aware medians loop in
    # Python over every sample (a third of a build's time when it was used)
    checked_line(line, step="remove_background", traces=True)
    spec = _check_background(method)
    data = line.chunk({TRACE: -1, TWT: -1}) if line.chunks is not None else line
    sample_interval(line)  # at least two samples
    out = xr.apply_ufunc(
        background_core, data, kwargs=_background_kwargs(spec, line[TWT].values),
        input_core_dims=[[TRACE, TWT]], output_core_dims=[[TRACE, TWT]],
        dask="parallelized", output_dtypes=[np.float32], keep_attrs=True)
    out = out.transpose(*line.dims)
    out.attrs = dict(line.attrs)
    return _add_history(out, spec.describe())


def _check_background(method) -> Background:
    spec = parse_background(method)
    if spec is None:
        raise SettingsError("no background method given ('off' means: do not call this)",
                            where="--background")
    return spec


def _background_kwargs(spec: Background, twt: np.ndarray) -> dict:
    dt = float(twt[1] - twt[0])
    return {"method": spec.method,
            "window": window_samples(spec.window, dt=dt, twt0=float(twt[0]))}


# ----------------------------------------------------------------------------------------- gain

def apply_gain(line: xr.DataArray, *, kind: str = "power", value: float = 1.0) -> xr.DataArray:
    """Multiply every trace by a gain curve of two-way time (see :func:`gain_curve`).

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``, time-zero corrected.
    kind : {"power", "exp"}
        Shape of the curve.
    value : float
        Exponent (power) or rate in dB/ns (exp); must be finite and >= 0.
    """
    if not math.isfinite(value) or value < 0:
        raise SettingsError(f"gain value must be finite and >= 0, got {value:g}", where="--gain")
    checked_line(line, step="apply_gain")
    factor = gain_curve(line[TWT].values, kind=kind, value=value)
    return _per_trace(gain_core, line, f"gain {kind} {value:g}", factor=factor)


# ------------------------------------------------------------------------------------- envelope

def envelope(line: xr.DataArray) -> xr.DataArray:
    """Amplitude envelope: magnitude of the analytic signal along ``twt``.

    The analytic signal is ``x + i H[x]`` with ``H`` the Hilbert transform (Taner, Koehler and
    Sheriff 1979, Geophysics 44:1041-1063), formed from :func:`scipy.fft.fft` of the
    zero-padded trace in single precision, as :func:`scipy.signal.hilbert` forms it.
    """
    checked_line(line, step="envelope")
    out = _per_trace(_envelope_core, line, "envelope")
    out.name = "envelope"
    return out


# ------------------------------------------------------------------------------- the fused chain

def chain_plan(samples, twt: np.ndarray, *, dewow_ns: float | None | str = None,
               background: str | Background | None = "scaled",
               gain: tuple[str, float] | None = ("power", 1.0),
               take_envelope: bool = True) -> tuple[dict, list[str]]:
    """The keywords of :func:`_chain_core` for samples on the time axis ``twt`` (ns), and the
    history of each step (see :func:`process_chain` for the options). ``samples`` are read
    only when the dewow window defaults to the line's dominant frequency."""
    if twt.size < 2:
        raise SettingsError("a line needs at least two samples per trace")
    dt = float(twt[1] - twt[0])
    steps, size, factor = [], None, None
    if dewow_ns != "off":
        size = _wow_window(samples, dt, dewow_ns)
        steps.append(f"dewow {size * dt:.2f} ns")
    spec = parse_background(background)
    if spec is not None:
        steps.append(spec.describe())
    if gain is not None:
        kind, value = gain
        if not math.isfinite(value) or value < 0:
            raise SettingsError(f"gain value must be finite and >= 0, got {value:g}",
                                where="--gain")
        factor = gain_curve(twt, kind=kind, value=value)
        steps.append(f"gain {kind} {value:g}")
    if take_envelope:
        steps.append("envelope")
    core = {"size": size, "factor": factor, "take_envelope": take_envelope,
            "background": None if spec is None else _background_kwargs(spec, twt)}
    return core, steps


def _chain_core(samples: np.ndarray, *, size: int | None, background: dict | None,
                factor: np.ndarray | None, take_envelope: bool) -> np.ndarray:
    """Dewow, background removal, gain and envelope of ``(..., trace, twt)`` samples.

    The single steps' cores in their order on float32 samples (the input is never modified).
    The background is estimated first, from the dewowed traces it is taken over; then each
    block of traces (:func:`slicer.processing.hilbert.block_traces`) goes through every step
    while it is in cache: dewow and the fitted background of a 3165-trace line took 14.9 ms
    whole, 11.8 ms by blocks, same values (benchmarks/envelope_blocks.py).
    """
    x = samples.astype(np.float32, copy=False)
    removal = None
    if background is not None:
        if background["method"] == "mean":  # over every trace: dewowed whole first
            if size is not None:
                x, size = _dewow_core(x, size=size), None
            taken = x
        else:
            rows = estimate_rows(x.shape[-2])
            taken = x[..., rows, :]
            if size is not None:
                taken = _dewow_core(taken, size=size)
                if rows.step == 1:  # every trace: dewowed once, not again by blocks
                    x, size = taken, None
        removal = removal_of(taken, **background)
    out = np.empty(x.shape, dtype=np.float32)
    step = block_traces(x.shape[-1])
    for i in range(0, max(x.shape[-2], 1), step):
        block = x[..., i:i + step, :]
        if size is not None:
            block = _dewow_core(block, size=size)
        if removal is not None:
            block = remove(block, removal)
        if factor is not None:
            block = gain_core(block, factor=factor)
        if take_envelope:
            block = _envelope_core(block)
        out[..., i:i + step, :] = block
    return out


def process_chain(line: xr.DataArray, *, dewow_ns: float | None | str = None,
                  background: str | Background | None = "scaled",
                  gain: tuple[str, float] | None = ("power", 1.0),
                  take_envelope: bool = True) -> xr.DataArray:
    """Dewow, background removal, gain and envelope in one pass: the result of
    ``envelope(apply_gain(remove_background(dewow(line))))``, with the same history.

    Each step runs the NumPy core of its single-step function (:func:`dewow`,
    :func:`remove_background`, :func:`apply_gain`, :func:`envelope`) on one array, which
    saves the per-step xarray work (about a third of a line's time in a build).

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``, time-zero corrected.
    dewow_ns : float, None or "off"
        Dewow window (ns); None for the default of :func:`dewow`; ``"off"`` for no dewow.
    background : str, Background or None
        Background removal (see :func:`remove_background`), None or ``"off"`` for none.
    gain : (kind, value) or None
        Gain curve (see :func:`apply_gain`), None for none.
    take_envelope : bool
        End with the envelope (named ``envelope``).
    """
    import xarray as xr
    checked_line(line, step="process_chain", traces=True)
    core, steps = chain_plan(line.data, line[TWT].values, dewow_ns=dewow_ns,
                             background=background, gain=gain, take_envelope=take_envelope)
    if line.chunks is None and line.dims == (TRACE, TWT):  # the build's case: one array
        out = line.copy(data=_chain_core(line.values, **core))
    else:
        data = line.chunk({TRACE: -1, TWT: -1}) if line.chunks is not None else line
        out = xr.apply_ufunc(
            _chain_core, data, kwargs=core, input_core_dims=[[TRACE, TWT]],
            output_core_dims=[[TRACE, TWT]], dask="parallelized",
            output_dtypes=[np.float32], keep_attrs=True).transpose(*line.dims)
    out.attrs = dict(line.attrs)
    for step in steps:
        out = _add_history(out, step)
    if take_envelope:
        out.name = "envelope"
    return out
