"""Ties over a whole survey during a build (stub; filled in by the geometry work)."""

from __future__ import annotations

import numpy as np
import xarray as xr

from ._conventions import TWT


def correct_line(env: xr.DataArray, time_zero_ns: float, gain: float) -> xr.DataArray:
    """Shift ``env``'s time axis by ``time_zero_ns`` and scale it by ``gain``."""
    twt = env[TWT]
    out = (env * np.float32(gain)).astype(np.float32)
    out = out.assign_coords({TWT: (TWT, twt.values - time_zero_ns, twt.attrs)})
    out.attrs = dict(env.attrs)
    return out


def tie_survey(settings, *, engine, info, dewow_ns, progress):
    """(report, {line number: (time_zero_ns, gain)}); stub."""
    raise NotImplementedError
