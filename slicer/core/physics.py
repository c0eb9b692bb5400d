"""Radar velocity and the conversion from two-way travel time to depth."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import C_M_PER_NS, DEPTH, TWT
from slicer.core.errors import SettingsError

if TYPE_CHECKING:  # xarray costs ~0.4 s to import; the quick commands need none of it
    import xarray as xr


def check_velocity(velocity: float, *, where: str = "--velocity") -> float:
    """Return ``velocity`` (m/ns) as a float if it is physically possible in ground.

    Raises
    ------
    SettingsError
        If it is not finite, not positive, or not below the speed of light (0.2998 m/ns).
    """
    try:
        v = float(velocity)
    except (TypeError, ValueError):
        raise SettingsError(f"velocity must be a number in m/ns, got {velocity!r}",
                            where=where) from None
    if not math.isfinite(v) or v <= 0:
        raise SettingsError(f"velocity must be positive, got {v:g} m/ns", where=where)
    if v >= C_M_PER_NS:
        raise SettingsError(
            f"velocity {v:g} m/ns is not below the speed of light ({C_M_PER_NS:.4f} m/ns); "
            "radar waves travel slower in any ground (give m/ns, not m/s or cm/ns)",
            where=where)
    return v


def velocity_from_permittivity(permittivity: float, *, where: str = "--permittivity") -> float:
    """Radar velocity in a low-loss medium, ``v = c / sqrt(er)`` (m/ns).

    Parameters
    ----------
    permittivity : float
        Relative permittivity ``er`` (dimensionless), which must exceed 1 (air).
    """
    try:
        er = float(permittivity)
    except (TypeError, ValueError):
        raise SettingsError(f"relative permittivity must be a number, got {permittivity!r}",
                            where=where) from None
    if not math.isfinite(er) or er <= 1.0:
        raise SettingsError(
            f"relative permittivity must be greater than 1 (air), got {er:g}", where=where)
    return C_M_PER_NS / math.sqrt(er)


def permittivity_from_velocity(velocity: float) -> float:
    """Relative permittivity ``er = (c / v)**2`` for a velocity in m/ns."""
    v = check_velocity(velocity)
    return (C_M_PER_NS / v) ** 2


def depth_from_time(twt_ns, *, velocity: float):
    """Depth (m, positive down) of a reflector at two-way time ``twt_ns`` below time zero.

    ``d = v * t / 2``: the wave travels down and back up.
    """
    v = check_velocity(velocity)
    return np.asarray(twt_ns, dtype=float) * v / 2.0


def time_from_depth(depth_m, *, velocity: float):
    """Two-way time (ns) below time zero of a reflector at ``depth_m`` (m), ``t = 2 d / v``."""
    v = check_velocity(velocity)
    return 2.0 * np.asarray(depth_m, dtype=float) / v


def to_depth(line: xr.DataArray, *, velocity: float) -> xr.DataArray:
    """Relabel the time axis of a time-zero-corrected line as depth (constant velocity).

    With one velocity the conversion is a change of coordinate, not a resampling: samples stay
    evenly spaced in depth. The result has dim ``depth`` (m, positive down) in place of ``twt``
    and keeps ``twt`` as a coordinate along it.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(..., twt)``, twt in ns with 0 at time zero.
    velocity : float
        Radar velocity (m/ns).
    """
    v = check_velocity(velocity)
    depth = depth_from_time(line[TWT].values, velocity=v)
    out = line.rename({TWT: DEPTH}).assign_coords(
        {DEPTH: (DEPTH, depth, {"units": "m", "positive": "down",
                                "long_name": "depth below surface"}),
         TWT: (DEPTH, line[TWT].values, {"units": "ns"})})
    out.attrs = {**line.attrs, "velocity": v}
    return out
