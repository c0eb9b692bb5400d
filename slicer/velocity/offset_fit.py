"""Hyperbola fits with a free time offset and a separated transmitter and receiver.

A round target of radius ``R`` with its centre at depth ``c`` returns
``t = 2 (sqrt((x - x0)^2 + c^2) - R) / v`` (Shihab & Al-Nuaimy 2005, Subsurface Sensing
Technologies and Applications 6:151-166): a point hyperbola at the centre depth shifted by the
constant ``-2 R / v``. A time zero picked late, or a pick that lags the wavelet's onset by a
fixed amount, shifts the whole curve the same way, so the three cannot be told apart from one
curve. Fitted as a point, such a curve reads fast: by ``sqrt(c / (c - R))`` for the radius and
about ``sqrt(t0 / (t0 - e))`` for a time-zero error ``e`` (geometry of the apex curvature).

This module fits the curve with the offset ``d`` free,

    ``t = d + [sqrt((x - x0 - s/2)^2 + c^2) + sqrt((x - x0 + s/2)^2 + c^2)] / v``,

four parameters ``(v, x0, c, d)``, with the antennas a known ``s`` apart about the position
``x`` (common-offset geometry, from memory; ``s = 0`` gives the zero-offset hyperbola of
Yilmaz 2001, Seismic Data Analysis, ch. 4). The velocity then comes from the curve's shape
alone, its apex curvature (``1 / (v c)``) against its asymptotes (slope ``2 / v``), and the
offset absorbs radius, time-zero error and a constant pick delay together; a negative offset is
reported as the equivalent radius ``-d v / 2``. The price is precision: the offset and the
velocity are strongly correlated unless the picks reach well down the flanks, towards the
asymptotes (see :func:`fit_apex`). Measured with this module (100 draws, 0.05 ns pick noise,
picks 0.02 m apart, a point 0.5 m deep in 0.1 m/ns ground, ``s`` = 0.14 m, offset -1 ns):

===============  ======================  ============================
picks out to     point fit (3 par.)      offset fit (4 par.)
===============  ======================  ============================
0.5 depth        +5.2 % bias, sd 1.9 %   unusable (sd 37 %)
1 depth          +4.5 %, sd 0.3 %        -1.3 %, sd 6.1 %
1.5 depths       +3.9 %, sd 0.1 %        +0.2 %, sd 1.7 %
2 depths         +3.5 %, sd 0.08 %       0.0 %, sd 0.7 %
3 depths         +2.8 %, sd 0.03 %       0.0 %, sd 0.2 %
===============  ======================  ============================

so the offset costs a factor of about 8-20 in standard error and needs picks beyond about
1.5 depths from the apex; :func:`fit_apex` kept it in 34, 100 and 100 of the 100 draws at
1.5, 2 and 3 depths and never nearer. With ``s > 0`` and the offset fixed at 0 the same model is
the bistatic point hyperbola: fitted as zero-offset, a pair ``s`` apart reads fast by about
``sqrt(1 + s^2 / (4 z^2))`` at depth ``z``.

Times are two-way, ns below time zero; positions m along the line; velocities m/ns.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError
from slicer.core.physics import check_separation
from slicer.velocity.hyperbola import (
    HyperbolaFit,
    _check_picks,
    _covariance,
    _initial_guess,
    _solve,
    _validate,
    extra_term_test,
)

__all__ = ["fit_apex", "fit_offset_hyperbola"]

#: Default largest relative standard error of the velocity of an offset fit that is kept.
MAX_OFFSET_VELOCITY_STD = 0.05


def _offset_model(p: np.ndarray, x: np.ndarray, h: float,
                  r: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Travel times and Jacobian over ``p = (v, x0, c[, d])``; ``h`` half the separation,
    ``r`` a given radius (the path ``a + b`` to the centre less ``2 r``)."""
    v, x0, c = p[:3]
    d = x - x0
    tiny = np.finfo(float).tiny
    a = np.maximum(np.sqrt((d - h) ** 2 + c * c), tiny)
    b = np.maximum(np.sqrt((d + h) ** 2 + c * c), tiny)
    t = (a + b - 2.0 * r) / v + (p[3] if p.size > 3 else 0.0)
    jac = np.empty((x.size, p.size))
    jac[:, 0] = -(a + b - 2.0 * r) / (v * v)
    jac[:, 1] = -((d - h) / a + (d + h) / b) / v
    jac[:, 2] = c * (1.0 / a + 1.0 / b) / v
    if p.size > 3:
        jac[:, 3] = 1.0
    return t, jac


