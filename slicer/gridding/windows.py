"""Slice windows, and the reduction of every trace to its slice values.

A slice value is the mean envelope over a window ``[top, bottom)`` of depth (m) or two-way time
(ns). It is computed exactly for the piecewise-linear trace (linear between samples) from its
cumulative integral, so windows need not line up with samples and may be thinner or thicker than
the sample interval.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import DEPTH, ELEVATION, SLICE, TWT
from slicer.core.errors import SettingsError
from slicer.core.numbers import real
from slicer.core.physics import check_velocity, time_from_depth

if TYPE_CHECKING:  # xarray where it is used: a build's settings are read without it
    import xarray as xr


@dataclass(frozen=True)
class Windows:
    """Slice windows along one axis.

    Attributes
    ----------
    axis : {"depth", "twt", "elevation"}
        Depth below the surface (m, positive down), two-way time below time zero (ns) or
        elevation above a vertical datum (m, positive up; see :mod:`slicer.gridding.elevation`).
    top, bottom : numpy.ndarray
        Window limits in the axis's unit: ``top < bottom`` in depth and time, ``top > bottom``
        in elevation (the top is the upper edge).
    """

    axis: str
    top: np.ndarray
    bottom: np.ndarray

    @property
    def units(self) -> str:
        return "ns" if self.axis == TWT else "m"

    def __len__(self) -> int:
        return len(self.top)

    def select(self, keep: np.ndarray) -> Windows:
        """The windows where boolean ``keep`` is true."""
        return Windows(self.axis, self.top[keep], self.bottom[keep])

    def times(self, velocity: float | None, *, separation: float = 0.0
              ) -> tuple[np.ndarray, np.ndarray]:
        """Window limits as two-way times below time zero (ns); ``separation`` (m) is the
        transmitter-receiver distance (see :func:`slicer.core.physics.time_from_depth`)."""
        if self.axis == TWT:
            return self.top, self.bottom
        if self.axis == ELEVATION:
            raise SettingsError("elevation windows have no single time: each trace has its "
                                "own (slicer.gridding.elevation.elevation_limits)",
                                where="--elevations")
        if velocity is None:
            raise SettingsError("depth slices need a velocity: give --velocity or "
                                "--permittivity, or cut time slices with --times",
                                where="--velocity")
        if hasattr(velocity, "profile"):  # a velocity model: the slowest place is the latest
            return _model_times(velocity, self.top), _model_times(velocity, self.bottom)
        return (time_from_depth(self.top, velocity=velocity, separation=separation),
                time_from_depth(self.bottom, velocity=velocity, separation=separation))

    def describe(self) -> str:
        u = self.units
        return (f"{len(self)} {self.axis} slices {self.top[0]:g}-{self.bottom[-1]:g} {u}, "
                f"thickness {float(np.median(np.abs(self.bottom - self.top))):g} {u}")


def _model_times(model, depth: np.ndarray) -> np.ndarray:
    """Two-way times (ns) of ``depth`` in a velocity model; for a lateral model, the latest
    time anywhere (its slowest velocity), so that a window fits the record everywhere."""
    from slicer.velocity.models import time_of_depth
    if getattr(model, "lateral", False):
        return time_from_depth(depth, velocity=float(np.min(model.velocity)))
    return time_of_depth(model, depth)


#: Most slice windows a build cuts. Each slice is one GeoTIFF and one plane of the cube, and
#: every trace keeps one value per slice, so the count multiplies the whole output. Surveys
#: are cut into tens to a few hundred slices; 4096 still allows one slice per sample of a
#: 4096-sample record (thinner slices only repeat their neighbours), so a real build never
#: meets this limit, while ``0:1:1e-9`` (a billion slices) is refused before it is allocated.
MAX_WINDOWS = 4096


def _round_up(value: float) -> float:
    """``value`` rounded up to three significant digits (a step the message can suggest)."""
    if not math.isfinite(value) or value <= 0:
        return value
    scale = 10.0 ** (math.floor(math.log10(value)) - 2)
    return math.ceil(value / scale * (1 - 1e-12)) * scale


def parse_range(text: str, *, option: str) -> tuple[float, float, float]:
    """Parse ``"TOP:BOTTOM:STEP"`` into three finite floats, naming ``option`` on error.

    Parameters
    ----------
    text : str
        Three numbers separated by colons (m for depths or elevations, ns for times).
    option : str
        The option named in the error message, e.g. ``--depths``.

    Returns
    -------
    tuple of float
        ``(top, bottom, step)`` in the unit given; their order and signs are not checked
        here (for depths and times :func:`make_windows` checks them).

    Raises
    ------
    SettingsError
        Not three parts, or a part that is not a finite number.
    """
    parts = str(text).split(":")
    if len(parts) != 3:
        raise SettingsError(f"expected TOP:BOTTOM:STEP, got {text!r}", where=option)
    try:
        top, bottom, step = (float(p) for p in parts)
    except ValueError:
        raise SettingsError(f"TOP:BOTTOM:STEP must be numbers, got {text!r}",
                            where=option) from None
    if not all(math.isfinite(v) for v in (top, bottom, step)):
        raise SettingsError(f"TOP:BOTTOM:STEP must be finite, got {text!r}", where=option)
    return top, bottom, step


def make_windows(top: float, bottom: float, step: float, *, thickness: float | None = None,
                 axis: str = DEPTH, option: str | None = None) -> Windows:
    """Windows starting at ``top`` every ``step``, each ``thickness`` thick (default ``step``).

    The last window ends at or before ``bottom`` (a rounding tolerance of 1e-9 of the range
    lets ``0:2.4:0.1`` give 24 windows). Depth and time must not be negative: they are counted
    down from the surface (time zero).

    Parameters
    ----------
    top, bottom, step : float
        First window's top, the depth or time no window passes, and the distance between
        window tops: m along ``depth``, ns along ``twt``.
    thickness : float, optional
        Each window's thickness, same unit (default ``step``: windows that tile the range).
    axis : {"depth", "twt"}
        What the windows are cut along.
    option : str, optional
        The option to name in an error (default ``--depths`` or ``--times``).

    Returns
    -------
    Windows
        Tops and bottoms (float64) with their axis and unit.

    Raises
    ------
    SettingsError
        A value that is not a number, a reversed or empty range, a negative top, a step or
        thickness that is not positive, or more windows than a build can hold.
    """
    if axis not in (DEPTH, TWT):
        raise SettingsError(f"windows are cut along {DEPTH!r} (m) or {TWT!r} (ns), not "
                            f"{axis!r}", where="axis")
    option = option or ("--depths" if axis == DEPTH else "--times")
    unit = "m" if axis == DEPTH else "ns"
    top, bottom, step = (real(v, where=option) for v in (top, bottom, step))
    if step <= 0:
        raise SettingsError(f"step must be positive, got {step:g} {unit}", where=option)
    if bottom <= top:
        raise SettingsError(f"range is empty or reversed ({top:g} to {bottom:g} {unit})",
                            where=option)
    if top < 0:
        raise SettingsError(f"top must be at or below the surface (>= 0), got {top:g} {unit}",
                            where=option)
    thick = step if thickness is None else real(thickness, where=option)
    if not math.isfinite(thick) or thick <= 0:
        raise SettingsError(f"thickness must be positive, got {thick:g} {unit}",
                            where="--thickness")
    span = bottom - top
    if not math.isfinite(span):
        raise SettingsError(f"range {top:g} to {bottom:g} {unit} is too wide to count slices in",
                            where=option)
    if thick > span * (1 + 1e-9):
        raise SettingsError(f"thickness {thick:g} {unit} exceeds the range {top:g}-{bottom:g}",
                            where="--thickness")
    thick = min(thick, span)  # over the range only by rounding: the window is the range
    # counted in floating point first: a tiny step over a wide range must be refused before
    # any array of that length is made (1e300 / 0.1 is still a float, never an int to allocate)
    steps = (span - thick) / step + 1e-9
    if not math.isfinite(steps) or math.floor(steps) + 1 > MAX_WINDOWS:
        count = (f"{math.floor(steps) + 1}" if steps < 1e12 else
                 f"{steps + 1:.3g}" if math.isfinite(steps) else "countless")
        # the step that gives MAX_WINDOWS slices (with the thickness following the step if
        # it was not given)
        least = span / MAX_WINDOWS if thickness is None else (span - thick) / (MAX_WINDOWS - 1)
        raise SettingsError(
            f"{top:g} to {bottom:g} {unit} every {step:g} {unit} gives {count} slices, "
            f"more than the {MAX_WINDOWS} a build cuts; choose a step of at least "
            f"{_round_up(least):.3g} {unit}", where=option)
    n = max(int(math.floor(steps)), 0) + 1  # a thickness within the tolerance of the range
    tops = top + step * np.arange(n)
    return Windows(axis, tops, tops + thick)


def _window_means_core(samples: np.ndarray, *, twt: np.ndarray, t_top: np.ndarray,
                       t_bottom: np.ndarray) -> np.ndarray:
    """Exact mean of the piecewise-linear traces over each ``[t_top, t_bottom)`` (last axis).

    The mean over a window is linear in the samples: ``samples @ W``, with ``W`` the weights
    of :func:`window_weights`, one matrix product (BLAS) for every trace and window. Float32
    samples are summed in float32 (a relative rounding of about 1e-7 of the values, as the
    float32 result keeps anyway; 2.0 against 5.3 ms for a 3165-trace line's 24 windows
    summed in float64 by runs of samples before: benchmarks/window_means.py); others in
    float64.
    """
    y = np.asarray(samples)
    dtype = np.float32 if y.dtype == np.float32 else np.float64
    weights = window_weights(twt, t_top, t_bottom).astype(dtype, copy=False)
    means = y.astype(dtype, copy=False) @ weights
    outside = (t_top < twt[0] - 1e-9) | (t_bottom > twt[-1] + 1e-9)
    means[..., outside] = np.nan  # a window the record does not reach has no value
    return means.astype(np.float32, copy=False)


def window_weights(twt: np.ndarray, t_top: np.ndarray, t_bottom: np.ndarray) -> np.ndarray:
    """Weights ``(samples, windows)``, float64: the mean over ``[t_top, t_bottom)`` of a trace
    sampled on the even axis ``twt`` and linear between samples is the weighted sum of its
    samples.

    The linear trace is the sum of its samples times hat functions (1 at their sample, 0 at
    the next ones); the weight of sample ``k`` is the hat's integral over the window,
    ``dt (F((t_bottom - t_k) / dt) - F((t_top - t_k) / dt))``, over the window's length,
    with ``F`` the hat's integral from its left end (the trapezoid rule, exact for such a
    trace).
    """
    twt = np.asarray(twt, dtype=np.float64)
    dt = float(twt[1] - twt[0])
    t_k = twt[0] + dt * np.arange(twt.size)[:, None]  # an even axis, as the traces are

    def hat_integral(t: np.ndarray) -> np.ndarray:
        u = np.clip((np.asarray(t, dtype=np.float64)[None, :] - t_k) / dt, -1.0, 1.0)
        return np.where(u <= 0, 0.5 * (1 + u) ** 2, 1 - 0.5 * (1 - u) ** 2)

    return (hat_integral(t_bottom) - hat_integral(t_top)) * (
        dt / (np.asarray(t_bottom, dtype=np.float64) - np.asarray(t_top, dtype=np.float64)))


def _limits_along(line: xr.DataArray, windows: Windows, velocity, separation: float = 0.0
                  ) -> tuple[str, np.ndarray, np.ndarray]:
    """The dimension windows are cut along, and the window limits on it."""
    if DEPTH in line.dims:  # already resampled to depth (a layered or lateral model)
        if windows.axis != DEPTH:
            raise SettingsError(f"{windows.axis} windows cannot be cut from a line in depth; "
                                "cut them before the conversion to depth", where="windows")
        return DEPTH, windows.top, windows.bottom
    if TWT not in line.dims:
        raise SettingsError(f"windows are cut along a line's 'twt' or 'depth' dim; the line "
                            f"has dims {tuple(map(str, line.dims))}", where="line")
    return (TWT, *window_limits(windows, velocity, separation=separation))


def window_limits(windows: Windows, velocity, *, separation: float = 0.0,
                  in_depth: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Window limits on the axis a line is cut along: two-way time (ns), or depth (m) for a
    line ``in_depth`` (resampled to depth already)."""
    if in_depth:
        return windows.top, windows.bottom
    if velocity is not None and not hasattr(velocity, "profile"):
        velocity = check_velocity(velocity)
    return windows.times(velocity, separation=separation)


