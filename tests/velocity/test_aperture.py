"""Tests of slicer.velocity.aperture: the systematic velocity uncertainty from refits over
narrower apertures, and how slicer.velocity.combine carries it into the survey's uncertainty.

Picks are made from physics outside the project, not from its forward model (sources beside
each use):
- the straight-ray diffraction hyperbola of a point at depth z, t = (2 / v) sqrt(z^2 + x^2)
  (zero offset; Yilmaz 2001, Seismic Data Analysis, SEG, ch. 4);
- the critical angle of the air-ground interface, sin(a_c) = v / c (Snell's law);
- the lateral path: beyond horizontal distance z tan(a_c) the quickest path from an antenna on
  the surface to the point runs along the interface in air at c and enters the ground at the
  critical angle, t1 = (X - z tan a_c) / c + z / (v cos a_c) one way (Fermat's principle; the
  head-wave geometry of refraction seismology, Telford, Geldart & Sheriff 1990, Applied
  Geophysics, 2nd ed., ch. 4, from memory). Its lead over the straight ray grows along the line
  at the rate (sin a - sin a_c) / v (the difference of the two paths' horizontal slownesses,
  sin(a) / v and 1 / c), so a delay proportional to (sin a - sin a_c) beyond the critical angle
  is its first-order form. Envelope picks of ground-coupled antennas arrive between the two
  paths' times (slicer.velocity.diffraction, Known limitation); here a fraction of the lateral
  path's lead, scaled to 0.3 ns at 45 degrees, the size measured there.
"""

import math
from types import SimpleNamespace

import numpy as np
import pytest

from slicer.core.conventions import C_M_PER_NS
from slicer.velocity.aperture import aperture_spread, critical_angle
from slicer.velocity.combine import survey_velocity
from slicer.velocity.offset_fit import fit_apex, fit_offset_hyperbola

V, Z = 0.1, 0.4  # m/ns, m: a point 0.4 m deep
X = np.arange(-0.48, 0.4801, 0.02)  # picks 2 cm apart to 50 degrees either side of the apex
ANGLE = np.arctan(np.abs(X) / Z)
A_C = math.asin(V / C_M_PER_NS)  # Snell's law
NOISE = 0.02  # ns, pick noise
DRAWS = 40


def straight():
    return 2 * np.hypot(X, Z) / V  # Yilmaz 2001, ch. 4


def lateral_lead():
    """Two-way lead of the lateral path over the straight ray (both legs; Fermat)."""
    far = np.abs(X)
    one_way = (far - Z * math.tan(A_C)) / C_M_PER_NS + Z / (V * math.cos(A_C))
    return 2 * np.where(far > Z * math.tan(A_C), np.hypot(X, Z) / V - one_way, 0.0)


def linear_lead():
    return np.clip(np.sin(ANGLE) - math.sin(A_C), 0.0, None)


def at_45_degrees(lead):
    """The lead scaled to 0.3 ns at 45 degrees."""
    half = X >= 0
    return lead * 0.3 / np.interp(math.radians(45), ANGLE[half], lead[half])


def draws(lead, fit=lambda x, t: fit_offset_hyperbola(x, t, delay=False)):
    """(velocity error, fit standard error, aperture term) over seeded noisy picks."""
    rows = []
    for seed in range(DRAWS):
        t = straight() - lead + np.random.default_rng(seed).normal(0.0, NOISE, X.size)
        f = fit(X, t)
        rows.append((f.velocity - V, f.velocity_std, aperture_spread(X, t, None, f)[0]))
    return np.array(rows).T


def test_critical_angle_is_snells():
    # permittivity 9: v = c / 3, sin(a_c) = 1 / 3, a_c = 19.47 degrees (Snell's law)
    assert critical_angle(C_M_PER_NS / 3) == pytest.approx(19.4712, abs=1e-4)
    assert critical_angle(C_M_PER_NS) == 90.0


