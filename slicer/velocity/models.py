"""Velocity models with uncertainty, depth conversion and known-depth calibration.

A velocity model gives the radar velocity (m/ns) below every point of the survey, with a
one-sigma uncertainty. Three kinds exist:

``ConstantVelocity``
    One velocity everywhere, given directly or from a relative permittivity.
``LayeredVelocity``
    Horizontal layers, each of one interval velocity. Layer tops are stored as two-way times
    (ns below time zero, the first 0); they may be given as depths (m, positive down), and the
    velocities may be given as RMS velocities, turned into interval velocities with Dix's (1955)
    equation. The deepest layer extends without limit.
``LateralVelocity``
    Velocity measurements at points ``(x, y)`` in the survey CRS, spread over the survey by
    inverse-distance weighting (Shepard 1968, power 2) tapered by a Gaussian of the model's
    ``length_scale``: ``w_i = exp(-r_i^2 / 2 L^2) / r_i^2``. The velocity at a point is the
    weighted mean of the measurements (and its uncertainty the same mean of theirs), so it
    equals each measurement at its own point, stays between the smallest and largest
    measurement, and is smooth between points. Several length scales away from all data the
    nearest measurement dominates: the model is held constant beyond the data instead of
    extrapolating a trend. The velocity does not change with depth.

Depth from time in layers is exact: ``depth(t) = sum_i v_i dt_i / 2`` with ``dt_i`` the two-way
time spent in layer ``i``, a piecewise-linear, increasing curve; time from depth inverts it.

The file form is described in :mod:`slicer.velocity.model_file`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import C_M_PER_NS, DEPTH, TRACE, TWT, X, Y
from slicer.core.errors import SettingsError
from slicer.core.numbers import reals
from slicer.core.physics import check_velocity, velocity_from_permittivity

if TYPE_CHECKING:  # xarray where it is used: a build's settings are read without it
    import xarray as xr

#: Core dim of the per-trace layer velocities passed to the depth-conversion core.
LAYER = "layer"


def _finite(value, where: str, what: str = "value") -> float:
    try:
        if isinstance(value, bool):
            raise TypeError
        v = float(value)
    except (TypeError, ValueError):
        raise SettingsError(f"{what} must be a number, got {value!r}", where=where) from None
    if not math.isfinite(v):
        raise SettingsError(f"{what} must be finite, got {v:g}", where=where)
    return v


def _std(value, where: str) -> float:
    s = _finite(value, where, "velocity_std")
    if s < 0:
        raise SettingsError(f"velocity_std (one sigma) must be >= 0, got {s:g} m/ns", where=where)
    return s


def _column(values, n: int | None, check, prefix: str) -> tuple[float, ...]:
    """``check(value, "prefix[i]")`` of every value; ``None`` means ``n`` zeros (no error)."""
    if values is None:
        values = [0.0] * (n or 0)
    values = [values] if np.ndim(values) == 0 else list(values)
    if not values or (n is not None and len(values) != n):
        raise SettingsError(f"expected {n or 'one or more'} values, got {len(values)}",
                            where=prefix)
    return tuple(check(v, where=f"{prefix}[{i}]") for i, v in enumerate(values))


def _increasing(values, unit: str, *, from_zero: bool) -> None:
    if from_zero and values[0] != 0.0:
        raise SettingsError(f"the first layer must start at the surface (0), not "
                            f"{values[0]:g} {unit}", where="layer[0]")
    for i in range(1, len(values)):
        if not values[i] > values[i - 1]:
            raise SettingsError(f"layers out of order: {values[i]:g} {unit} is not below "
                                f"{values[i - 1]:g} {unit}", where=f"layer[{i}]")


@dataclass(frozen=True)
class VelocityModel:
    """Base of the velocity models; see the module docstring for the kinds."""

    #: Whether the velocity depends on the position (then ``x``, ``y`` are needed).
    lateral = False

    def profile(self, x=None, y=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Layer top times (ns, shape ``(L,)``), velocities and stds (m/ns, ``(..., L)``)."""
        raise NotImplementedError

    def describe(self) -> str:
        """One line for logs and ``attrs``."""
        raise NotImplementedError


