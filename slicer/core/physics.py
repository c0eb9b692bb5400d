"""Radar velocity and the conversion from two-way travel time to depth."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import C_M_PER_NS, DEPTH, TWT
from slicer.core.errors import SettingsError

if TYPE_CHECKING:  # xarray costs ~0.4 s to import; the quick commands need none of it
    import xarray as xr


#: Slowest velocity taken (m/ns): relative permittivity 900, about eleven times water's 81 (the
#: highest of natural materials, from memory), so only a unit slip is refused.
MIN_VELOCITY = 0.01


def check_velocity(velocity: float, *, where: str = "--velocity") -> float:
    """Return ``velocity`` (m/ns) as a float if it is physically possible in ground.

    Parameters
    ----------
    velocity : float
        Radar velocity, m/ns (anything :func:`float` accepts).
    where : str
        The option or file named in the error message if the velocity is refused.

    Returns
    -------
    float
        ``velocity`` as a float, m/ns.

    Raises
    ------
    SettingsError
        If it is not finite, below :data:`MIN_VELOCITY` (0.01 m/ns), or not below the speed
        of light (0.2998 m/ns).
    """
    try:
        v = float(velocity)
    except (TypeError, ValueError):
        raise SettingsError(f"velocity must be a number in m/ns, got {velocity!r}",
                            where=where) from None
    if not math.isfinite(v) or v <= 0:
        raise SettingsError(f"velocity must be positive, got {v:g} m/ns", where=where)
    if v < MIN_VELOCITY:
        raise SettingsError(
            f"velocity {v:g} m/ns is slower than radar waves travel in any ground (water, "
            f"relative permittivity 81, is {C_M_PER_NS / 9:.3f}); give m/ns", where=where)
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
    where : str
        The option or file named in the error message if the permittivity is refused.

    Returns
    -------
    float
        Velocity, m/ns.
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
    """Relative permittivity ``er = (c / v)**2`` for a velocity in m/ns.

    Parameters
    ----------
    velocity : float
        Radar velocity, m/ns; checked by :func:`check_velocity`.

    Returns
    -------
    float
        Relative permittivity (dimensionless), greater than 1.
    """
    v = check_velocity(velocity)
    return (C_M_PER_NS / v) ** 2


def check_separation(separation: float, *, where: str = "--antenna-separation") -> float:
    """A transmitter-receiver separation (m), checked: finite, 0 or more, under 10 m."""
    try:
        s = float(separation)
    except (TypeError, ValueError):
        raise SettingsError(f"must be a number of metres, got {separation!r}",
                            where=where) from None
    if not (math.isfinite(s) and 0.0 <= s < 10.0):
        raise SettingsError(f"must be between 0 and 10 m, got {separation!r}", where=where)
    return s


def depth_from_time(twt_ns, *, velocity: float, separation: float = 0.0):
    """Depth (m, positive down) of a reflector at two-way time ``twt_ns`` below time zero.

    ``d = v t / 2`` with the antennas together; with transmitter and receiver ``s`` apart on
    the surface, the wave runs down to the reflector below their midpoint and up again, and
    ``d = sqrt((v t / 2)^2 - (s / 2)^2)`` (straight rays in a uniform ground; the usual
    common-offset geometry). Times before the direct ground wave (``t < s / v``) are at
    depth 0.

    Parameters
    ----------
    twt_ns : float or array_like
        Two-way travel time below time zero, ns.
    velocity : float
        Radar velocity of the ground, m/ns.
    separation : float
        Transmitter-receiver separation, m.

    Returns
    -------
    float or numpy.ndarray
        Depth, m (an array for an array of times).
    """
    v = check_velocity(velocity)
    half_path = np.asarray(twt_ns, dtype=float) * v / 2.0
    s = check_separation(separation)
    if s == 0.0:
        return half_path
    return np.sqrt(np.maximum(half_path ** 2 - (s / 2.0) ** 2, 0.0)) * np.sign(half_path)


def time_from_depth(depth_m, *, velocity: float, separation: float = 0.0):
    """Two-way time (ns) below time zero of a reflector at ``depth_m`` (m):
    ``t = 2 sqrt(d^2 + (s / 2)^2) / v`` (``2 d / v`` with the antennas together).

    Parameters
    ----------
    depth_m : float or array_like
        Depth below the surface, m.
    velocity : float
        Radar velocity of the ground, m/ns.
    separation : float
        Transmitter-receiver separation, m.

    Returns
    -------
    float or numpy.ndarray
        Two-way time, ns.
    """
    v = check_velocity(velocity)
    d = np.asarray(depth_m, dtype=float)
    s = check_separation(separation)
    if s == 0.0:
        return 2.0 * d / v
    return 2.0 * np.sqrt(d ** 2 + (s / 2.0) ** 2) / v


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

    Returns
    -------
    xarray.DataArray
        The same samples (shared, not copied) along ``depth`` (m), ``twt`` (ns) kept as a
        coordinate, ``attrs["velocity"]`` set.
    """
    from slicer.core.line_checks import checked_line
    checked_line(line, step="to_depth")
    v = check_velocity(velocity)
    depth = depth_from_time(line[TWT].values, velocity=v)
    out = line.rename({TWT: DEPTH}).assign_coords(
        {DEPTH: (DEPTH, depth, {"units": "m", "positive": "down",
                                "long_name": "depth below surface"}),
         TWT: (DEPTH, line[TWT].values, {"units": "ns"})})
    out.attrs = {**line.attrs, "velocity": v}
    return out
