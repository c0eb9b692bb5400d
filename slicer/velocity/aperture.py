"""How much a hyperbola's velocity depends on how far down its flanks the picks reach.

A fitted velocity has two kinds of error. The random one (pick noise) is the fit's standard
error, and the bootstrap over lines of :mod:`slicer.velocity.combine` sees it. A systematic
one, a pick time error that grows with the angle from the apex, is common to every line and
no resampling sees it. Antennas on or just above the ground are the case in point: beyond the
critical angle of the air-ground interface, ``asin(v / c)`` (19.5 degrees in 0.1 m/ns
ground; Snell's law), the energy reaching the antennas first has run along the interface in
air (the lateral wave), so picks there arrive early by an amount growing with the angle, and
the curve reads fast (measured on the full-wave fixture: :mod:`slicer.velocity.diffraction`,
Known limitation). A curve of the model's form gives the same velocity, within its noise, from
picks over any part of it; a curve bent by an angle-dependent error does not.

:func:`aperture_spread` therefore refits the picks of a fit, in the same form, limited to
opening angles within the critical angle implied by the fitted velocity, within 30 and within
45 degrees, and compares each velocity ``v_a`` with the full fit's ``v``. The picks within a
limit are a subset of all of them, so with the model right the difference has the variance
``s_a^2 - s^2`` (the difference between an estimator and a more efficient one of the same
quantity: Hausman 1978, Econometrica 46:1251-1271, lemma 2.1); the part of the difference
beyond that, ``sqrt(max(0, (v_a - v)^2 - (s_a^2 - s^2)))``, is taken as systematic, and the
largest over the limits is the fit's aperture uncertainty. It is zero or small for picks that
follow the model and about ``|v - v_true|`` when the picks inside the critical angle are
right and those beyond it early. It cannot see an error that all limits share (a round
target fitted as a point reads fast at every aperture, :mod:`slicer.velocity.offset_fit`):
it is a lower bound of the systematic error, not a bound. Nor does it see an angle-dependent
error that a fitted time offset has absorbed: picks of a point 0.4 m deep in 0.1 m/ns ground,
early by a share of the lateral path's lead (0.3 ns at 45 degrees), took the offset form in
:func:`~slicer.velocity.offset_fit.fit_apex` and read 34 % fast with a 4.5 % standard error,
and the refits with that offset held agreed (measured with this module, 40 draws); as points
they read 6.4 % fast and the term was 6.6 % (``tests/velocity/test_aperture.py``).

Angles are measured from the apex, ``atan(|x - x0| / z)`` with ``z`` the fitted depth of the
reflecting top, from the midpoint of the antenna pair. Times ns, positions m, velocities m/ns.
"""

from __future__ import annotations

import math

import numpy as np

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError
from slicer.velocity.hyperbola import HyperbolaFit, fit_hyperbola
from slicer.velocity.offset_fit import fit_offset_hyperbola

__all__ = ["APERTURE_LIMITS", "aperture_spread", "critical_angle"]

#: Fixed opening-angle limits of the refits, degrees (the critical angle is added per fit).
APERTURE_LIMITS = (30.0, 45.0)

#: Multiple of its expected standard deviation beyond which a refit's change counts.
SIGNIFICANCE = 2.0


def critical_angle(velocity: float) -> float:
    """Critical angle of the air-ground interface, ``asin(v / c)``, degrees (Snell's law)."""
    return math.degrees(math.asin(min(max(velocity, 0.0) / C_M_PER_NS, 1.0)))


def _refit(x, t, w, fit: HyperbolaFit) -> HyperbolaFit:
    """Fit picks in the form of ``fit``: with a given radius, that radius and the time offset
    held; a round target's with its radius free; otherwise a point's with the fitted time
    offset (0 for a point) held (a free offset is not resolved near the apex,
    :mod:`slicer.velocity.offset_fit`)."""
    if fit.radius_given:
        return fit_offset_hyperbola(x, t - fit.delay, separation=fit.separation, weights=w,
                                    delay=False, radius=fit.radius)
    if fit.shape == "round":
        return fit_hyperbola(x, t, radius=True, weights=w)
    return fit_offset_hyperbola(x, t - fit.delay, separation=fit.separation, weights=w,
                                delay=False)


def aperture_spread(x_m, t_ns, weights, fit: HyperbolaFit, *, min_picks: int = 6,
                    limits=APERTURE_LIMITS) -> tuple[float, dict]:
    """Systematic velocity uncertainty of a fit from refits over narrower apertures.

    Parameters
    ----------
    x_m, t_ns : array_like
        The picks the fit was made from: positions along the line (m) and two-way times (ns).
    weights : array_like or None
        Their weights, as given to the fit.
    fit : HyperbolaFit
        The fit of all the picks; its form (``shape``, ``separation``) is reused.
    min_picks : int
        Fewest picks a refit needs; limits keeping fewer (or all) picks are skipped.
    limits : sequence of float
        Opening-angle limits, degrees, besides the critical angle ``asin(v / c)``.

    Returns
    -------
    spread : float
        ``max_a sqrt(max(0, (v_a - v)^2 - (s_a^2 - s^2)))``, m/ns (the rule: module
        docstring); 0 when no limit leaves a usable subset.
    velocities : dict
        The refits' velocities, m/ns, by limit in degrees (the critical angle's under its
        value); limits whose picks could not be fitted are left out.
    """
    x = np.asarray(x_m, dtype=float)
    t = np.asarray(t_ns, dtype=float)
    w = np.ones_like(x) if weights is None else np.asarray(weights, dtype=float)
    angle = np.degrees(np.arctan2(np.abs(x - fit.x0), max(fit.depth, 1e-9)))
    spread, velocities = 0.0, {}
    for limit in sorted({round(critical_angle(fit.velocity), 1), *map(float, limits)}):
        inside = angle <= limit
        if inside.sum() < min_picks or inside.all():
            continue
        try:
            part = _refit(x[inside], t[inside], w[inside], fit)
        except SettingsError:  # too few positions, one-sided or unconstrained: no evidence
            continue
        velocities[limit] = part.velocity
        change = abs(part.velocity - fit.velocity)
        if change > SIGNIFICANCE * math.sqrt(abs(part.velocity_std ** 2 - fit.velocity_std ** 2)):
            spread = max(spread, change)
    return spread, velocities