@dataclass(frozen=True)
class ConstantVelocity(VelocityModel):
    """One velocity ``velocity`` +- ``velocity_std`` (m/ns, one sigma) everywhere."""

    velocity: float
    velocity_std: float = 0.0
    permittivity: float | None = None
    permittivity_std: float | None = None
    note: str = ""

    def __post_init__(self):
        object.__setattr__(self, "velocity", check_velocity(self.velocity, where="velocity"))
        object.__setattr__(self, "velocity_std", _std(self.velocity_std, "velocity_std"))

    @classmethod
    def from_permittivity(cls, permittivity: float, permittivity_std: float = 0.0, *,
                          note: str = "") -> ConstantVelocity:
        """Velocity ``v = c / sqrt(er)`` of a low-loss medium and its first-order std.

        ``dv/der = -v / (2 er)``, so ``sigma_v = v sigma_er / (2 er)`` (linear error propagation,
        good while ``sigma_er`` is small beside ``er``).
        """
        v = velocity_from_permittivity(permittivity, where="permittivity")
        er = float(permittivity)
        s = _finite(permittivity_std, "permittivity_std", "permittivity_std")
        if s < 0:
            raise SettingsError(f"must be >= 0, got {s:g}", where="permittivity_std")
        return cls(v, v * s / (2.0 * er), permittivity=er, permittivity_std=s, note=note)

    def profile(self, x=None, y=None):
        return np.zeros(1), np.array([self.velocity]), np.array([self.velocity_std])

    def describe(self) -> str:
        text = f"constant {self.velocity:.4g} +- {self.velocity_std:.2g} m/ns"
        if self.permittivity is not None:
            text += f" (permittivity {self.permittivity:g} +- {self.permittivity_std:g})"
        return text


