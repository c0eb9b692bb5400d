"""Trace processing: time zero (:mod:`slicer.processing.time_zero`), dewow, background removal,
gain and the amplitude envelope.

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

from slicer.core.conventions import TRACE, TWT
from slicer.core.errors import SettingsError
from slicer.core.line_checks import checked_line
from slicer.core.numbers import real
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
from slicer.processing.time_zero import (  # noqa: F401 (the steps' users import them here)
    correct_time_zero,
    pick_time_zero,
    pick_time_zero_of,
    time_zero_of,
)
from slicer.processing.trace_basics import (  # noqa: F401 (as above)
    add_history,
    dominant_frequency,
    dominant_frequency_of,
    sample_interval,
)

if TYPE_CHECKING:
    from collections.abc import Callable

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
    return add_history(out.transpose(*line.dims), step)  # the input's order of dims




# ---------------------------------------------------------------------------------------- dewow

#: Longest dewow window, in samples: a million, a thousand times the longest radar record.
MAX_WOW_SAMPLES = 1_000_000


def _wow_window(line, dt: float, window_ns: float | None = None) -> int:
    """Samples (odd) of the dewow window: ``window_ns``, else 1.5 periods of the dominant
    frequency of ``line`` (a DataArray or plain samples)."""
    if window_ns is None:  # a DataArray, or plain samples (NumPy, dask): no xarray for those
        window_ns = 1.5 / (dominant_frequency(line) if hasattr(line, "coords")
                           else dominant_frequency_of(line, dt=dt))
    window_ns = real(window_ns, where="--dewow")
    if not math.isfinite(window_ns) or window_ns <= 0:
        raise SettingsError(f"dewow window must be positive, got {window_ns:g} ns",
                            where="--dewow")
    if window_ns / dt > MAX_WOW_SAMPLES:  # far beyond any record; int() of it overflowed
        raise SettingsError(f"dewow window of {window_ns:g} ns is longer than any record "
                            f"({MAX_WOW_SAMPLES} samples of {dt:g} ns)", where="--dewow")
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
        the drift (common practice: one to two periods). On a dask-backed line the default
        reads the whole line once, for its frequency: give it to stay lazy.
    Returns
    -------
    xarray.DataArray
        The dewowed line: float32, the input's dims, chunks and coordinates,
        ``attrs["history"]`` extended.
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
    Returns
    -------
    xarray.DataArray
        The line less its background: float32, the input's dims, chunks and coordinates,
        ``attrs["history"]`` extended.
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
    if line.chunks is not None:  # the background needs every trace; the result, the input's
        out = out.chunk(dict(zip(line.dims, line.chunks, strict=True)))
    out.attrs = dict(line.attrs)
    return add_history(out, spec.describe())


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
    Returns
    -------
    xarray.DataArray
        The gained line: float32, the input's dims, chunks and coordinates,
        ``attrs["history"]`` extended.
    """
    value = real(value, where="--gain")
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

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``; ``twt`` in ns.
    Returns
    -------
    xarray.DataArray
        The envelope, named ``envelope``: float32, the input's dims, chunks and coordinates,
        ``attrs["history"]`` extended.
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
    while it is in cache (:func:`chain_step`): dewow and the fitted background of a
    3165-trace line took 14.9 ms whole, 11.8 ms by blocks, same values
    (benchmarks/envelope_blocks.py).
    """
    x, step = chain_step(samples, size=size, background=background, factor=factor,
                         take_envelope=take_envelope)
    out = np.empty(x.shape, dtype=np.float32)
    n = block_traces(x.shape[-1])
    for i in range(0, max(x.shape[-2], 1), n):
        out[..., i:i + n, :] = step(x[..., i:i + n, :])
    return out


def chain_step(samples: np.ndarray, *, size: int | None, background: dict | None,
               factor: np.ndarray | None, take_envelope: bool
               ) -> tuple[np.ndarray, Callable[[np.ndarray], np.ndarray]]:
    """The chain of :func:`_chain_core` (keywords from :func:`chain_plan`) as a step on a
    block of traces: ``(x, step)``, where ``step(x[..., i:j, :])`` gives traces ``i`` to
    ``j - 1`` processed (float32). ``x`` is ``samples`` as float32, dewowed whole already when
    the background is taken over every trace; the background is estimated here, once."""
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

    def step(block: np.ndarray) -> np.ndarray:
        if size is not None:
            block = _dewow_core(block, size=size)
        if removal is not None:
            block = remove(block, removal)
        if factor is not None:
            block = gain_core(block, factor=factor)
        if take_envelope:
            block = _envelope_core(block)
        return block

    return x, step


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
        out = add_history(out, step)
    if take_envelope:
        out.name = "envelope"
    return out