@pytest.mark.parametrize("lead", [lateral_lead, linear_lead], ids=["lateral path", "linear"])
def test_angle_dependent_delay_is_covered(lead):
    error, fit_std, aperture = draws(at_45_degrees(lead()))
    # the early flanks make the curve read fast, far beyond the fit's own error...
    assert np.all(error > 0.03 * V) and np.all(np.abs(error) > 5 * fit_std)
    # ... and the refits within the critical angle (where the picks are right) see it: the truth
    # inside two stated uncertainties (fit and aperture in quadrature) in most draws
    covered = np.abs(error) <= 2 * np.hypot(fit_std, aperture)
    assert covered.mean() >= 0.8, (error, aperture)


def test_unbiased_picks_add_nothing_in_most_draws():
    error, fit_std, aperture = draws(np.zeros_like(X))
    # with the model right, a refit on a subset differs from the full fit with the variance
    # s_a^2 - s^2 (Hausman 1978, Econometrica 46:1251, lemma 2.1), and each of the three
    # subsets passes its two-sigma check in 95.4 % of draws (normal): all three pass in at
    # least 1 - 3 x 0.046 = 86 % (Bonferroni); 70 % leaves room for 40 draws' scatter
    assert (aperture == 0).mean() >= 0.7, aperture
    # the stated uncertainty stays near the fit's own: within 20 % in the median
    assert np.median(np.hypot(fit_std, aperture)) <= 1.2 * np.median(fit_std)
    assert np.all(np.abs(error) < 0.01 * V)


def test_refits_use_the_fits_form():
    # a constant time offset (a round target's -2 R / v, or a late time zero) is the model of an
    # offset fit: held at its fitted value, every aperture gives the same velocity. Picks to 3
    # depths, where the offset is resolved (slicer.velocity.offset_fit)
    x = np.arange(-1.2, 1.2001, 0.02)
    t = 2 * np.hypot(x, Z) / V - 0.8 + np.random.default_rng(3).normal(0.0, NOISE, x.size)
    fit = fit_apex(x, t, precision=0.05)
    assert fit.shape == "offset" and fit.delay == pytest.approx(-0.8, abs=0.1)
    spread, velocities = aperture_spread(x, t, None, fit)
    assert spread == 0.0 and len(velocities) == 3
    assert all(abs(v / V - 1) < 0.02 for v in velocities.values()), velocities


def test_refits_of_a_given_radius_keep_it():
    # a round target (R = 0.05 m, centre 0.45 m; Shihab & Al-Nuaimy 2005, the point hyperbola
    # at the centre less 2 R / v) fitted with its radius: every aperture refit keeps the
    # radius, so picks that follow the form add no aperture term; a free-radius refit of the
    # same picks near the apex would trade the radius against the velocity
    x = X.copy()
    t = 2 * (np.hypot(x, Z + 0.05) - 0.05) / V
    fit = fit_offset_hyperbola(x, t, delay=False, radius=0.05)
    spread, velocities = aperture_spread(x, t, None, fit)
    assert fit.radius_given and fit.velocity == pytest.approx(V, rel=1e-6)
    assert spread == 0.0 and len(velocities) == 3
    assert all(v == pytest.approx(V, rel=1e-6) for v in velocities.values()), velocities


def record(line, v, aperture=None):
    fields = dict(line=line, velocity=v, velocity_std=0.0005)
    if aperture is not None:
        fields["velocity_std_aperture"] = aperture
    return SimpleNamespace(**fields)


def test_survey_uncertainty_adds_the_aperture_part_in_quadrature():
    rng = np.random.default_rng(5)
    values = V * (1 + 0.003 * rng.standard_normal(24))
    plain = survey_velocity([record(f"L{k % 8}", v) for k, v in enumerate(values)])
    assert plain.std_aperture == 0.0 and plain.std == plain.std_lines
    shared = survey_velocity([record(f"L{k % 8}", v, 0.004) for k, v in enumerate(values)])
    # every fit moved by the same 0.004 m/ns moves a weighted median by exactly that (a median
    # is translation-equivariant), so the systematic part is 0.004
    assert shared.std_aperture == pytest.approx(0.004, rel=1e-9)
    assert shared.std == pytest.approx(math.hypot(shared.std_lines, 0.004), rel=1e-9)
    assert shared.velocity == plain.velocity and shared.std_lines == plain.std_lines