@dataclass(frozen=True)
class LayeredVelocity(VelocityModel):
    """Horizontal layers: ``top_time`` (ns two-way, first 0, increasing), interval
    ``velocity`` and ``velocity_std`` (m/ns) per layer; the last layer has no base."""

    top_time: tuple[float, ...]
    velocity: tuple[float, ...]
    velocity_std: tuple[float, ...] | None = None
    note: str = ""

    def __post_init__(self):
        v = _column(self.velocity, None, check_velocity, "layer")
        tops = _column(self.top_time, len(v), _finite, "layer")
        _increasing(tops, "ns", from_zero=True)
        object.__setattr__(self, "top_time", tops)
        object.__setattr__(self, "velocity", v)
        object.__setattr__(self, "velocity_std", _column(self.velocity_std, len(v), _std,
                                                         "layer"))

    @classmethod
    def by_time(cls, top_time, velocity, velocity_std=None, *, note: str = ""):
        """Layers from their top two-way times (ns) and interval velocities (m/ns)."""
        return cls(top_time, velocity, velocity_std, note=note)

    @classmethod
    def by_depth(cls, top_depth, velocity, velocity_std=None, *, note: str = ""):
        """Layers from their top depths (m, positive down, first 0) and interval velocities."""
        v = _column(velocity, None, check_velocity, "layer")
        z = _column(top_depth, len(v), _finite, "layer")
        _increasing(z, "m", from_zero=True)
        times = np.concatenate([[0.0], np.cumsum(2.0 * np.diff(z) / np.array(v[:-1]))])
        return cls(tuple(times.tolist()), v, velocity_std, note=note)

    @classmethod
    def from_rms(cls, base_time, rms_velocity, rms_std=None, *, note: str = ""):
        """Interval velocities from RMS velocities picked at reflection times (Dix 1955).

        ``V_int,n^2 = (V_n^2 t_n - V_n-1^2 t_n-1) / (t_n - t_n-1)`` for the layer between the
        reflections at ``t_n-1`` and ``t_n`` (``t_0 = 0``). The std of each interval velocity
        follows by linear propagation of independent RMS errors,
        ``sigma_int = sqrt((V_n t_n s_n)^2 + (V_n-1 t_n-1 s_n-1)^2) / (V_int (t_n - t_n-1))``.
        Neighbouring intervals share an RMS pick, so their errors are in truth negatively
        correlated; :func:`depth_error` treats them as independent, which overstates the error.

        Raises
        ------
        SettingsError
            Naming the layer, where times are out of order, the root is not real and positive
            (the RMS velocity falls too fast), or the interval velocity is not below ``c``.
        """
        vr = (0.0, *_column(rms_velocity, None, check_velocity, "layer"))
        t = (0.0, *_column(base_time, len(vr) - 1, _finite, "layer"))
        s = (0.0, *_column(rms_std, len(vr) - 1, _std, "layer"))
        _increasing(t[1:], "ns", from_zero=False)
        if t[1] <= 0:
            raise SettingsError(f"a reflection must lie below time zero, not at {t[1]:g} ns",
                                where="layer[0]")
        vint, sint = [], []
        for n in range(1, len(t)):
            radicand = (vr[n] ** 2 * t[n] - vr[n - 1] ** 2 * t[n - 1]) / (t[n] - t[n - 1])
            if radicand <= 0:
                raise SettingsError(
                    f"Dix equation has no real positive root ({radicand:.3g} m^2/ns^2 under the "
                    f"root): the RMS velocity falls too fast, {vr[n - 1]:g} to {vr[n]:g} m/ns",
                    where=f"layer[{n - 1}]")
            vint.append(check_velocity(math.sqrt(radicand), where=f"layer[{n - 1}]"))
            sint.append(math.hypot(vr[n] * t[n] * s[n], vr[n - 1] * t[n - 1] * s[n - 1])
                        / (vint[-1] * (t[n] - t[n - 1])))
        return cls(t[:-1], tuple(vint), tuple(sint),
                   note=note or "interval velocities from RMS velocities (Dix 1955)")

    @property
    def top_depth(self) -> np.ndarray:
        """Depths (m) of the layer tops."""
        return _tops_depth(*self.profile()[:2])

    def profile(self, x=None, y=None):
        return np.array(self.top_time), np.array(self.velocity), np.array(self.velocity_std)

    def describe(self) -> str:
        parts = [f"{v:.4g} +- {s:.2g} m/ns from {t:g} ns ({z:.3g} m)" for t, z, v, s in
                 zip(self.top_time, self.top_depth, self.velocity, self.velocity_std,
                     strict=True)]
        return f"layered ({len(parts)} layers): " + ", ".join(parts)


