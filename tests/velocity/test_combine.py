"""Tests of slicer.velocity.combine: one survey velocity from many hyperbola fits.

The records are built from geometry with known answers (sources beside each check):
- a line crossing a linear target at angle a sees the hyperbola t = (2/v) sqrt(z^2 + s^2 sin^2 a)
  of apparent velocity v / sin(a), its apex where the line crosses the target (straight rays,
  zero offset; geometry, common practice);
- a wave scattered by a target at depth z and reflected by a flat interface at depth D reaches
  the antenna along the path to the target's mirror image at depth 2 D - z (the image method
  of plane reflectors; geometry, from memory), so its two-way time is
  [sqrt(d^2 + z^2) + sqrt(d^2 + (2 D - z)^2)] / v at horizontal distance d.
"""

import math
import warnings
from types import SimpleNamespace

import numpy as np
import pytest

from slicer.core.errors import SettingsError, SlicerWarning
from slicer.velocity.combine import survey_velocity
from slicer.velocity.hyperbola import fit_hyperbola

V = 0.1  # m/ns
PERIOD = 2.5  # ns, a 400 MHz wavelet


def record(line, v, *, x=math.nan, y=math.nan, distance=math.nan, time=20.0, std=None,
           heading=0.0, strength=math.nan, score=0.8):
    return SimpleNamespace(line=line, velocity=v, velocity_std=0.005 * v if std is None else std,
                           x=x, y=y, distance=distance, time=time, depth=v * time / 2,
                           heading=heading, period=PERIOD, strength=strength, score=score,
                           fit=SimpleNamespace(rms_ns=0.02))


def secondary_picks(z, interface):
    """Picks of target -> interface -> antenna (image method), 5 cm apart within 1.2 m."""
    d = np.arange(-1.2, 1.21, 0.05)
    t = (np.hypot(d, z) + np.hypot(d, 2 * interface - z)) / V
    return d, t


def test_the_secondary_event_reads_slow():
    # the event's curve, fitted as a hyperbola, has its apex under the target's and a slower
    # velocity: the trap of taking the slowest group
    d, t = secondary_picks(0.8, 1.6)
    fit = fit_hyperbola(d, t)
    assert fit.x0 == pytest.approx(0.0, abs=1e-6)
    # apex at (z + 2 D - z) / v; the curve is not quite a hyperbola, so within 1 %
    assert fit.t0 == pytest.approx(2 * 1.6 / V, rel=0.01)
    assert fit.velocity < 0.93 * V


def pipe_survey(with_strength=True):
    """Eight lines each crossing a pipe at right angles (apex at x = 5 m, 0.8 m deep) and
    seeing its secondary event off an interface 1.6 m deep, weaker (a third), slower."""
    rng = np.random.default_rng(4)
    sec = fit_hyperbola(*secondary_picks(0.8, 1.6))
    fits = []
    for k in range(8):
        name = f"L{k}"
        strong = 1.0 if with_strength else math.nan
        weak = 0.3 if with_strength else math.nan
        fits.append(record(name, V * (1 + 0.005 * rng.standard_normal()), distance=5.0,
                           time=16.0, strength=strong, score=0.7))
        fits.append(record(name, sec.velocity * (1 + 0.005 * rng.standard_normal()),
                           distance=5.0 + 0.02 * rng.standard_normal(), time=sec.t0,
                           strength=weak, score=0.7))
    return fits


def test_a_secondary_event_below_a_stronger_apex_is_set_aside():
    # without strengths the two groups tie on quality and the slower one (the secondary) wins
    with pytest.warns(SlicerWarning, match="disagree"):
        blind = survey_velocity(pipe_survey(with_strength=False))
    assert blind.velocity < 0.95 * V
    with warnings.catch_warnings():
        warnings.simplefilter("error", SlicerWarning)
        estimate = survey_velocity(pipe_survey())
    assert estimate.velocity == pytest.approx(V, rel=0.01)
    reasons = [a.reason for a in estimate.assessed]
    assert reasons.count("secondary") == 8 and reasons.count("kept") == 8
    assert all(a.fit.time == 16.0 for a in estimate.assessed if a.reason == "kept")


