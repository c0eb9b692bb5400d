"""The NumPy forward model behind :mod:`slicer.synthetic` (no file input or output).

A trace is built as the sum of

* the direct (air-ground) wave: the source wavelet with its main peak at the radar's time zero
  (the project's definition of time zero, see DEVELOPERS.md);
* antenna ringing: a decaying oscillation after the direct wave, the same on every trace;
* reflections: the wavelet centred at ``time_zero + travel_time`` for every reflector, scaled by
  geometric spreading, attenuation and an antenna pattern;
* "wow": a slowly varying low-frequency offset that differs from trace to trace;
* Gaussian noise from a seeded :class:`numpy.random.Generator`.

The buried targets (:class:`PointTarget`, :class:`LineTarget`, :class:`PlateTarget`,
:class:`Layer`, re-exported by :mod:`slicer.synthetic`) are defined here with the geometry that
turns them into arrival times and amplitudes (:func:`arrivals`).

Times are in nanoseconds, frequencies in gigahertz (so that their product is dimensionless),
distances in metres and velocities in metres per nanosecond.  Every function broadcasts over its
array arguments, so one call handles all traces of a line and all reflectors at once.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import ClassVar

import numpy as np

from slicer.core.errors import SettingsError
from slicer.synthetic.wavelets import GAUSSIAN_BANDWIDTH, WAVELETS, gaussian_cosine, ricker, wavelet

__all__ = ["GAUSSIAN_BANDWIDTH", "WAVELETS", "gaussian_cosine", "ricker", "wavelet"]

#: Half-length of a rendered reflection, in periods of the centre frequency: beyond it both
#: wavelets stay below 1e-7 of their peak (Ricker from 1.42 periods, the Gaussian-modulated
#: cosine from 2.11).
SUPPORT_PERIODS = 2.3


# --- geometry ----------------------------------------------------------------------------------

def distance_to_segment(px, py, x0, y0, x1, y1) -> np.ndarray:
    """Plan distance from points ``(px, py)`` to the segment ``(x0, y0)-(x1, y1)``, m.

    A segment of zero length is a point.  All arguments broadcast.
    """
    px, py, x0, y0, x1, y1 = (np.asarray(a, dtype=float) for a in (px, py, x0, y0, x1, y1))
    dx, dy = x1 - x0, y1 - y0
    length2 = dx * dx + dy * dy
    with np.errstate(invalid="ignore", divide="ignore"):
        s = ((px - x0) * dx + (py - y0) * dy) / length2
    s = np.clip(np.where(length2 > 0, s, 0.0), 0.0, 1.0)
    return np.hypot(px - (x0 + s * dx), py - (y0 + s * dy))


def distance_to_rectangle(px, py, xmin, ymin, xmax, ymax) -> np.ndarray:
    """Plan distance from points ``(px, py)`` to an axis-aligned rectangle, m (0 inside it).

    All arguments broadcast.
    """
    px, py = np.asarray(px, dtype=float), np.asarray(py, dtype=float)
    dx = np.maximum(np.maximum(xmin - px, px - xmax), 0.0)
    dy = np.maximum(np.maximum(ymin - py, py - ymax), 0.0)
    return np.hypot(dx, dy)


def slant_range(offset_m, *, depth, radius=0.0) -> np.ndarray:
    """One-way path from an antenna on the surface to the reflecting point of a target, m.

    The target is a sphere (or, in the plane across it, a cylinder) of ``radius`` whose top lies
    at ``depth``; ``radius = 0`` is a point diffractor.  The reflecting point is where the ray
    through the target's centre meets its surface, so the path is
    ``sqrt((depth + radius)^2 + offset^2) - radius`` (Shihab & Al-Nuaimy 2005).

    Parameters
    ----------
    offset_m : array_like
        Horizontal distance from the antenna to the target's centre (or nearest point), m.
    depth : array_like
        Depth of the target's top below the surface, m (positive).
    radius : array_like
        Target radius, m.
    """
    centre = np.asarray(depth, dtype=float) + radius
    return np.hypot(centre, np.asarray(offset_m, dtype=float)) - radius


def incidence_cosine(offset_m, *, depth, radius=0.0) -> np.ndarray:
    """Cosine of the ray's angle from vertical, from the antenna to the target's centre."""
    centre = np.asarray(depth, dtype=float) + radius
    return centre / np.hypot(centre, np.asarray(offset_m, dtype=float))


def two_way_time(path_m, velocity: float) -> np.ndarray:
    """Two-way travel time ``2 path / v``, ns, of a one-way path (m) at ``velocity`` (m/ns)."""
    return 2.0 * np.asarray(path_m, dtype=float) / velocity


def point_travel_time(offset_m, *, depth, velocity: float, radius=0.0) -> np.ndarray:
    """Two-way time of a point (``radius = 0``) or round target, ns.

    ``t = (2 / v) [sqrt((z0 + R)^2 + r^2) - R]`` with ``z0`` the depth of the top and ``r`` the
    horizontal offset; with ``R = 0`` this is the diffraction hyperbola
    ``t = (2 / v) sqrt(z0^2 + r^2)``.

    Parameters
    ----------
    offset_m : array_like
        Horizontal antenna-target distance, m.
    depth : array_like
        Depth of the target's top, m.
    velocity : float
        Radar velocity in the ground, m/ns.
    radius : array_like
        Target radius, m.
    """
    return two_way_time(slant_range(offset_m, depth=depth, radius=radius), velocity)


def layer_travel_time(depth, velocity: float) -> np.ndarray:
    """Two-way time of a flat layer at ``depth`` (m) at normal incidence, ``2 d / v``, ns."""
    return two_way_time(depth, velocity)


def db_to_nepers(attenuation_db_per_m: float) -> float:
    """Amplitude attenuation coefficient in Np/m from dB/m (1 Np = 20 / ln 10 dB)."""
    return attenuation_db_per_m * np.log(10.0) / 20.0


def reflection_amplitude(path_m, cos_theta, *, amplitude=1.0, attenuation_db_per_m=0.0,
                         pattern_exponent=2.0) -> np.ndarray:
    """Amplitude of a reflection after spreading, attenuation and the antenna pattern.

    ``A * cos(theta)^n * exp(-2 alpha r) / r``: ``A`` is the reflector's amplitude at 1 m slant
    range in lossless ground, ``r`` the one-way slant range (m), ``alpha`` the attenuation (Np/m,
    from dB/m) applied over the two-way path ``2 r``, and ``cos(theta)^n`` an antenna pattern that
    makes hyperbola tails fade.

    Parameters
    ----------
    path_m : array_like
        One-way slant range, m (positive).
    cos_theta : array_like
        Cosine of the angle from vertical.
    amplitude : array_like
        Reflector amplitude at 1 m, amplitude units.
    attenuation_db_per_m : float
        Attenuation per metre of travel, dB/m.
    pattern_exponent : float
        Exponent ``n`` of the antenna pattern.
    """
    path = np.asarray(path_m, dtype=float)
    alpha = db_to_nepers(attenuation_db_per_m)
    cos_theta = np.clip(np.asarray(cos_theta, dtype=float), 0.0, 1.0)
    return amplitude * cos_theta ** pattern_exponent * np.exp(-2.0 * alpha * path) / path


# --- targets and their arrivals ---------------------------------------------------------------

def check_number(where: str, value, *, integer=False, positive=False,
                 nonnegative=False) -> None:
    """Refuse a value that is not a finite number (an integer if asked) in the range asked."""
    number = isinstance(value, int | float | np.integer | np.floating) and not isinstance(
        value, bool)
    if not (number and math.isfinite(value)):
        raise SettingsError(f"must be a finite number, got {value!r}", where=where)
    if integer and not float(value).is_integer():
        raise SettingsError(f"must be an integer, got {value!r}", where=where)
    if positive and not value > 0:
        raise SettingsError(f"must be positive, got {value!r}", where=where)
    if nonnegative and not value >= 0:
        raise SettingsError(f"must be >= 0, got {value!r}", where=where)


def check_fields(obj, *, positive=(), nonnegative=(), owner=None) -> None:
    """Apply :func:`check_number` to every ``float`` and ``int`` field of a frozen dataclass.

    Integer fields given as whole floats (``512.0``) are stored as ``int``.
    """
    owner = owner or type(obj).__name__
    for f in fields(obj):
        kind = getattr(f.type, "__name__", f.type)  # a string under postponed annotations
        if kind in ("float", "int"):
            value = getattr(obj, f.name)
            check_number(f"{owner}.{f.name}", value, integer=kind == "int",
                         positive=f.name in positive, nonnegative=f.name in nonnegative)
            if kind == "int":
                object.__setattr__(obj, f.name, int(value))


@dataclass(frozen=True)
class PointTarget:
    """A point diffractor (``radius = 0``) or a round object such as a stone or boulder.

    Parameters
    ----------
    x, y : float
        Plan position of the centre, survey CRS, m.
    depth : float
        Depth of the top below the surface, m.
    amplitude : float
        Reflection amplitude at 1 m slant range in lossless ground (amplitude units).
    radius : float
        Radius, m (the apex time stays ``2 depth / v``; the hyperbola flattens).
    """

    x: float
    y: float
    depth: float
    amplitude: float = 1.0
    radius: float = 0.0
    kind: ClassVar[str] = "point"

    def __post_init__(self):
        check_fields(self, positive=("depth",), nonnegative=("radius",))


@dataclass(frozen=True)
class LineTarget:
    """A horizontal linear reflector (pipe, drain, wall footing) from ``(x0, y0)`` to ``(x1, y1)``.

    Each trace sees the segment's nearest point, so a crossing gives a hyperbola and a trace
    above the segment sees it at ``2 depth / v``.

    Parameters
    ----------
    x0, y0, x1, y1 : float
        Plan end points, survey CRS, m.
    depth : float
        Depth of the top, m.
    amplitude : float
        Reflection amplitude at 1 m slant range (amplitude units).
    """

    x0: float
    y0: float
    x1: float
    y1: float
    depth: float
    amplitude: float = 1.0
    kind: ClassVar[str] = "line"

    def __post_init__(self):
        check_fields(self, positive=("depth",))


@dataclass(frozen=True)
class PlateTarget:
    """A horizontal rectangular plate (slab, floor), axis-aligned in the survey CRS.

    Above the plate the reflection is specular (travel time ``2 depth / v``); outside it the
    nearest edge reflects.

    Parameters
    ----------
    xmin, ymin, xmax, ymax : float
        Plan extent, survey CRS, m.
    depth : float
        Depth of the top, m.
    amplitude : float
        Reflection amplitude at 1 m slant range (amplitude units).
    """

    xmin: float
    ymin: float
    xmax: float
    ymax: float
    depth: float
    amplitude: float = 1.0
    kind: ClassVar[str] = "plate"

    def __post_init__(self):
        check_fields(self, positive=("depth",))
        if self.xmax < self.xmin or self.ymax < self.ymin:
            raise SettingsError("xmax/ymax must not be less than xmin/ymin",
                                where="PlateTarget")


@dataclass(frozen=True)
class Layer:
    """A flat boundary across the whole survey at ``depth`` (m) with reflection ``amplitude``."""

    depth: float
    amplitude: float
    kind: ClassVar[str] = "layer"

    def __post_init__(self):
        check_fields(self, positive=("depth",))


def arrivals(px, py, targets=(), layers=(), *, velocity: float,
             attenuation_db_per_m: float = 0.0, pattern_exponent: float = 2.0,
             depth_shift=None) -> tuple[np.ndarray, np.ndarray]:
    """Two-way time below the surface and amplitude of every reflector on every trace.

    Parameters
    ----------
    px, py : numpy.ndarray
        Antenna positions, m, shape ``(traces,)``.
    targets : sequence of PointTarget, LineTarget, PlateTarget
    layers : sequence of Layer
    velocity : float
        Radar velocity, m/ns.
    attenuation_db_per_m, pattern_exponent : float
        See :func:`reflection_amplitude`.
    depth_shift : array_like, optional
        Added to every reflector's depth on each trace, m, shape ``(traces,)``: how far the
        antenna stands above the level plane the depths are measured from (uneven ground, see
        :mod:`slicer.synthetic.terrain`).  A reflector whose top is then level with or above
        the antenna is not seen on that trace (amplitude 0, its time is not meaningful).

    Returns
    -------
    times_ns, amplitudes : numpy.ndarray
        Shape ``(traces, reflectors)``; reflectors are points, lines, plates, then layers.
    """
    px, py = np.asarray(px, dtype=float)[:, None], np.asarray(py, dtype=float)[:, None]

    def table(kind, names):
        # one row per field, one column per target of that kind, so targets broadcast
        rows = [[getattr(t, n) for n in names] for t in (*targets, *layers) if t.kind == kind]
        return np.array(rows, dtype=float).reshape(-1, len(names)).T

    p = table("point", ("x", "y", "depth", "radius", "amplitude"))
    s = table("line", ("x0", "y0", "x1", "y1", "depth", "amplitude"))
    r = table("plate", ("xmin", "ymin", "xmax", "ymax", "depth", "amplitude"))
    q = table("layer", ("depth", "amplitude"))
    offset = np.concatenate([np.hypot(px - p[0], py - p[1]),
                             distance_to_segment(px, py, *s[:4]),
                             distance_to_rectangle(px, py, *r[:4]),
                             np.zeros((px.size, q.shape[1]))], axis=1)
    depth = np.concatenate([p[2], s[4], r[4], q[0]])
    radius = np.concatenate([p[3], 0 * s[4], 0 * r[4], 0 * q[0]])
    amplitude = np.concatenate([p[4], s[5], r[5], q[1]])
    if depth_shift is not None:
        depth = depth + np.asarray(depth_shift, dtype=float).reshape(-1, 1)
    seen = depth > 0  # always so on level ground, where every depth is positive
    path = slant_range(offset, depth=depth, radius=radius)
    cos_theta = incidence_cosine(offset, depth=np.where(seen, depth, 1.0), radius=radius)
    return two_way_time(path, velocity), np.where(seen, reflection_amplitude(
        np.where(seen, path, 1.0), cos_theta, amplitude=amplitude,
        attenuation_db_per_m=attenuation_db_per_m, pattern_exponent=pattern_exponent), 0.0)


# --- trace components --------------------------------------------------------------------------

def render_reflections(twt_ns, times_ns, amplitudes, *, kind: str,
                       frequency_ghz: float) -> np.ndarray:
    """Sum of wavelets centred at ``times_ns`` with ``amplitudes``, sampled at ``twt_ns``.

    Each wavelet is evaluated only within :data:`SUPPORT_PERIODS` periods of its centre, where
    it is non-negligible, and the pieces are summed into the traces with one
    :func:`numpy.bincount`.

    Parameters
    ----------
    twt_ns : numpy.ndarray
        Evenly spaced sample times, ns, shape ``(samples,)``, at least two.
    times_ns, amplitudes : numpy.ndarray
        Arrival time (ns, on the record's clock) and amplitude of every reflector on every
        trace, shape ``(traces, reflectors)``.
    kind, frequency_ghz
        Wavelet, see :func:`wavelet`.

    Returns
    -------
    numpy.ndarray
        float64, shape ``(traces, samples)``.
    """
    twt_ns = np.asarray(twt_ns, dtype=float)
    times_ns = np.atleast_2d(np.asarray(times_ns, dtype=float))
    amplitudes = np.broadcast_to(amplitudes, times_ns.shape)
    n_traces, n = times_ns.shape[0], twt_ns.size
    dt = twt_ns[1] - twt_ns[0]
    half = min(int(np.ceil(SUPPORT_PERIODS / frequency_ghz / dt)), n)
    centre = np.clip(np.rint((times_ns - twt_ns[0]) / dt), -half - 1, n + half).astype(np.int64)
    idx = centre[..., None] + np.arange(-half, half + 1)
    inside = (idx >= 0) & (idx < n)
    pieces = amplitudes[..., None] * wavelet(twt_ns[0] + idx * dt - times_ns[..., None],
                                             kind=kind, frequency_ghz=frequency_ghz)
    flat = (np.arange(n_traces)[:, None, None] * n + idx)[inside]
    summed = np.bincount(flat, weights=pieces[inside], minlength=n_traces * n)
    # bincount gives integers when there is nothing to add
    return summed.astype(float, copy=False).reshape(n_traces, n)


def direct_wave(twt_ns, *, time_zero_ns: float, amplitude: float, kind: str,
                frequency_ghz: float) -> np.ndarray:
    """The air-ground wave: the wavelet with its main peak at ``time_zero_ns``, shape (samples,)."""
    return amplitude * wavelet(twt_ns - time_zero_ns, kind=kind, frequency_ghz=frequency_ghz)


def ringing(twt_ns, *, time_zero_ns: float, amplitude: float, frequency_ghz: float,
            rise_ns: float = 0.5, decay_ns: float = 5.0) -> np.ndarray:
    """Antenna ringing: a decaying sine after the direct wave, the same on every trace.

    ``A sin(2 pi f' tau) (1 - exp(-tau / rise)) exp(-tau / decay)`` for ``tau = t - t0 > 0``,
    with ``f'`` three quarters of the antenna frequency; it starts smoothly so it does not move
    the direct wave's peak.

    Returns
    -------
    numpy.ndarray
        Shape ``(samples,)``.
    """
    tau = np.maximum(np.asarray(twt_ns, dtype=float) - time_zero_ns, 0.0)
    onset = -np.expm1(-tau / rise_ns)
    return (amplitude * np.sin(2.0 * np.pi * 0.75 * frequency_ghz * tau) * onset
            * np.exp(-tau / decay_ns))


def wow(twt_ns, n_traces: int, *, amplitude: float, rng: np.random.Generator,
        decay_ns: float = 15.0, period_ns: float = 80.0) -> np.ndarray:
    """Low-frequency offset ("wow") that differs from trace to trace.

    Each trace gets ``a exp(-t / decay) + b sin(2 pi t / period + phi)`` with ``a``, ``b`` and
    ``phi`` drawn from ``rng``; the period is longer than a typical record, so the offset varies
    far more slowly than the wavelet.

    Returns
    -------
    numpy.ndarray
        Shape ``(n_traces, samples)``.
    """
    t = np.asarray(twt_ns, dtype=float)[None, :]
    a = amplitude * rng.uniform(0.5, 1.5, size=(n_traces, 1))
    b = 0.5 * amplitude * rng.standard_normal(size=(n_traces, 1))
    phi = rng.uniform(0.0, 2.0 * np.pi, size=(n_traces, 1))
    return a * np.exp(-t / decay_ns) + b * np.sin(2.0 * np.pi * t / period_ns + phi)


def synthesize(twt_ns, times_ns, amplitudes, *, kind: str, frequency_ghz: float,
               time_zero_ns: float, direct_amplitude: float, ringing_amplitude: float,
               wow_amplitude: float, noise: float, rng: np.random.Generator) -> np.ndarray:
    """Raw traces of one line: direct wave, ringing, reflections, wow and noise.

    Parameters
    ----------
    twt_ns : numpy.ndarray
        Sample times of the raw record, ns, shape ``(samples,)``.
    times_ns, amplitudes : numpy.ndarray
        Two-way travel time below the surface (ns) and amplitude of every reflector on every
        trace, shape ``(traces, reflectors)``; arrivals are placed at ``time_zero_ns + times_ns``.
    kind, frequency_ghz
        Wavelet, see :func:`wavelet`.
    time_zero_ns : float
        Time of the direct wave's main peak in the record, ns.
    direct_amplitude, ringing_amplitude, wow_amplitude : float
        Amplitudes of those components (amplitude units).
    noise : float
        Standard deviation of the Gaussian noise (amplitude units).
    rng : numpy.random.Generator
        Source of the wow and noise draws.

    Returns
    -------
    numpy.ndarray
        float32, shape ``(traces, samples)``.
    """
    twt_ns = np.asarray(twt_ns, dtype=float)
    times_ns = np.asarray(times_ns, dtype=float)
    n_traces = times_ns.shape[0]
    traces = render_reflections(twt_ns, time_zero_ns + times_ns, amplitudes, kind=kind,
                                frequency_ghz=frequency_ghz)
    traces += direct_wave(twt_ns, time_zero_ns=time_zero_ns, amplitude=direct_amplitude,
                          kind=kind, frequency_ghz=frequency_ghz)
    # ringing lasts two periods of the antenna, rising over a fifth of one (5 and 0.5 ns at
    # 400 MHz): a fixed 5 ns had outlasted a 2 GHz antenna's pulse tenfold and taken over its
    # spectrum (a dominant frequency read at 0.75 of the antenna's)
    traces += ringing(twt_ns, time_zero_ns=time_zero_ns, amplitude=ringing_amplitude,
                      frequency_ghz=frequency_ghz, rise_ns=0.2 / frequency_ghz,
                      decay_ns=2.0 / frequency_ghz)
    traces += wow(twt_ns, n_traces, amplitude=wow_amplitude, rng=rng)
    if noise > 0:
        traces += noise * rng.standard_normal(traces.shape)
    return traces.astype(np.float32)