@dataclass(frozen=True)
class LateralVelocity(VelocityModel):
    """Velocities measured at points ``(x, y)`` (m, survey CRS) spread with ``length_scale`` (m).

    See the module docstring for the weighting.
    """

    x: tuple[float, ...]
    y: tuple[float, ...]
    velocity: tuple[float, ...]
    velocity_std: tuple[float, ...] | None = None
    length_scale: float = 1.0
    note: str = ""
    lateral = True

    def __post_init__(self):
        v = _column(self.velocity, None, check_velocity, "point")
        xy = list(zip(_column(self.x, len(v), _finite, "point"),
                      _column(self.y, len(v), _finite, "point"), strict=True))
        for i, p in enumerate(xy):
            if p in xy[:i]:
                raise SettingsError(f"same position as point[{xy.index(p)}]", where=f"point[{i}]")
        length = _finite(self.length_scale, "length_scale", "length_scale")
        if length <= 0:
            raise SettingsError(f"must be positive, got {length:g} m", where="length_scale")
        for name, value in (("x", tuple(p[0] for p in xy)), ("y", tuple(p[1] for p in xy)),
                            ("velocity", v), ("length_scale", length),
                            ("velocity_std", _column(self.velocity_std, len(v), _std, "point"))):
            object.__setattr__(self, name, value)

    def velocity_at(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Velocity and its std (m/ns) at positions ``x``, ``y`` (m; broadcast together)."""
        qx, qy = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
        px, py = np.array(self.x), np.array(self.y)
        pv, ps = np.array(self.velocity), np.array(self.velocity_std)
        flat_x, flat_y = qx.ravel(), qy.ravel()
        v, s = np.empty(flat_x.size), np.empty(flat_x.size)
        # a query sitting on a point gets a weight so large that the others vanish beside it
        tiny = (1e-9 * self.length_scale) ** 2
        for start in range(0, flat_x.size, 20_000):  # bounds the (queries x points) matrix
            sl = slice(start, start + 20_000)
            r2 = np.maximum((flat_x[sl, None] - px) ** 2 + (flat_y[sl, None] - py) ** 2, tiny)
            logw = -r2 / (2.0 * self.length_scale ** 2) - np.log(r2)
            # relative to the largest weight, so the weights never all underflow far away
            w = np.exp(logw - logw.max(axis=1, keepdims=True))
            w /= w.sum(axis=1, keepdims=True)
            v[sl], s[sl] = w @ pv, w @ ps
        return v.reshape(qx.shape), s.reshape(qx.shape)

    def profile(self, x=None, y=None):
        if x is None or y is None:
            raise SettingsError("a laterally varying velocity model needs positions x and y",
                                where="x")
        v, s = self.velocity_at(x, y)
        return np.zeros(1), v[..., None], s[..., None]

    def describe(self) -> str:
        return (f"lateral ({len(self.velocity)} points, {min(self.velocity):.4g}-"
                f"{max(self.velocity):.4g} m/ns, length scale {self.length_scale:g} m)")


# ------------------------------------------------------------------------- depth <-> time curves

def _tops_depth(top_time: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Depths (m) of the layer tops for velocities ``v`` (``(..., L)``)."""
    dz = v[..., :-1] * (np.diff(top_time) / 2.0)
    return np.concatenate([np.zeros_like(v[..., :1]), np.cumsum(dz, axis=-1)], axis=-1)


def _depth_of_time(top_time, v, t):
    """Piecewise-linear depth of two-way time ``t``; before time zero the first layer's line."""
    z = _tops_depth(top_time, v)
    out = v[..., 0] * t / 2.0
    for k in range(1, len(top_time)):
        out = np.where(t >= top_time[k], z[..., k] + v[..., k] * (t - top_time[k]) / 2.0, out)
    return out


def _time_of_depth(top_time, v, d):
    """The inverse of :func:`_depth_of_time` (the curve is increasing, so it is exact)."""
    z = _tops_depth(top_time, v)
    out = 2.0 * d / v[..., 0]
    for k in range(1, len(top_time)):
        out = np.where(d >= z[..., k], top_time[k] + 2.0 * (d - z[..., k]) / v[..., k], out)
    return out


def _positions(model: VelocityModel, values, x, y, where: str = "depth"):
    values = reals(values, where=where)
    if not model.lateral:
        return (values, *model.profile())
    if x is None or y is None:
        raise SettingsError("a laterally varying velocity model needs positions x and y",
                            where="x")
    values, x, y = np.broadcast_arrays(values, reals(x, where="x"), reals(y, where="y"))
    return (values, *model.profile(x, y))


def depth_of_time(model: VelocityModel, twt_ns, *, x=None, y=None) -> np.ndarray:
    """Depth (m, positive down) of two-way time ``twt_ns`` (ns below time zero).

    Exact for layers: ``sum_i v_i dt_i / 2``. ``x``, ``y`` (m) are needed for a lateral model
    and broadcast with ``twt_ns``.
    """
    t, tops, v, _ = _positions(model, twt_ns, x, y, where="twt_ns")
    return _depth_of_time(tops, v, t)


def time_of_depth(model: VelocityModel, depth_m, *, x=None, y=None) -> np.ndarray:
    """Two-way time (ns below time zero) of depth ``depth_m`` (m); inverse of depth_of_time."""
    d, tops, v, _ = _positions(model, depth_m, x, y)
    return _time_of_depth(tops, v, d)


def depth_error(model: VelocityModel, depth, *, x=None, y=None) -> np.ndarray:
    """One-sigma error (m) of a depth converted from time, due to the velocity's uncertainty.

    The reflector's two-way time is taken as exact; its depth ``sum_i v_i dt_i / 2`` then has
    variance ``sum_i (sigma_i dt_i / 2)^2`` with ``dt_i`` the time spent in layer ``i``,
    assuming independent layer errors. For one velocity this is ``d sigma_v / v``.

    Parameters
    ----------
    model : VelocityModel
        The velocity model, with its one-sigma velocity errors (m/ns).
    depth : array_like
        Depths (m, >= 0) below the surface.
    x, y : array_like, optional
        Positions (m) where a lateral model is taken, broadcast with ``depth``; needed for a
        lateral model, ignored by others.

    Returns
    -------
    numpy.ndarray
        One-sigma depth error, m, in the shape of ``depth`` (broadcast with ``x``, ``y`` for
        a lateral model).
    """
    d, tops, v, s = _positions(model, depth, x, y)
    if np.any(d < 0) or not np.all(np.isfinite(d)):
        raise SettingsError("depths must be finite and >= 0 (below the surface)", where="depth")
    t = _time_of_depth(tops, v, d)
    ends = np.append(tops[1:], np.inf)
    var = np.zeros(np.broadcast_shapes(t.shape, v.shape[:-1]))
    for k in range(len(tops)):
        dt = np.clip(np.minimum(t, ends[k]) - tops[k], 0.0, None)
        var = var + (s[..., k] * dt / 2.0) ** 2
    return np.sqrt(var)


def velocity_from_known_depth(depth_m: float, twt_ns: float, *, depth_std: float = 0.0,
                              twt_std: float = 0.0) -> ConstantVelocity:
    """Calibrate the velocity on a reflector of known depth: ``v = 2 d / t``.

    The std follows from independent errors of depth and time,
    ``(sigma_v / v)^2 = (sigma_d / d)^2 + (sigma_t / t)^2``.

    Parameters
    ----------
    depth_m : float
        Known depth (m) of the reflector below the surface.
    twt_ns : float
        Its two-way time (ns) below time zero.
    depth_std, twt_std : float
        One-sigma errors of the depth (m) and time (ns).

    Returns
    -------
    ConstantVelocity
        Velocity ``2 d / t`` (m/ns) with its one-sigma std (m/ns) and a note naming the
        reflector's depth and time.
    """
    d, t, sd, st = (_finite(value, name, name) for value, name in (
        (depth_m, "depth_m"), (twt_ns, "twt_ns"), (depth_std, "depth_std"), (twt_std, "twt_std")))
    for value, name, bad in ((d, "depth_m", d <= 0), (t, "twt_ns", t <= 0),
                             (sd, "depth_std", sd < 0), (st, "twt_std", st < 0)):
        if bad:
            raise SettingsError(f"must be {'>= 0' if 'std' in name else 'positive'}, got "
                                f"{value:g}", where=name)
    v = 2.0 * d / t
    if v >= C_M_PER_NS:
        raise SettingsError(f"{d:g} m at {t:g} ns gives v = 2 d / t = {v:.4g} m/ns, not below "
                            f"the speed of light ({C_M_PER_NS:.4f} m/ns): check the units",
                            where="twt_ns")
    return ConstantVelocity(v, v * math.hypot(sd / d, st / t),
                            note=f"calibrated on a reflector at {d:g} m and {t:g} ns")


# ------------------------------------------------------------------------------ depth conversion

def _to_depth_core(samples, velocities, *, twt, top_time, depths):
    """Samples of each trace (last axis twt) at the times of ``depths``, NaN outside."""
    t = _time_of_depth(top_time, velocities[..., None, :], depths)
    # linear interpolation between samples, as np.interp, for all traces at once
    k = np.clip(np.searchsorted(twt, t, side="right") - 1, 0, twt.size - 2)
    u = (t - twt[k]) / (twt[k + 1] - twt[k])
    y = samples.astype(np.float64, copy=False)
    y0, y1 = np.take_along_axis(y, k, axis=-1), np.take_along_axis(y, k + 1, axis=-1)
    out = y0 + u * (y1 - y0)
    out[(t < twt[0] - 1e-9) | (t > twt[-1] + 1e-9)] = np.nan
    return out.astype(np.float32)


def to_depth_axis(line: xr.DataArray, model: VelocityModel, *, depths) -> xr.DataArray:
    """Resample every trace of a time-zero-corrected line onto a depth axis.

    Each trace is interpolated linearly (as :func:`numpy.interp`) at the two-way times of
    ``depths`` under ``model``; for a lateral model the velocity is taken at each trace's
    ``x``, ``y``. Depths the record does not reach are NaN. Choose a depth step no coarser than
    ``v dt / 2`` of the slowest layer, or samples are skipped.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``, twt in ns with 0 at time zero; per-trace ``x``, ``y`` (m) for a
        lateral model. May be dask-backed (chunked along ``trace``).
    model : VelocityModel
    depths : array_like
        Increasing depths (m, >= 0, positive down), usually evenly spaced.

    Returns
    -------
    xarray.DataArray
        Dims ``(trace, depth)``, float32, with the line's per-trace coordinates and attrs.
    """
    name = str(line.attrs.get("source", line.attrs.get("line", line.name or "line")))
    depths = reals(depths, where="depths")
    if (depths.ndim != 1 or depths.size == 0 or not np.all(np.isfinite(depths))
            or depths[0] < 0 or np.any(np.diff(depths) <= 0)):
        raise SettingsError("depths must be a non-empty, increasing list of finite depths "
                            ">= 0 m", where="depths")
    if TRACE not in line.dims or TWT not in line.dims or line.sizes[TWT] < 2:
        raise SettingsError(f"a line needs dims ({TRACE}, {TWT}) with two or more samples, "
                            f"got {line.dims}", where=name)
    if model.lateral:
        if X not in line.coords or Y not in line.coords:
            raise SettingsError("a laterally varying velocity model needs per-trace x and y "
                                "coordinates on the line", where=name)
        tops, v, _ = model.profile(line[X].values, line[Y].values)
    else:
        tops, v, _ = model.profile()
        v = np.broadcast_to(v, (line.sizes[TRACE], v.size))
    import xarray as xr
    velocities = xr.DataArray(np.ascontiguousarray(v), dims=(TRACE, LAYER))
    data = line
    if line.chunks is not None:
        data = line.chunk({TWT: -1})
        velocities = velocities.chunk({TRACE: data.chunksizes[TRACE]})
    out = xr.apply_ufunc(
        _to_depth_core, data, velocities,
        kwargs={"twt": np.asarray(line[TWT].values, dtype=float), "top_time": tops,
                "depths": depths},
        input_core_dims=[[TWT], [LAYER]], output_core_dims=[[DEPTH]],
        dask="parallelized", output_dtypes=[np.float32],
        dask_gufunc_kwargs={"output_sizes": {DEPTH: depths.size}}, keep_attrs=True)
    out = out.assign_coords({DEPTH: (DEPTH, depths, {"units": "m", "positive": "down",
                                                     "long_name": "depth below surface"})})
    if not model.lateral:
        out = out.assign_coords({TWT: (DEPTH, _time_of_depth(tops, v[0], depths),
                                       {"units": "ns"})})
    history = line.attrs.get("history", "")
    step = f"depth conversion ({model.describe()})"
    out.attrs = {**line.attrs, "velocity_model": model.describe(),
                 "history": f"{history}; {step}" if history else step}
    if isinstance(model, ConstantVelocity):
        out.attrs["velocity"] = model.velocity
    out.name = line.name
    return out