def window_values(line: xr.DataArray, windows: Windows, *,
                  velocity: float | None = None, separation: float = 0.0) -> np.ndarray:
    """The values of :func:`reduce_to_windows` as a plain ``(trace, slice)`` float32 array.

    For one in-memory line (a build's line task): the same core, without building the
    labelled result.
    """
    dim, lo, hi = _limits_along(line, windows, velocity, separation)
    if line.chunks is not None or line.dims[-1] != dim:
        return np.asarray(reduce_to_windows(line, windows, velocity=velocity,
                                            separation=separation).values)
    return _window_means_core(line.values, twt=line[dim].values, t_top=lo, t_bottom=hi)


def reduce_to_windows(line: xr.DataArray, windows: Windows, *,
                      velocity: float | None = None, separation: float = 0.0) -> xr.DataArray:
    """Mean of each trace over every window: a ``(trace, slice)`` table.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``, time-zero corrected (``twt = 0`` at the surface), usually the
        envelope.
    windows : Windows
        Depth windows (then ``velocity`` is required) or time windows.
    velocity : float, optional
        Constant radar velocity (m/ns) converting depth windows to time windows.
    separation : float, optional
        Transmitter-receiver separation (m) in that conversion.

    Returns
    -------
    xarray.DataArray
        Dims ``(trace, slice)``, NaN for windows the record does not reach.
    """
    if not isinstance(windows, Windows):
        raise SettingsError(f"expected Windows (from make_windows), got {windows!r:.60}",
                            where="windows")
    dim, lo, hi = _limits_along(line, windows, velocity, separation)
    return _reduce_along(line, dim, lo, hi, windows)