def fit_offset_hyperbola(x_m, t_ns, *, separation: float = 0.0, delay: bool = True,
                         weights=None, radius: float = 0.0) -> HyperbolaFit:
    """Fit the hyperbola of a point (centre) seen by antennas ``separation`` apart, with a free
    constant time offset when ``delay`` (the model: module docstring), by least squares.

    The start is the zero-offset guess of :func:`~slicer.velocity.hyperbola.fit_hyperbola`;
    with ``delay`` three starting offsets (0, -1/4 and +1/10 of the apex time) are tried and the
    lowest cost kept. Standard errors are from ``(J^T J)^-1 s^2``; the apex time
    ``t0 = d + 2 sqrt(c^2 + s^2/4) / v`` and the depth of the reflecting top,
    ``sqrt((v t0 / 2)^2 - (s / 2)^2)`` (:func:`slicer.core.physics.depth_from_time`), carry
    the propagated errors.

    Parameters
    ----------
    x_m, t_ns, weights
        As for :func:`~slicer.velocity.hyperbola.fit_hyperbola`; positions are the midpoints
        of the antenna pair.
    separation : float
        Transmitter-receiver separation, m (0 to 10).
    delay : bool
        Fit the time offset (4 parameters; needs 6 picks at 5 positions) or fix it at 0.
    radius : float
        A known radius of the target, m (0: a point): the paths run to the centre, at depth
        ``c > radius``, less ``2 radius`` (the round target of Shihab & Al-Nuaimy 2005 with
        separated antennas: each leg meets the surface about ``radius`` before the centre,
        exact for the common-offset pair up to the small bistatic angle; geometry). Not
        fitted: it is given.

    Returns
    -------
    HyperbolaFit
        ``delay``/``delay_std`` the offset (ns), ``radius`` the given radius (0 for a point;
        see :attr:`~slicer.velocity.hyperbola.HyperbolaFit.equivalent_radius`) with
        ``radius_given`` set, ``separation`` set.

    Raises
    ------
    SettingsError
        As :func:`~slicer.velocity.hyperbola.fit_hyperbola`, and for a bad separation or an
        offset that puts the target's top above the surface.
    """
    h = check_separation(separation, where="separation") / 2.0
    if not (isinstance(radius, int | float) and math.isfinite(radius) and 0 <= radius < 10):
        raise SettingsError(f"must be a radius from 0 to 10 m, got {radius!r}",
                            where="target radius")
    r = float(radius)
    n_min = 6 if delay else 4
    form = "an offset fit (delay=True)" if delay else None
    x, t, w = _check_picks(x_m, t_ns, weights, n_min, False, form=form)
    v0, x00, t00 = _initial_guess(x, t, w)
    v0 = min(v0, 5 * C_M_PER_NS)
    span = np.ptp(x)
    lower = np.array([1e-6, x.min() - 100 * span, r])
    upper = np.array([10 * C_M_PER_NS, x.max() + 100 * span, np.inf])

    def start(offset):
        centre = math.sqrt(max((v0 * (t00 - offset) / 2 + r) ** 2 - h * h,
                               (0.01 * v0 * t00 + r) ** 2))
        return np.array([v0, x00, centre] + ([offset] if delay else []))

    if delay:
        # the offset may not exceed the earliest pick (the curve starts after time zero)
        lower, upper = np.append(lower, -t.min()), np.append(upper, t.min())
        starts = [start(f * t00) for f in (0.0, -0.25, 0.1)]
    else:
        starts = [start(0.0)]

    def model(p, xs):
        return _offset_model(p, xs, h, r)

    result = min((_solve(s, x, t, w, lower, upper, model=model) for s in starts),
                 key=lambda r: r.cost)
    p = result.x
    v, x0, c = (float(q) for q in p[:3])
    offset = float(p[3]) if delay else 0.0
    cov = _covariance(result, x.size)
    std = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    root = math.hypot(c, h)
    t0 = offset + 2.0 * (root - r) / v
    # d t0 / d (v, x0, c, d)
    g_t0 = np.array([-2.0 * (root - r) / v ** 2, 0.0, 2.0 * c / (v * max(root, 1e-12)),
                     1.0])[:p.size]
    t0_std = math.sqrt(max(float(g_t0 @ cov @ g_t0), 0.0))
    half = v * t0 / 2.0
    if not half > h:
        raise SettingsError("the fitted time offset puts the target's top above the surface",
                            where="hyperbola picks")
    depth = math.sqrt(half * half - h * h)
    _validate(v, float(std[0]), x0, t0, depth, x, t)
    # d depth / d p through half = v t0 / 2
    g_half = (v / 2.0) * g_t0
    g_half[0] += t0 / 2.0
    g_depth = (half / depth) * g_half
    depth_std = math.sqrt(max(float(g_depth @ cov @ g_depth), 0.0))
    residual = model(p, x)[0] - t
    return HyperbolaFit(
        velocity=v, velocity_std=float(std[0]), x0=x0, x0_std=float(std[1]), t0=float(t0),
        t0_std=t0_std, depth=depth, depth_std=depth_std, radius=r, radius_std=0.0,
        rms_ns=float(np.sqrt(np.mean(residual ** 2))), n_points=int(x.size), delay=offset,
        delay_std=float(std[3]) if delay else 0.0, separation=2.0 * h, radius_given=r > 0)