def test_a_deeper_apex_outside_the_fresnel_zone_is_not_secondary():
    # Fresnel radius at 0.8 m depth, lambda = 0.1 * 2.5 = 0.25 m: sqrt(0.25 * 0.8 / 2) = 0.32 m
    fits = pipe_survey()
    for f in fits:
        if f.time > 16.0:
            f.distance += 0.5
    with pytest.warns(SlicerWarning, match="disagree"):
        estimate = survey_velocity(fits)
    assert not any(a.reason == "secondary" for a in estimate.assessed)


def oblique_survey(rng, angles=(30.0, 60.0, 115.0), points=6):
    """Lines along x at y = 0, 0.5, ... 6 m, walked both ways; linear targets crossing them at
    the given angles, 0.6 m deep; a few point targets at the ground's velocity."""
    fits = []
    ys = np.arange(0.0, 6.01, 0.5)
    for n, a in enumerate(angles):
        apparent = V / math.sin(math.radians(a))
        for k, y in enumerate(ys):
            x = 3.0 + 4 * n + (y - 3.0) / math.tan(math.radians(a))  # where the line crosses it
            fits.append(record(f"L{k}", apparent * (1 + 0.003 * rng.standard_normal()),
                               x=x + 0.01 * rng.standard_normal(), y=y, time=12.0,
                               heading=0.0 if k % 2 == 0 else 180.0, score=0.8))
    for p in range(points):
        k = int(rng.integers(0, ys.size))
        fits.append(record(f"L{k}", V * (1 + 0.01 * rng.standard_normal()), x=1.0 + 2.5 * p,
                           y=ys[k], time=10.0 + 4 * p, score=0.6))
    return fits


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_obliquely_crossed_linear_targets_do_not_pull_the_estimate(seed):
    fits = oblique_survey(np.random.default_rng(seed))
    # a plain median would read the walls: v / sin(60) = 0.1155, v / sin(30) = 0.2
    assert np.median([f.velocity for f in fits]) > 1.1 * V
    estimate = survey_velocity(fits)
    assert estimate.velocity == pytest.approx(V, rel=0.01)
    for a in estimate.assessed:
        if not math.isnan(a.angle):
            # the angle between line and target, folded into 0-90 degrees
            truth = min(abs(a.fit.velocity / V) ** -1, 1.0)
            assert math.sin(math.radians(a.angle)) == pytest.approx(truth, rel=0.01)


@pytest.mark.parametrize("seed", [0, 1])
def test_a_grid_of_close_bars_is_not_chained_across_bars(seed):
    # concrete: bars 0.2 m apart, crossed at right angles by lines 0.05 m apart, 0.15 m deep.
    # Apexes of neighbouring bars on neighbouring lines lie on slanted straight lines too
    # (a lattice); chained with the 0.15 m default tolerance they read as targets crossed at
    # about 55 degrees and their fits were "corrected" by sin(55) (-16 %). A right-angle
    # crossing needs no correction (apparent velocity v / sin(90) = v: geometry)
    rng = np.random.default_rng(seed)
    fits = [record(f"L{k:02d}", 0.12 * (1 + 0.01 * rng.standard_normal()),
                   x=0.2 * m + 0.003 * rng.standard_normal(), y=0.05 * k, time=2.5,
                   heading=0.0 if k % 2 == 0 else 180.0)
            for k in range(21) for m in range(6)]
    for f in fits:
        f.period = 0.5  # a 2 GHz wavelet
    estimate = survey_velocity(fits)
    assert estimate.velocity == pytest.approx(0.12, rel=0.01)
    angles = [a.angle for a in estimate.assessed if not math.isnan(a.angle)]
    assert angles and min(angles) > 85.0


