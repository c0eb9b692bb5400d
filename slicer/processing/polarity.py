"""Reflection polarity: the sign of a reflection relative to the direct wave.

The envelope (:func:`slicer.processing.steps.envelope`) keeps a reflection's strength and drops
its sign. The sign tells targets apart: a reflection from a faster medium (air-filled void,
plastic pipe in wet ground: lower relative permittivity than the ground) has the direct wave's
polarity, and one from a slower medium or a metal (higher permittivity or a conductor) has the
opposite (normal-incidence reflection coefficient ``(n1 - n2) / (n1 + n2)``, with ``n`` the
square root of the relative permittivity; Fresnel, as in every electromagnetics text; a
perfect conductor reflects with coefficient -1).

The direct wave's polarity is read on the line's median trace, before background removal: the
sign of its largest sample within one period of time zero (where slicer's time-zero pick put
the direct wave's main peak).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from slicer.core.conventions import TRACE, TWT
from slicer.core.errors import SettingsError
from slicer.processing.background import median_trace


def direct_wave_polarity(line: xr.DataArray, *, period_ns: float) -> int:
    """+1 or -1: the sign of the direct wave's main peak on the line's median trace.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``, time-zero corrected (``twt = 0`` at the direct wave's peak),
        before background removal.
    period_ns : float, keyword-only
        The wavelet's period (ns): the search reaches this far either side of time zero.

    Raises
    ------
    SettingsError
        If the record holds no sample within one period of time zero, or only zeros there.
    """
    twt = line[TWT].values
    near = np.abs(twt) <= period_ns
    if not near.any():
        raise SettingsError("the record holds nothing near time zero to read the direct wave's "
                            "polarity from", where=str(line.attrs.get("line", "line")))
    samples = np.asarray(line.transpose(..., TRACE, TWT).values, dtype=np.float32)
    trace = median_trace(samples.reshape(-1, samples.shape[-2], samples.shape[-1]))[0][near]
    k = int(np.argmax(np.abs(trace)))
    if not np.isfinite(trace[k]) or trace[k] == 0:
        raise SettingsError("the direct wave is silent: no polarity to read",
                            where=str(line.attrs.get("line", "line")))
    return 1 if trace[k] > 0 else -1


def window_signs_core(samples: np.ndarray, *, axis_values: np.ndarray, top: np.ndarray,
                      bottom: np.ndarray) -> np.ndarray:
    """Sign (+1, -1; 0 if silent, NaN outside the record) of the largest-magnitude sample of
    each trace in each window ``[top, bottom)`` of the last axis: ``(..., window)``.

    A window thinner than the sample interval takes the sample nearest its middle.
    """
    out = np.full(samples.shape[:-1] + (len(top),), np.nan, dtype=np.float32)
    for j, (lo, hi) in enumerate(zip(top, bottom, strict=True)):
        if lo < axis_values[0] - 1e-9 or hi > axis_values[-1] + 1e-9:
            continue  # the record does not reach the window (as the window means)
        inside = np.flatnonzero((axis_values >= lo) & (axis_values < hi))
        if not inside.size:
            inside = np.array([np.argmin(np.abs(axis_values - (lo + hi) / 2))])
        part = samples[..., inside[0]:inside[-1] + 1]
        k = np.argmax(np.abs(part), axis=-1)
        out[..., j] = np.sign(np.take_along_axis(part, k[..., None], axis=-1)[..., 0])
    return out


__all__ = ["direct_wave_polarity", "window_signs_core"]
