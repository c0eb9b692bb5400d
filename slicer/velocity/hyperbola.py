"""Diffraction hyperbolas: travel times and least-squares fits of picked apex curves.

A point diffractor at depth ``z0`` below the surface position ``x0`` appears on a line as the
hyperbola ``t(x) = (2 / v) sqrt(z0^2 + (x - x0)^2)`` (Yilmaz 2001, Seismic Data Analysis, SEG,
ch. 4), whose apex time is ``t0 = 2 z0 / v``. A round object of radius ``R`` whose top lies at
``z0`` reflects from its surface instead of its centre, which flattens the curve:
``t(x) = (2 / v) [sqrt((z0 + R)^2 + (x - x0)^2) - R]`` (Shihab & Al-Nuaimy 2005, Subsurface
Sensing Technologies and Applications 6:151-166). Fitting either form to picks ``(x, t)``
measures the radar velocity in the ground above the target.

Times are two-way, in ns below time zero; positions are distances along the line, m; velocities
m/ns.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
import scipy.optimize
import scipy.stats

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError
from slicer.core.numbers import real

__all__ = ["HyperbolaFit", "fit_hyperbola", "fit_target", "hyperbola_time"]

#: Largest relative standard error of the velocity that a fit may have and still be reported.
MAX_RELATIVE_VELOCITY_STD = 0.5

_WHERE = "hyperbola picks"


def hyperbola_time(x_m, *, x0: float, t0: float, velocity: float, radius: float = 0.0,
                   delay: float = 0.0, separation: float = 0.0):
    """Two-way time (ns) of a point (``radius = 0``) or round diffractor seen at ``x_m``.

    ``t = (2 / v) [sqrt((z0 + R)^2 + (x - x0)^2) - R]`` with ``z0 = v t0 / 2`` the depth of the
    target's top (Shihab & Al-Nuaimy 2005); ``R = 0`` gives the diffraction hyperbola
    ``t = sqrt(t0^2 + (2 (x - x0) / v)^2)`` (Yilmaz 2001, ch. 4). A round target is a point at
    its centre depth ``c`` seen ``2 R / v`` early, so the general form is
    ``t = d + [sqrt((x - x0 - s/2)^2 + c^2) + sqrt((x - x0 + s/2)^2 + c^2)] / v`` with the
    time offset ``d = delay - 2 R / v`` and antennas ``s`` apart (common-offset geometry, from
    memory), ``c`` following from the apex time ``t0 = d + 2 sqrt(c^2 + s^2/4) / v``.

    Parameters
    ----------
    x_m : array_like
        Antenna positions (the midpoint of the pair) along the line, m.
    x0 : float
        Position of the apex along the line, m.
    t0 : float
        Two-way time of the apex, ns.
    velocity : float
        Radar velocity above the target, m/ns.
    radius : float
        Target radius, m.
    delay : float
        Constant time offset of the whole curve, ns (a time-zero error or pick delay).
    separation : float
        Transmitter-receiver separation, m.

    Returns
    -------
    numpy.ndarray
        Two-way times, ns, shaped like ``x_m``.
    """
    d = np.asarray(x_m, dtype=float) - x0
    offset = delay - 2.0 * radius / velocity
    h = separation / 2.0
    centre = np.sqrt(max((velocity * (t0 - offset) / 2.0) ** 2 - h * h, 0.0))
    return offset + (np.sqrt((d - h) ** 2 + centre ** 2) + np.sqrt((d + h) ** 2 + centre ** 2)
                     ) / velocity


@dataclass(frozen=True)
class HyperbolaFit:
    """A fitted diffraction hyperbola and the standard errors of its parameters.

    Attributes
    ----------
    velocity, velocity_std : float
        Radar velocity above the target and its standard error, m/ns.
    x0, x0_std : float
        Apex position along the line, m.
    t0, t0_std : float
        Two-way time of the apex (the target's top), ns.
    depth, depth_std : float
        Depth of the target's top, ``v t0 / 2``, m.
    radius, radius_std : float
        Target radius, m (0 and 0 for a point fit).
    rms_ns : float
        Root-mean-square residual of the picks, ns (unweighted).
    n_points : int
        Number of picks fitted.
    round_p : float
        p-value of the F-test of the round form (or of the free time offset) against the point
        form (:func:`fit_target`, :func:`~slicer.velocity.offset_fit.fit_apex`); NaN when the
        two were not compared.
    delay, delay_std : float
        Fitted constant time offset of the curve and its standard error, ns (0 and 0 when not
        fitted; :mod:`slicer.velocity.offset_fit`).
    separation : float
        Transmitter-receiver separation the curve was fitted with, m.
    radius_given : bool
        The radius was given (known), not fitted
        (:func:`~slicer.velocity.offset_fit.fit_offset_hyperbola`).
    """

    velocity: float
    velocity_std: float
    x0: float
    x0_std: float
    t0: float
    t0_std: float
    depth: float
    depth_std: float
    radius: float
    radius_std: float
    rms_ns: float
    n_points: int
    round_p: float = math.nan
    delay: float = 0.0
    delay_std: float = 0.0
    separation: float = 0.0
    radius_given: bool = False

    @property
    def shape(self) -> str:
        """``"round"`` when a radius was fitted and kept, ``"offset"`` when a time offset was,
        else ``"point"``."""
        return "round" if self.radius > 0 else "offset" if self.delay != 0 else "point"

    @property
    def equivalent_radius(self) -> float:
        """Radius (m) of the round target that an early curve (``delay < 0``) would be:
        ``-delay v / 2``; the fitted radius for a round fit; 0 otherwise."""
        return self.radius if self.radius > 0 else max(0.0, -self.delay * self.velocity / 2)

    def travel_time(self, x_m) -> np.ndarray:
        """Two-way time (ns) of the fitted curve at positions ``x_m`` (m)."""
        return hyperbola_time(x_m, x0=self.x0, t0=self.t0, velocity=self.velocity,
                              radius=self.radius, delay=self.delay, separation=self.separation)


def _model(p: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Travel times and their Jacobian over ``p = (v, x0, t0[, R])``."""
    v, x0, t0 = p[:3]
    r = p[3] if p.size > 3 else 0.0
    d = x - x0
    zr = v * t0 / 2.0 + r
    q = np.sqrt(zr * zr + d * d)
    q = np.where(q > 0, q, np.finfo(float).tiny)
    t = (2.0 / v) * (q - r)
    jac = np.empty((x.size, p.size))
    jac[:, 0] = -t / v + t0 * zr / (v * q)  # d/dv of 2 (q - R) / v with q depending on v
    jac[:, 1] = -2.0 * d / (v * q)
    jac[:, 2] = zr / q
    if p.size > 3:
        jac[:, 3] = (2.0 / v) * (zr / q - 1.0)
    return t, jac


def _check_picks(x_m, t_ns, weights, n_min: int, radius: bool, form: str | None = None):
    try:
        x = np.asarray(x_m, dtype=float).ravel()
        t = np.asarray(t_ns, dtype=float).ravel()
    except (TypeError, ValueError):
        raise SettingsError("positions and times must be numbers", where=_WHERE) from None
    if x.shape != t.shape:
        raise SettingsError(f"{x.size} positions but {t.size} times", where=_WHERE)
    if not (np.isfinite(x).all() and np.isfinite(t).all()):
        raise SettingsError("positions and times must be finite", where=_WHERE)
    if (t <= 0).any():
        raise SettingsError("two-way times must be positive (ns below time zero)", where=_WHERE)
    form = form or ("a round-target fit (radius=True)" if radius else "a hyperbola fit")
    if x.size < n_min:
        raise SettingsError(f"{form} needs at least {n_min} picks, got {x.size}", where=_WHERE)
    distinct = np.unique(np.round(x, 9)).size
    if distinct == 1:
        raise SettingsError("all picks lie at one position: no curvature to measure a velocity",
                            where=_WHERE)
    if distinct < n_min - 1:
        raise SettingsError(f"{form} needs picks at {n_min - 1} or more positions, got "
                            f"{distinct}", where=_WHERE)
    if weights is None:
        w = np.ones_like(x)
    else:
        w = np.asarray(weights, dtype=float).ravel()
        if w.shape != x.shape or not np.isfinite(w).all() or (w <= 0).any():
            raise SettingsError("weights must be positive, finite and one per pick",
                                where="weights")
    return x, t, w


def _initial_guess(x, t, w):
    """``(v, x0, t0)`` from the linear fit of ``t^2 = a + b x + c x^2`` (``c = 4 / v^2``)."""
    scale = max(np.ptp(x), 1e-9)
    xc = (x - x.mean()) / scale  # centred and scaled so the normal equations stay well posed
    design = np.stack([np.ones_like(xc), xc, xc * xc], axis=1) * np.sqrt(w)[:, None]
    (a, b, c), *_ = np.linalg.lstsq(design, t * t * np.sqrt(w), rcond=None)
    # the quadratic term must matter over the picks (xc spans [-0.5, 0.5]), beyond rounding
    if not c * 0.25 > 1e-9 * float(np.mean(t * t)):
        raise SettingsError("the picks show no downward curvature: they cannot fix a velocity "
                            "(a flat or straight event is not a diffraction)", where=_WHERE)
    apex = -b / (2 * c)
    t0_sq = a - c * apex * apex
    velocity = 2.0 * scale / math.sqrt(c)
    x0 = x.mean() + apex * scale
    t0 = math.sqrt(t0_sq) if t0_sq > 0 else 0.5 * t.min()
    return velocity, x0, t0


def _solve(p0, x, t, w, lower, upper, model=_model):
    """Bounded weighted least squares of ``model(p, x) -> (times, Jacobian)`` against ``t``."""
    sw = np.sqrt(w)

    def residuals(p):
        return sw * (model(p, x)[0] - t)

    def jacobian(p):
        return sw[:, None] * model(p, x)[1]

    p0 = np.clip(p0, lower + 1e-9 * (1 + np.abs(lower)), upper)
    return scipy.optimize.least_squares(residuals, p0, jac=jacobian, bounds=(lower, upper),
                                        x_scale="jac", method="trf", xtol=1e-12, ftol=1e-12,
                                        gtol=1e-12, max_nfev=500)


def _covariance(result, n: int) -> np.ndarray:
    """Parameter covariance ``(J^T J)^-1 s^2`` of a least-squares result over ``n`` picks."""
    k = result.x.size
    s2 = 2.0 * result.cost / (n - k)
    try:
        cov = np.linalg.inv(result.jac.T @ result.jac) * s2
    except np.linalg.LinAlgError:
        cov = np.full((k, k), np.inf)
    if not np.isfinite(cov).all():
        raise SettingsError("the picks do not constrain the hyperbola (singular fit)",
                            where=_WHERE)
    return cov


def _validate(v, v_std, x0, t0, depth, x, t) -> None:
    """Refuse a fitted curve that is not a diffraction below the surface (see
    :func:`fit_hyperbola`, Raises)."""
    span = np.ptp(x)
    if not 0 < v < C_M_PER_NS:
        raise SettingsError(f"the fitted velocity {v:.4g} m/ns is not between 0 and the speed of "
                            f"light ({C_M_PER_NS:.4f} m/ns): the picks are not a diffraction "
                            "from below the surface", where=_WHERE)
    outside = max(x.min() - x0, x0 - x.max())
    if outside > 0.01 * span and span < 0.5 * depth:
        raise SettingsError(f"the picks lie on one side of the apex and span only {span:.3g} m "
                            f"(less than half the apex depth, {depth:.3g} m): their curvature "
                            "cannot fix a velocity", where=_WHERE)
    if not t0 > 1e-3 * t.min():
        raise SettingsError("the fitted apex lies at the surface (t0 = 0): a straight event, "
                            "not a diffraction", where=_WHERE)
    if v_std > MAX_RELATIVE_VELOCITY_STD * v:
        raise SettingsError(f"the velocity is not constrained: {v:.4g} +- {v_std:.2g} m/ns "
                            f"(more than {MAX_RELATIVE_VELOCITY_STD:.0%})", where=_WHERE)


def extra_term_test(x, t, w, small, big, *, k_big: int, precision: float):
    """Extra-sum-of-squares F-test of a fit with one parameter more (``big``, ``k_big``
    parameters) against ``small``, with picks counted as independent ones and a floor on the
    residual variance (as in :func:`fit_target`). Returns ``(p, widen)``: the p-value and the
    factor by which the extra parameter's standard error is to be widened."""
    s_small = float(np.sum(w * (small.travel_time(x) - t) ** 2))
    residual = (big.travel_time(x) - t)[np.argsort(x)]
    s_big = float(np.sum(w * (big.travel_time(x) - t) ** 2))
    # neighbouring picks share errors (the wavelet spans several traces): count them as
    # n (1 - r1) / (1 + r1) independent ones, r1 the lag-one autocorrelation of the residuals
    # along the line (AR(1) effective sample size; Bretherton et al. 1999, J. Climate
    # 12:1990-2009, eq. 31), and widen the F statistic's degrees of freedom and the extra
    # parameter's standard error to match
    r1 = 0.0
    if residual.std() > 0:
        r1 = float(np.clip(np.nan_to_num(np.corrcoef(residual[:-1], residual[1:])[0, 1]),
                           0.0, 0.95))
    n_eff = max(k_big + 1.0, x.size * (1.0 - r1) / (1.0 + r1))
    dof = n_eff - k_big
    variance = max(s_big / (x.size - k_big), precision ** 2 * float(w.mean()))
    if variance <= 0:
        p = 0.0 if s_small > 0 else 1.0
    else:
        f = (s_small - s_big) / variance * (n_eff / x.size)
        p = float(scipy.stats.f.sf(max(f, 0.0), 1, dof))
    widen = math.sqrt(x.size / n_eff * max(
        1.0, variance / (s_big / (x.size - k_big)) if s_big > 0 else 1.0))
    return p, widen


def fit_hyperbola(x_m, t_ns, *, radius: bool = False, weights=None,
                  max_radius: float | None = None) -> HyperbolaFit:
    """Fit a diffraction hyperbola (or a round-target curve) to picked times by least squares.

    The model is ``t(x) = (2 / v) sqrt(z0^2 + (x - x0)^2)`` with ``t0 = 2 z0 / v`` (Yilmaz 2001,
    Seismic Data Analysis, ch. 4), or with ``radius=True``
    ``t(x) = (2 / v) [sqrt((z0 + R)^2 + (x - x0)^2) - R]`` (Shihab & Al-Nuaimy 2005). A linear
    fit of ``t^2`` against a quadratic in ``x`` gives the starting point; the nonlinear fit is
    :func:`scipy.optimize.least_squares` with the analytic Jacobian. Standard errors are the
    square roots of the diagonal of ``(J^T J)^-1 s^2``, ``s^2`` the residual variance
    (weighted sum of squares over ``n - p``); the depth error propagates those of ``v`` and
    ``t0`` with their covariance.

    Parameters
    ----------
    x_m : array_like
        Pick positions along the line, m.
    t_ns : array_like
        Picked two-way times, ns below time zero (positive).
    radius : bool
        Fit the round-target form with its radius ``R >= 0`` (needs 5 picks at 4 positions)
        instead of the point hyperbola (4 picks at 3 positions).
    weights : array_like, optional
        Positive weight of each pick (e.g. ``1 / sigma^2`` or the squared amplitude); the
        weighted sum of squared residuals is minimised.
    max_radius : float, optional
        Largest radius tried, m (``radius=True`` only); default the apex depth of the
        point-form starting guess. The radius trades off against the velocity: over picks
        within about one depth of the apex a radius beyond the depth and a faster velocity
        give nearly the same curve, and an unbounded fit wanders off along that valley (it
        did, to several times the true radius, on a full-wave model of a plastic pipe).
        Starts at 0, 1/4, 1/2 and all of the bound; the lowest cost wins.

    Returns
    -------
    HyperbolaFit

    Raises
    ------
    SettingsError
        When the picks cannot constrain a velocity: too few picks or positions, all picks at
        one position, no downward curvature, picks on one side of the apex spanning less than
        half its depth, a relative velocity error above 50 %, or a velocity that is not
        between 0 and the speed of light (0.2998 m/ns).
    """
    n_min = 5 if radius else 4
    x, t, w = _check_picks(x_m, t_ns, weights, n_min, radius)
    v0, x00, t00 = _initial_guess(x, t, w)
    span = np.ptp(x)
    # velocity may run past c here, so that an impossible result is reported, not clipped
    lower = np.array([1e-6, x.min() - 100 * span, 0.0])
    upper = np.array([10 * C_M_PER_NS, x.max() + 100 * span, np.inf])
    p0 = np.array([min(v0, 5 * C_M_PER_NS), x00, t00])
    if radius:
        bound = v0 * t00 / 2 if max_radius is None else real(max_radius, where="max_radius")
        if not (math.isfinite(bound) and bound > 0):
            raise SettingsError(f"must be a positive radius in m, got {max_radius!r}",
                                where="max_radius")
        # a bound past any radar target (10 km) is the same fit; near 1e306 the solver's
        # scaling overflowed to NaN
        bound = min(bound, 1e4)
        lower, upper = np.append(lower, 0.0), np.append(upper, bound)
        # a few starting radii: the radius trades off against velocity, so one start can stall
        # (from radii up to the apex depth: a bound far above it starts nowhere useful)
        starts = [np.append(p0, f * min(bound, max(v0 * t00 / 2, 1e-6)))
                  for f in (0.0, 0.25, 0.5, 1.0)]
    else:
        starts = [p0]
    result = min((_solve(s, x, t, w, lower, upper) for s in starts), key=lambda r: r.cost)
    p = result.x
    v, x0, t0 = p[:3]
    r = float(p[3]) if radius else 0.0
    n, k = x.size, p.size
    cov = _covariance(result, n)
    std = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    depth = v * t0 / 2.0
    _validate(v, std[0], x0, t0, depth, x, t)
    grad = np.zeros(k)
    grad[0], grad[2] = t0 / 2.0, v / 2.0
    depth_std = math.sqrt(max(float(grad @ cov @ grad), 0.0))
    residual = _model(p, x)[0] - t
    return HyperbolaFit(
        velocity=float(v), velocity_std=float(std[0]), x0=float(x0), x0_std=float(std[1]),
        t0=float(t0), t0_std=float(std[2]), depth=float(depth), depth_std=depth_std,
        radius=r, radius_std=float(std[3]) if radius else 0.0,
        rms_ns=float(np.sqrt(np.mean(residual ** 2))), n_points=int(n))


def fit_target(x_m, t_ns, *, weights=None, alpha: float = 0.01,
               max_radius: float | None = None, precision: float = 0.0) -> HyperbolaFit:
    """Fit the point and the round form and keep the round one only when the picks demand it.

    Both forms of :func:`fit_hyperbola` are fitted. The round form has one parameter more, so
    its residual sum of squares is never larger; it is kept when (1) the drop is significant by
    the extra-sum-of-squares F-test, ``F = (S_point - S_round) / (S_round / (n - 4))`` against
    the F(1, n - 4) distribution (:func:`scipy.stats.f`), with p-value below ``alpha``, (2) the
    radius is positive beyond two standard errors, and (3) the radius is not stuck on its upper
    bound (then it is not resolved). Otherwise the point fit is returned. A point fitted to a
    round target's picks reads a few per cent fast, which is why the test is worth making.

    The F-test assumes independent pick errors; picks on neighbouring traces share noise, so
    the picks are counted as the effective number of independent ones (from the lag-one
    autocorrelation of the residuals) and the radius's standard error is widened to match.

    Parameters
    ----------
    x_m, t_ns, weights
        As for :func:`fit_hyperbola`.
    alpha : float
        Significance level of the F-test, in (0, 1).
    max_radius : float, optional
        Upper bound of the radius, m (see :func:`fit_hyperbola`).
    precision : float
        Floor of the picks' time error, ns: the residual variance of the round fit used by
        the test is at least its square. Picks have systematic errors of this order that no
        curve removes, and a round target's curve differs from the best point hyperbola by
        little: over picks within about a depth of the apex, about 0.01 ns rms for a radius
        a tenth of the depth (measured with this module; the point fit reads 4 % fast).

    Returns
    -------
    HyperbolaFit
        With ``round_p`` set (NaN when the round form could not be fitted or there are too
        few picks for it).

    Raises
    ------
    SettingsError
        When the point form cannot be fitted (see :func:`fit_hyperbola`) or ``alpha`` is bad.
    """
    if not 0 < alpha < 1:
        raise SettingsError(f"must be in (0, 1), got {alpha!r}", where="alpha")
    if not (math.isfinite(precision) and precision >= 0):
        raise SettingsError(f"must be a time >= 0 in ns, got {precision!r}", where="precision")
    point = fit_hyperbola(x_m, t_ns, weights=weights)
    x, t, w = _check_picks(x_m, t_ns, weights, 4, False)
    if x.size < 6:  # the F-test needs residual degrees of freedom
        return point
    bound = point.depth if max_radius is None else real(max_radius, where="max_radius")
    try:
        round_ = fit_hyperbola(x, t, radius=True, weights=w, max_radius=bound)
    except SettingsError:
        return point
    p, widen = extra_term_test(x, t, w, point, round_, k_big=4, precision=precision)
    radius_std = round_.radius_std * widen
    round_ = dataclasses.replace(round_, radius_std=radius_std)
    resolved = 2.0 * radius_std < round_.radius < 0.98 * bound
    chosen = round_ if (p < alpha and resolved) else point
    return dataclasses.replace(chosen, round_p=p)
