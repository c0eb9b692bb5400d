"""Reflection polarity: the sign of a reflection relative to the direct wave.

The envelope (:func:`slicer.processing.steps.envelope`) keeps a reflection's strength and drops
its sign. The sign tells targets apart: a reflection from a faster medium (air-filled void,
plastic pipe in wet ground: lower relative permittivity than the ground) has the direct wave's
polarity, and one from a slower medium or a metal (higher permittivity or a conductor) has the
opposite (normal-incidence reflection coefficient ``(n1 - n2) / (n1 + n2)``, with ``n`` the
square root of the relative permittivity; Fresnel, as in every electromagnetics text; a
perfect conductor reflects with coefficient -1).

**Leading lobe.** A radar wavelet is seldom zero-phase, and an echo is often two reflections
close together (an air-filled pipe's top, of void polarity, then its bottom, of the opposite
one and often stronger). So the polarity of an event is read on its *leading lobe*: the first
half-cycle that reaches half the event's peak envelope, after the last sample before the peak
where the envelope was below that half (the event's onset). On a zero-phase (Ricker) echo it
is the main lobe; on a two-reflection echo it is the first reflection's. The direct wave's
polarity is read the same way on the line's median trace, before background removal, within
a stated reach of time zero. Checked on full-wave data (tests/fullwave): a steel and an
air-filled pipe read opposite signs.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import TRACE, TWT
from slicer.core.errors import SettingsError
from slicer.processing.background import median_trace

if TYPE_CHECKING:
    import xarray as xr


def leading_lobe_signs_core(samples: np.ndarray, envelope: np.ndarray, *,
                            axis_values: np.ndarray, top: np.ndarray, bottom: np.ndarray,
                            fraction: float = 0.5) -> np.ndarray:
    """Sign of the leading lobe of the strongest event in each window: ``(..., window)``.

    ``samples`` and ``envelope`` are ``(..., n)`` along ``axis_values``; in each window
    ``[top, bottom)`` the event is the envelope's largest sample there, and its leading lobe
    the first sample from its onset on whose magnitude reaches ``fraction`` of that peak (the
    onset may lie above the window: an event belongs to the window that holds its peak). +1 or
    -1; 0 where silent; NaN where the record does not reach the window. A window thinner than
    the sample interval takes the sample nearest its middle as the event's peak.

    ``top`` and ``bottom`` are ``(window,)``, or ``(trace, window)`` for windows of each trace's
    own (elevation slices), NaN where a trace has no such window.
    """
    lead = samples.shape[:-1]
    a = samples.reshape(-1, samples.shape[-1])
    e = envelope.reshape(-1, envelope.shape[-1])
    top, bottom = np.asarray(top, dtype=float), np.asarray(bottom, dtype=float)
    out = np.full((a.shape[0], top.shape[-1]), np.nan, dtype=np.float32)
    first, last = axis_values[0] - 1e-9, axis_values[-1] + 1e-9
    for j in range(top.shape[-1]):
        lo, hi = top[..., j], bottom[..., j]
        if top.ndim == 1:  # one window for every trace
            if lo < first or hi > last:
                continue  # the record does not reach the window (as the window means)
            rows = np.arange(a.shape[0])
            inside = np.flatnonzero((axis_values >= lo) & (axis_values < hi))
            if not inside.size:
                inside = np.array([np.argmin(np.abs(axis_values - (lo + hi) / 2))])
            peak = inside[0] + np.argmax(e[:, inside[0]:inside[-1] + 1], axis=-1)
        else:
            rows = np.flatnonzero(np.isfinite(lo) & np.isfinite(hi) & (lo >= first)
                                  & (hi <= last))
            if not rows.size:
                continue
            lo_r, hi_r = lo[rows, None], hi[rows, None]
            inside = (axis_values >= lo_r) & (axis_values < hi_r)
            thin = ~inside.any(axis=-1)  # thinner than a sample: the one nearest its middle
            inside[thin, np.argmin(np.abs(axis_values - (lo_r + hi_r)[thin] / 2), axis=-1)] = True
            peak = np.argmax(np.where(inside, e[rows], -np.inf), axis=-1)
        out[rows, j] = _lobe_sign(a[rows], e[rows], peak, fraction)
    return out.reshape(lead + (top.shape[-1],))


def _lobe_sign(a: np.ndarray, e: np.ndarray, peak: np.ndarray, fraction: float) -> np.ndarray:
    """Sign of the leading lobe of the event peaking at ``peak`` on each row."""
    n = a.shape[-1]
    idx = np.arange(n)
    rows = np.arange(a.shape[0])
    level = fraction * e[rows, peak]
    below = (e < level[:, None]) & (idx[None, :] < peak[:, None])
    onset = np.where(below, idx[None, :], -1).max(axis=-1) + 1
    strong = (np.abs(a) >= level[:, None]) & (idx[None, :] >= onset[:, None])
    first = np.where(strong, idx[None, :], n).min(axis=-1)
    first = np.minimum(first, peak)  # a silent trace: the peak itself (sign 0)
    return np.sign(a[rows, first])


def direct_wave_polarity(line: xr.DataArray, *, period_ns: float) -> int:
    """+1 or -1: the sign of the direct wave's leading lobe on the line's median trace.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``, time-zero corrected (``twt = 0`` at or just before the direct
        wave's peak), before background removal.
    period_ns : float, keyword-only
        How far (ns) either side of time zero the direct wave is looked for.

    Raises
    ------
    SettingsError
        If the record holds no sample within reach of time zero, or only zeros there.
    """
    samples = np.asarray(line.transpose(..., TRACE, TWT).values, dtype=np.float32)
    return direct_wave_polarity_of(samples.reshape(-1, samples.shape[-2], samples.shape[-1]),
                                   line[TWT].values, period_ns=period_ns,
                                   where=str(line.attrs.get("line", "line")))


def direct_wave_polarity_of(samples: np.ndarray, twt: np.ndarray, *, period_ns: float,
                            where: str = "line") -> int:
    """:func:`direct_wave_polarity` of plain ``(trace, twt)`` samples on the axis ``twt`` (ns)."""
    import scipy.signal
    near = np.flatnonzero(np.abs(twt) <= period_ns)
    if not near.size:
        raise SettingsError("the record holds nothing near time zero to read the direct wave's "
                            "polarity from", where=where)
    trace = median_trace(samples)
    trace = trace.reshape(-1, trace.shape[-1])[0]
    trace = np.nan_to_num(trace[near[0]:near[-1] + 1]).astype(np.float64)
    sign = leading_lobe_signs_core(trace[None, :], np.abs(scipy.signal.hilbert(trace))[None, :],
                                   axis_values=twt[near], top=np.array([twt[near[0]]]),
                                   bottom=np.array([twt[near[-1]]]))[0, 0]
    if not np.isfinite(sign) or sign == 0:
        raise SettingsError("the direct wave is silent: no polarity to read", where=where)
    return int(sign)


__all__ = ["direct_wave_polarity", "direct_wave_polarity_of", "leading_lobe_signs_core"]
