"""Tests of slicer.velocity.hyperbola: diffraction travel times and the hyperbola fit."""

import numpy as np
import pytest

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError
from slicer.synthetic.forward import point_travel_time
from slicer.velocity.hyperbola import HyperbolaFit, fit_hyperbola, hyperbola_time


def test_point_travel_times_match_published_values():
    # Yilmaz (2001), Seismic Data Analysis, SEG, ch. 4: t(x) = (2/v) sqrt(z0^2 + x^2);
    # v = 0.1 m/ns, z0 = 1 m (t0 = 20 ns) -> check-values.md "Diffraction hyperbola".
    t = hyperbola_time([0.0, 0.5, 1.0, 2.0], x0=0.0, t0=20.0, velocity=0.1)
    np.testing.assert_allclose(t, [20.000, 22.361, 28.284, 44.721], atol=6e-4)


def test_round_target_travel_times_match_published_values():
    # Shihab & Al-Nuaimy (2005), Subsurface Sensing Technologies and Applications 6:151-166:
    # t(x) = (2/v) [sqrt((z0 + R)^2 + x^2) - R]; R = 0.1 m, z0 = 1 m, v = 0.1 m/ns.
    t = hyperbola_time([0.0, 1.0, 2.0], x0=0.0, t0=20.0, velocity=0.1, radius=0.1)
    np.testing.assert_allclose(t, [20.000, 27.732, 43.651], atol=6e-4)


def test_travel_time_agrees_with_the_forward_model():
    x = np.linspace(-2, 3, 11)
    for radius in (0.0, 0.25):
        ours = hyperbola_time(x, x0=0.4, t0=2 * 1.3 / 0.08, velocity=0.08, radius=radius)
        forward = point_travel_time(x - 0.4, depth=1.3, velocity=0.08, radius=radius)
        np.testing.assert_allclose(ours, forward, rtol=1e-12)


@pytest.mark.parametrize("velocity, x0, depth", [(0.1, 3.1, 1.0), (0.06, -0.4, 0.35),
                                                 (0.15, 10.0, 2.2)])
def test_fit_recovers_velocity_from_clean_picks(velocity, x0, depth):
    x = x0 + np.arange(-1.0, 1.3, 0.05)  # not symmetric about the apex
    t = hyperbola_time(x, x0=x0, t0=2 * depth / velocity, velocity=velocity)
    fit = fit_hyperbola(x, t)
    assert isinstance(fit, HyperbolaFit)
    assert fit.velocity == pytest.approx(velocity, rel=0.01)
    assert fit.x0 == pytest.approx(x0, abs=0.01)
    assert fit.depth == pytest.approx(depth, rel=0.01)
    assert fit.n_points == x.size and fit.rms_ns < 1e-6 and fit.radius == 0.0
    np.testing.assert_allclose(fit.travel_time(x), t, atol=1e-6)


def test_fit_with_noise_within_three_percent_and_honest_errors():
    rng = np.random.default_rng(42)
    x = np.arange(2.0, 6.01, 0.05)
    truth = dict(x0=4.0, t0=24.0, velocity=0.1)
    t_clean = hyperbola_time(x, **truth)
    fits = [fit_hyperbola(x, t_clean + rng.normal(0.0, 0.2, x.size)) for _ in range(200)]
    v = np.array([f.velocity for f in fits])
    assert np.all(np.abs(v / 0.1 - 1) < 0.03)
    # the covariance (J^T J)^-1 s^2 must describe the scatter of repeated fits
    spread = v.std(ddof=1)
    reported = np.median([f.velocity_std for f in fits])
    assert 0.7 < reported / spread < 1.4
    assert np.median([f.rms_ns for f in fits]) == pytest.approx(0.2, rel=0.1)
    depth = np.array([f.depth for f in fits])
    assert 0.6 < np.median([f.depth_std for f in fits]) / depth.std(ddof=1) < 1.6


def test_round_target_fit_recovers_radius():
    x = np.arange(-1.5, 1.51, 0.05)
    t = hyperbola_time(x, x0=0.2, t0=24.0, velocity=0.1, radius=0.2)
    fit = fit_hyperbola(x, t, radius=True)
    assert fit.velocity == pytest.approx(0.1, rel=0.01)
    assert fit.radius == pytest.approx(0.2, abs=0.005)
    assert fit.depth == pytest.approx(1.2, abs=0.01)
    # a point hyperbola fitted to the same picks is biased fast: the radius matters
    assert fit_hyperbola(x, t).velocity > 0.103


@pytest.mark.parametrize("max_radius", [50.0, 5.76e306, 1.7e308])
def test_any_finite_radius_bound_past_the_target_fits_alike(max_radius):
    # the same analytic round-target hyperbola (hyperbola_time, the textbook form) fitted
    # with a loose and an absurd bound on the radius: the same fit (a bound near 1e306 had
    # made the solver's scaling overflow into a NumPy ValueError; found by hypothesis)
    x = np.arange(-1.5, 1.51, 0.05)
    t = hyperbola_time(x, x0=0.2, t0=24.0, velocity=0.1, radius=0.2)
    fit = fit_hyperbola(x, t, radius=True, max_radius=max_radius)
    assert fit.velocity == pytest.approx(0.1, rel=0.01)
    assert fit.radius == pytest.approx(0.2, abs=0.005)