def test_a_linear_target_seen_on_two_lines_is_outvoted():
    # too few lines to measure its angle: its fits stay fast and form a small group
    rng = np.random.default_rng(7)
    fits = [f for f in oblique_survey(rng, angles=(60.0,)) if f.line in ("L0", "L1")
            or f.velocity < 1.05 * V]
    fits += [record(f"L{k + 3}", V * (1 + 0.01 * rng.standard_normal()), score=0.7)
             for k in range(6)]
    assert survey_velocity(fits).velocity == pytest.approx(V, rel=0.01)


def test_groups_that_disagree_by_more_than_five_percent_warn():
    rng = np.random.default_rng(3)
    fits = [record(f"L{k}", V * (1 + 0.005 * rng.standard_normal())) for k in range(6)]
    with warnings.catch_warnings():
        warnings.simplefilter("error", SlicerWarning)
        survey_velocity(fits)  # one group: silent
    fits += [record(f"M{k}", 1.08 * V * (1 + 0.005 * rng.standard_normal())) for k in range(5)]
    with pytest.warns(SlicerWarning, match="disagree by more than 5%"):
        estimate = survey_velocity(fits)
    assert estimate.velocity == pytest.approx(V, rel=0.01)  # the slower, comparable group


def test_bootstrap_uncertainty_covers_the_truth():
    # lines scatter by 2 % (ground varies, picks share errors) while each fit claims 0.2 %: the
    # fits' own errors would cover the truth rarely; the bootstrap over lines must cover it in
    # about 95 % of draws at two standard errors (normal theory)
    rng = np.random.default_rng(11)
    inside, naive = 0, 0
    draws = 120
    for _ in range(draws):
        fits = []
        for k in range(15):
            line_v = V * (1 + 0.02 * rng.standard_normal())
            fits += [record(f"L{k}", line_v * (1 + 0.002 * rng.standard_normal()),
                            std=0.0002) for _ in range(3)]
        estimate = survey_velocity(fits, tolerance=0.1, resamples=200, seed=int(rng.integers(1e9)))
        inside += abs(estimate.velocity - V) <= 2 * estimate.std
        naive += abs(estimate.velocity - V) <= 2 * 0.0002 / math.sqrt(45)
    # binomial(120, 0.95): 99.9 % of draws give 106 or more inside; the naive error fails
    assert inside >= 104 and naive < 0.5 * draws
    assert inside <= draws


def test_records_without_geometry_and_bad_options():
    fits = [SimpleNamespace(velocity=v, velocity_std=0.001) for v in (0.1, 0.101, 0.099)]
    assert survey_velocity(fits).velocity == pytest.approx(0.1, rel=0.01)
    with pytest.raises(SettingsError) as info:
        survey_velocity(fits, max_gap=0.0)
    assert info.value.where == "survey_velocity"
    with pytest.raises(SettingsError, match="positive integer"):
        survey_velocity(fits, resamples=0)


def test_a_velocity_from_a_handful_of_fits_is_flagged():
    fits = [record(f"L{k % 2}", V * (1 + 0.002 * k), x=0.5 * k, y=0.5 * (k % 2))
            for k in range(4)]
    with pytest.warns(SlicerWarning, match=r"rests on 4 fit\(s\) on 2 line\(s\) only"):
        estimate = survey_velocity(fits)
    assert estimate.velocity == pytest.approx(V, rel=0.01)


def test_two_stones_close_together_do_not_narrow_a_walls_band():
    # one pair of stones 0.1 m apart on one line is no lattice: the wall's apexes, scattered
    # by 5 cm about its axis, still chain on every line and the walls read v / sin(a)
    rng = np.random.default_rng(4)
    fits = oblique_survey(rng, angles=(45.0,), points=3)
    for f in fits[:13]:
        f.x += 0.05 * rng.standard_normal()
    fits += [record("L4", V * 1.002, x=9.0, y=2.0, time=14.0),
             record("L4", V * 0.998, x=9.1, y=2.0, time=14.0)]
    estimate = survey_velocity(fits)
    assert estimate.velocity == pytest.approx(V, rel=0.01)
    chained = [a for a in estimate.assessed if not math.isnan(a.angle)]
    assert len(chained) >= 12 and all(abs(a.angle - 45.0) < 5.0 for a in chained)