def fit_apex(x_m, t_ns, *, separation: float = 0.0, weights=None, alpha: float = 0.01,
             precision: float = 0.0,
             max_relative_std: float = MAX_OFFSET_VELOCITY_STD) -> HyperbolaFit:
    """Fit the point hyperbola and the one with a free time offset; keep the offset fit only
    when the picks can carry it.

    Both forms of :func:`fit_offset_hyperbola` are fitted (offset fixed at 0, and free). The
    offset fit is kept when all of these hold:

    1. the drop in the residual sum of squares is significant by the extra-sum-of-squares
       F-test at level ``alpha``, with picks counted as independent ones and the residual
       variance floored at ``precision^2``
       (:func:`~slicer.velocity.hyperbola.extra_term_test`): the curve's shape shows an
       offset at all;
    2. the offset is nonzero beyond two of its (widened) standard errors;
    3. its velocity's standard error, widened the same way for neighbouring picks that share
       errors, is at most ``max_relative_std`` of the velocity: the picks reach far enough
       down the flanks that the velocity is not traded against the offset. This is the
       aperture criterion in terms of the covariance: over picks within about one depth of
       the apex the two are nearly interchangeable and the standard error says so;
    4. the offset lies inside its bounds (not stuck on one).

    Otherwise the point fit (offset 0, same ``separation``) is returned.

    Parameters
    ----------
    x_m, t_ns, weights
        As for :func:`~slicer.velocity.hyperbola.fit_hyperbola`.
    separation : float
        Transmitter-receiver separation, m.
    alpha : float
        Significance level of the F-test, in (0, 1).
    precision : float
        Floor of the picks' time error, ns (systematic pick errors no curve removes).
    max_relative_std : float
        Largest relative (widened) standard error of the offset fit's velocity that is kept.

    Returns
    -------
    HyperbolaFit
        With ``round_p`` the F-test's p-value (NaN when not compared) and, for an offset fit,
        its velocity's and offset's standard errors widened for shared pick errors.

    Raises
    ------
    SettingsError
        When the point form cannot be fitted, or bad options.
    """
    for name, value, ok in (("alpha", alpha, 0 < alpha < 1),
                            ("precision", precision, precision >= 0),
                            ("max_relative_std", max_relative_std, max_relative_std > 0)):
        if not (isinstance(value, int | float) and math.isfinite(value) and ok):
            raise SettingsError(f"out of range: {value!r}", where=name)
    point = fit_offset_hyperbola(x_m, t_ns, separation=separation, delay=False, weights=weights)
    x, t, w = _check_picks(x_m, t_ns, weights, 4, False)
    if x.size < 8:  # the F-test of a fourth parameter needs residual degrees of freedom
        return point
    try:
        shifted = fit_offset_hyperbola(x, t, separation=separation, weights=w)
    except SettingsError:
        return point
    p, widen = extra_term_test(x, t, w, point, shifted, k_big=4, precision=precision)
    shifted = dataclasses.replace(shifted, delay_std=shifted.delay_std * widen,
                                  velocity_std=shifted.velocity_std * widen, round_p=p)
    inside = -0.99 * t.min() < shifted.delay < 0.99 * t.min()
    keep = (p < alpha and abs(shifted.delay) > 2.0 * shifted.delay_std and inside
            and shifted.velocity_std <= max_relative_std * shifted.velocity)
    return shifted if keep else dataclasses.replace(point, round_p=p)