def test_weights_let_a_bad_pick_count_less():
    x = np.arange(-1.0, 1.01, 0.1)
    t = hyperbola_time(x, x0=0.0, t0=20.0, velocity=0.1)
    t[3] += 8.0
    w = np.ones_like(x)
    w[3] = 1e-6
    assert abs(fit_hyperbola(x, t).velocity - 0.1) > 0.002
    assert fit_hyperbola(x, t, weights=w).velocity == pytest.approx(0.1, rel=1e-3)


@pytest.mark.parametrize("x, t, radius, match", [
    ([0, 0.1, 0.2], [20, 20.1, 20.4], False, "at least 4 picks"),
    ([0, 0.1, 0.2, 0.3], [20, 20.1, 20.4, 20.9], True, "at least 5 picks"),
    ([1.0] * 6, [20, 21, 22, 23, 24, 25], False, "one position"),
    ([0, 0, 1, 1], [20, 20, 28, 28], False, "3 or more positions"),
    (np.linspace(0, 2, 9), np.full(9, 30.0), False, "curvature"),
    (np.linspace(0, 2, 9), 5.0 + 10.0 * np.linspace(0, 2, 9), False, "surface|curvature"),
    ([0, 1, 2], [1, 2], False, "3 positions but 2 times"),
    ([0, 1, 2, np.nan], [20, 21, 22, 23], False, "finite"),
    ([0, 1, 2, 3], [20, 21, -22, 23], False, "positive"),
])
def test_fit_refuses_picks_that_cannot_fix_a_velocity(x, t, radius, match):
    with pytest.raises(SettingsError, match=match) as info:
        fit_hyperbola(x, t, radius=radius)
    assert info.value.where == "hyperbola picks"


def test_fit_refuses_one_sided_picks_with_a_tiny_span():
    x = np.linspace(1.0, 1.1, 6)  # 1-1.1 m from an apex 2 m deep
    t = hyperbola_time(x, x0=0.0, t0=40.0, velocity=0.1)
    with pytest.raises(SettingsError, match="one side of the apex"):
        fit_hyperbola(x, t)


def test_fit_refuses_an_unconstrained_velocity():
    rng = np.random.default_rng(3)
    x = np.linspace(-0.15, 0.15, 7)
    t = hyperbola_time(x, x0=0.0, t0=40.0, velocity=0.1) + rng.normal(0, 0.5, x.size)
    with pytest.raises(SettingsError, match="not constrained|curvature|light"):
        fit_hyperbola(x, t)


def test_fit_refuses_a_velocity_faster_than_light():
    # v >= c = 0.2998 m/ns is impossible in ground (check-values.md, Davis & Annan 1989)
    x = np.linspace(-2, 2, 21)
    t = hyperbola_time(x, x0=0.0, t0=10.0, velocity=0.4)
    with pytest.raises(SettingsError, match="speed of light"):
        fit_hyperbola(x, t)
    slower = fit_hyperbola(x, hyperbola_time(x, x0=0.0, t0=10.0, velocity=0.29))
    assert slower.velocity < C_M_PER_NS


def test_fit_refuses_bad_weights():
    x = np.linspace(-1, 1, 9)
    t = hyperbola_time(x, x0=0.0, t0=20.0, velocity=0.1)
    for w in (np.zeros(9), np.ones(8), -np.ones(9)):
        with pytest.raises(SettingsError, match="weights"):
            fit_hyperbola(x, t, weights=w)


def test_round_fit_of_noisy_picks_recovers_velocity_and_radius():
    # Shihab & Al-Nuaimy (2005) form; a radius half the depth, picks 2 m either side, 0.01 ns
    # noise: fit_target must keep the round form and its radius and velocity must be within
    # 2.5 standard errors of the truth in most draws (normal theory: 98.8 %)
    from slicer.velocity.hyperbola import fit_target
    rng = np.random.default_rng(8)
    x = np.arange(-2.0, 2.01, 0.05)
    clean = hyperbola_time(x, x0=0.1, t0=20.0, velocity=0.1, radius=0.5)
    fits = [fit_target(x, clean + rng.normal(0.0, 0.01, x.size)) for _ in range(60)]
    assert sum(f.shape == "round" for f in fits) >= 57
    good_r = sum(abs(f.radius - 0.5) <= 2.5 * f.radius_std for f in fits if f.radius > 0)
    good_v = sum(abs(f.velocity - 0.1) <= 2.5 * f.velocity_std for f in fits if f.radius > 0)
    assert good_r >= 54 and good_v >= 54
    assert all(f.round_p < 0.01 for f in fits if f.shape == "round")


def test_point_target_stays_a_point_and_the_radius_is_bounded():
    from slicer.velocity.hyperbola import fit_target
    rng = np.random.default_rng(9)
    x = np.arange(-1.2, 1.21, 0.05)
    clean = hyperbola_time(x, x0=0.0, t0=24.0, velocity=0.1)
    fits = [fit_target(x, clean + rng.normal(0.0, 0.1, x.size)) for _ in range(100)]
    # an F-test at 1 %: about one false round fit in a hundred (binomial, 5 or more: 0.06 %)
    assert sum(f.shape == "round" for f in fits) <= 4
    assert all(0 <= f.round_p <= 1 for f in fits)
    # the round form alone never runs past its bound (the apex depth by default, 1.2 m)
    for _ in range(20):
        r = fit_hyperbola(x, clean + rng.normal(0.0, 0.1, x.size), radius=True)
        assert 0 <= r.radius <= 1.25
    with pytest.raises(SettingsError, match="alpha|precision"):
        fit_target(x, clean, alpha=2.0)
