"""Elevation slices: windows at a constant height above a vertical datum.

A depth slice follows the ground surface; on a slope a level floor crosses several of them. An
elevation window ``[top, bottom]`` (m above the datum, ``top > bottom``) is cut from every trace
at its own depth below its own surface: ``depth = surface - elevation``, converted to two-way
time with the build's velocity (and antenna separation), or cut on the depth axis of a trace
already resampled with a layered or lateral model. That is the static correction, exact for the
velocity model: no trace is shifted by a rounded number of samples, and the window mean is the
exact mean of the piecewise-linear trace (as :func:`slicer.gridding.windows._window_means_core`),
computed per trace.

A window that reaches above a trace's surface has no value there (NaN): above the ground there
is only air and the direct wave. A window below the end of a record has none either.
"""

from __future__ import annotations

import numpy as np

from slicer.core.conventions import DEPTH, ELEVATION
from slicer.core.errors import SettingsError
from slicer.core.physics import check_velocity, time_from_depth
from slicer.gridding.windows import Windows, make_windows

OPTION = "--elevations"


def make_elevation_windows(top: float, bottom: float, step: float, *,
                           thickness: float | None = None) -> Windows:
    """Windows from elevation ``top`` down to ``bottom`` (m above the datum) every ``step`` m.

    Each window is ``thickness`` thick (default ``step``); the windows' ``top`` is the higher
    edge, ``bottom`` the lower (``top > bottom``, elevation counts up).
    """
    if not top > bottom:
        raise SettingsError(f"TOP must be the higher elevation: {top:g} m is not above "
                            f"{bottom:g} m (elevations count up from the datum)", where=OPTION)
    # the same counting as depth windows, from the top down
    below = make_windows(0.0, top - bottom, step, thickness=thickness, axis=DEPTH,
                         option=OPTION)
    return Windows(ELEVATION, top - below.top, top - below.bottom)


def depth_limits(windows: Windows, surface) -> tuple[np.ndarray, np.ndarray]:
    """Per-trace depth limits (m, positive down) of elevation windows: ``(trace, slice)`` each.

    ``surface`` is the ground's elevation (m above the same datum) at every trace. A window
    whose top lies above a trace's surface gets NaN limits there.
    """
    if windows.axis != ELEVATION:
        raise SettingsError(f"expected elevation windows, got {windows.axis} windows",
                            where=OPTION)
    z = np.asarray(surface, dtype=float)[:, None]
    top, bottom = z - windows.top[None, :], z - windows.bottom[None, :]
    above = ~(top >= -1e-9)  # NaN surface too
    top[above] = np.nan
    bottom[above] = np.nan
    return np.maximum(top, 0.0), bottom


def elevation_limits(windows: Windows, surface, *, velocity=None, separation: float = 0.0,
                     in_depth: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Per-trace limits of elevation windows on the axis a line is cut along.

    Two-way times (ns) with one ``velocity`` (m/ns) and the antenna ``separation`` (m); depths
    (m) for a line resampled to depth already (``in_depth``). ``(trace, slice)`` arrays, NaN
    where a window reaches above the surface.
    """
    top, bottom = depth_limits(windows, surface)
    if in_depth:
        return top, bottom
    if velocity is None or hasattr(velocity, "profile"):
        raise SettingsError("elevation slices need one velocity here, or a line resampled to "
                            "depth with the velocity model", where="--velocity")
    v = check_velocity(velocity)
    return (time_from_depth(top, velocity=v, separation=separation),
            time_from_depth(bottom, velocity=v, separation=separation))


def window_means_varying(samples: np.ndarray, *, axis_values: np.ndarray, top: np.ndarray,
                         bottom: np.ndarray) -> np.ndarray:
    """Exact mean of each piecewise-linear trace over its own windows.

    Parameters
    ----------
    samples : numpy.ndarray
        ``(trace, sample)`` on the evenly spaced ``axis_values`` (ns or m).
    top, bottom : numpy.ndarray
        ``(trace, slice)`` window limits on that axis, ``top < bottom``; NaN for no window.

    Returns
    -------
    numpy.ndarray
        ``(trace, slice)`` float32, NaN where a window is NaN or outside the record.

    Notes
    -----
    The integral from the first sample to position ``k + u`` (``0 <= u < 1``) is
    ``h (S_k - (y_0 + y_k) / 2) + h (u y_k + u^2 (y_{k+1} - y_k) / 2)`` with ``S_k`` the running
    sum of samples (the trapezoid rule, exact for a piecewise-linear trace; the same formula as
    the shared-window core).
    """
    y = np.asarray(samples, dtype=np.float64)
    n = y.shape[-1]
    a0, h = float(axis_values[0]), float(axis_values[1] - axis_values[0])
    sums = np.cumsum(y, axis=-1)
    top, bottom = np.asarray(top, dtype=float), np.asarray(bottom, dtype=float)
    valid = (np.isfinite(top) & np.isfinite(bottom) & (top >= a0 - 1e-9)
             & (bottom <= float(axis_values[-1]) + 1e-9))

    def integral_to(t: np.ndarray) -> np.ndarray:
        pos = np.where(valid, (t - a0) / h, 0.0)
        k = np.clip(np.floor(pos).astype(np.int64), 0, n - 2)
        u = pos - k
        y0 = np.take_along_axis(y, k, axis=-1)
        y1 = np.take_along_axis(y, k + 1, axis=-1)
        s_k = np.take_along_axis(sums, k, axis=-1)
        return h * (s_k - 0.5 * (y[:, :1] + y0) + u * y0 + 0.5 * u * u * (y1 - y0))

    with np.errstate(invalid="ignore", divide="ignore"):
        means = (integral_to(bottom) - integral_to(top)) / np.where(valid, bottom - top, 1.0)
    means[~valid] = np.nan
    return means.astype(np.float32)


__all__ = ["depth_limits", "elevation_limits", "make_elevation_windows",
           "window_means_varying"]