def _reduce_along(line: xr.DataArray, dim: str, lo: np.ndarray, hi: np.ndarray,
                  windows: Windows) -> xr.DataArray:
    import xarray as xr
    twt = line[dim].values
    t_top, t_bottom = lo, hi
    data = line.chunk({dim: -1}) if line.chunks is not None else line
    out = xr.apply_ufunc(
        _window_means_core, data,
        kwargs={"twt": twt, "t_top": t_top, "t_bottom": t_bottom},
        input_core_dims=[[dim]], output_core_dims=[[SLICE]],
        dask="parallelized", output_dtypes=[np.float32],
        dask_gufunc_kwargs={"output_sizes": {SLICE: len(windows)}}, keep_attrs=True)
    u = windows.units
    return out.assign_coords(
        top=(SLICE, windows.top, {"units": u, "axis": windows.axis}),
        bottom=(SLICE, windows.bottom, {"units": u, "axis": windows.axis}))


def window_signs(line: xr.DataArray, envelope: xr.DataArray, windows: Windows, *,
                 velocity: float | None = None, separation: float = 0.0) -> np.ndarray:
    """Sign of the leading lobe of the strongest event in every window: ``(trace, slice)``.

    ``line`` is the processed trace before the envelope and ``envelope`` its envelope, on the
    same axis (dims ``(trace, twt)`` or ``(trace, depth)``); see
    :func:`slicer.processing.polarity.leading_lobe_signs_core`.
    """
    from slicer.processing.polarity import leading_lobe_signs_core
    dim, lo, hi = _limits_along(line, windows, velocity, separation)
    return leading_lobe_signs_core(np.asarray(line.transpose(..., dim).values),
                                   np.asarray(envelope.transpose(..., dim).values),
                                   axis_values=line[dim].values, top=lo, bottom=hi)


def record_reach(twt_end: float, windows: Windows, *, velocity: float | None) -> np.ndarray:
    """Boolean mask of the windows whose bottom lies within a record ending at ``twt_end`` ns."""
    _, t_bottom = windows.times(velocity)
    return t_bottom <= twt_end + 1e-9
