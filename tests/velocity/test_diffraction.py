"""Tests of slicer.velocity.diffraction: finding and fitting diffraction hyperbolas, and the
survey velocity from them."""

import math
import time
from types import SimpleNamespace

import numpy as np
import pytest

from slicer.core.errors import SettingsError, SlicerWarning
from slicer.processing.steps import correct_time_zero
from slicer.synthetic import (
    Ground,
    Layer,
    LineTarget,
    PlannedLine,
    PointTarget,
    Radar,
    grid_lines,
    simulate_line,
)
from slicer.velocity.diffraction import diffraction_table, find_diffractions, survey_velocity

VELOCITY = 0.09  # m/ns (relative permittivity about 11)
ANGLE = 30.0  # degrees between the wall and the lines
POINTS = (PointTarget(4.05, 0.5, 0.8), PointTarget(9.05, 1.5, 1.2, amplitude=1.2),
          PointTarget(14.05, 3.0, 0.6, amplitude=0.8), PointTarget(16.55, 0.0, 1.5, amplitude=1.5),
          PointTarget(6.55, 3.5, 1.0))
RADAR = Radar(frequency_mhz=400.0, sample_interval_ns=0.1, samples=512, time_zero_ns=3.0,
              seed=11)


def simulate(ground, n_lines=8, length=20.0):
    if n_lines == 1:
        plans = [PlannedLine("L000", 0.0, 0.0, length, 0.0, round(length / 0.05) + 1)]
    else:
        plans = grid_lines(west=0.0, south=0.0, length=length, width=0.5 * (n_lines - 1),
                           line_spacing=0.5, trace_spacing=0.05, direction="x", zigzag=True)
    return [correct_time_zero(simulate_line(ground, RADAR, p), time_zero=RADAR.time_zero_ns)
            for p in plans]


@pytest.fixture(scope="module")
def survey():
    """Eight zigzag lines (401 traces x 512 samples) over five stones and a wall footing
    crossed at 30 degrees."""
    a = math.radians(ANGLE)
    wall = LineTarget(2.0, -1.0, 2.0 + 40 * math.cos(a), -1.0 + 40 * math.sin(a), 0.6)
    ground = Ground(velocity=VELOCITY, attenuation_db_per_m=2.0, targets=(wall, *POINTS))
    lines = simulate(ground)
    start = time.perf_counter()
    found = [d for line in lines for d in find_diffractions(line)]
    elapsed = time.perf_counter() - start
    print(f"diffraction search: {len(lines)} lines x {lines[0].sizes['trace']} traces x "
          f"{lines[0].sizes['twt']} samples in {elapsed:.2f} s, {len(found)} hyperbolas")
    return SimpleNamespace(lines=lines, found=found)


def test_search_recovers_the_velocity_despite_the_wall(survey):
    estimate = survey_velocity(survey.found)
    assert estimate.velocity == pytest.approx(VELOCITY, rel=0.03)
    assert 0 < estimate.std < 0.01 * VELOCITY
    # A line crossing a linear target at angle a sees it at distance s sin(a) from a trace s
    # along the line, so t = (2 / v) sqrt(z^2 + s^2 sin(a)^2): a hyperbola of apparent velocity
    # v / sin(a) (geometry; common practice). The wall's fits must be there, and left out.
    apparent = VELOCITY / math.sin(math.radians(ANGLE))
    wall = [d for d in survey.found if abs(d.velocity / apparent - 1) < 0.03]
    assert len(wall) >= len(survey.lines) - 2
    # the wall's apexes line up across the lines: the combination measures the crossing angle
    # from them and corrects each fit by sin(a), to the ground's velocity
    notes = {id(a.fit): a for a in estimate.assessed}
    for d in wall:
        assert notes[id(d)].angle == pytest.approx(ANGLE, abs=1.0)
        assert notes[id(d)].velocity == pytest.approx(VELOCITY, rel=0.02)
    assert np.median([d.velocity for d in survey.found]) != pytest.approx(estimate.velocity)


def test_stones_under_a_line_are_found_where_they_are(survey):
    for target in POINTS:
        near = [d for d in survey.found if abs(d.x - target.x) < 0.1 and abs(d.y - target.y) < 0.01]
        assert near, f"no hyperbola found over {target}"
        best = max(near, key=lambda d: d.score)
        assert best.velocity == pytest.approx(VELOCITY, rel=0.02)
        assert best.depth == pytest.approx(target.depth, rel=0.03)
        assert best.time == pytest.approx(2 * target.depth / VELOCITY, abs=0.2)
        assert 0.5 <= best.score <= 1.0
        assert best.fit.n_points >= 8 and best.velocity_std < 0.1 * best.velocity
        line = next(line for line in survey.lines if line.attrs["line"] == best.line)
        assert abs(float(line["distance"][best.trace]) - best.distance) <= 0.025 + 1e-9


def test_off_line_stones_show_the_true_velocity_deeper(survey):
    # a stone at plan distance d from the line: t = (2 / v) sqrt(z^2 + d^2 + s^2), the same
    # velocity with an apex at sqrt(z^2 + d^2)
    target = POINTS[1]  # under the line y = 1.5; seen from y = 1.0 and 2.0 at d = 0.5 m
    for y in (1.0, 2.0):
        near = [d for d in survey.found if abs(d.x - target.x) < 0.1 and abs(d.y - y) < 0.01]
        assert near
        best = max(near, key=lambda d: d.score)
        assert best.depth == pytest.approx(math.hypot(target.depth, 0.5), rel=0.03)
        assert best.velocity == pytest.approx(VELOCITY, rel=0.02)


def test_a_line_without_diffractors_gives_nothing():
    ground = Ground(velocity=VELOCITY, attenuation_db_per_m=2.0, layers=(Layer(1.2, 0.5),))
    (line,) = simulate(ground, n_lines=1, length=10.0)
    assert find_diffractions(line) == []


def test_round_target_search_fits_the_radius():
    ground = Ground(velocity=VELOCITY, attenuation_db_per_m=2.0,
                    targets=(PointTarget(5.05, 0.0, 1.2, amplitude=1.5, radius=0.25),))
    (line,) = simulate(ground, n_lines=1, length=10.0)
    (found,) = find_diffractions(line, radius=True)
    assert found.fit.radius == pytest.approx(0.25, abs=0.1)
    assert found.velocity == pytest.approx(VELOCITY, rel=0.03)
    assert found.depth == pytest.approx(1.2, rel=0.03)


def test_diffraction_table_has_units(survey):
    table = diffraction_table(survey.found)
    assert table.sizes["diffraction"] == len(survey.found)
    assert table["velocity"].attrs["units"] == "m/ns" and table["time"].attrs["units"] == "ns"
    # the systematic part from refits over narrower apertures (slicer.velocity.aperture)
    assert table["velocity_std_aperture"].attrs["units"] == "m/ns"
    assert (table["velocity_std_aperture"].values >= 0).all()
    np.testing.assert_allclose(table["depth"].values, [d.depth for d in survey.found])
    assert set(table["line"].values) <= {line.attrs["line"] for line in survey.lines}


def record(v, std=None):
    return SimpleNamespace(velocity=v, velocity_std=0.01 * v if std is None else std)


def test_survey_velocity_takes_the_slowest_supported_group():
    rng = np.random.default_rng(5)
    fits = ([record(v) for v in 0.1 * (1 + 0.01 * rng.standard_normal(5))]
            + [record(v) for v in 0.2 * (1 + 0.01 * rng.standard_normal(12))]  # walls
            + [record(0.06), record(0.14)])  # isolated outliers
    with pytest.warns(SlicerWarning, match="disagree.*half the widest difference: 0.0[45].*"
                                           "--target-radius"):  # the walls' group is not small
        estimate = survey_velocity(fits)
    assert estimate.velocity == pytest.approx(0.1, rel=0.02)
    # half the distance to the walls' group (0.2 m/ns, by construction), said beside the std
    assert estimate.group_spread == pytest.approx(0.05, rel=0.05)
    assert survey_velocity(fits[:5]).group_spread == 0.0  # one group: nothing to say
    assert len(estimate.kept) == 5 and all(abs(f.velocity - 0.1) < 0.01 for f in estimate.kept)
    assert np.median([f.velocity for f in fits]) > 0.15  # a plain median would take the walls
    # standard error of the median of five fits scattered by 1 %
    assert 0.0002 < estimate.std < 0.002
    assert survey_velocity(fits, min_count=6).velocity == pytest.approx(0.2, rel=0.02)


def test_survey_velocity_refuses_too_few_or_scattered_fits():
    with pytest.raises(SettingsError, match="at least 3"):
        survey_velocity([record(0.1), record(0.1)])
    with pytest.raises(SettingsError, match="agree"):
        survey_velocity([record(v) for v in (0.05, 0.08, 0.12, 0.17)])
    with pytest.raises(SettingsError, match="tolerance"):
        survey_velocity([record(0.1)] * 3, tolerance=0.0)


@pytest.mark.parametrize("kwargs, where", [
    (dict(velocities=[0.1, 0.05, 0.2]), "velocities"),
    (dict(velocities=[0.1, 0.2, 0.4]), "velocities"),
    (dict(aperture=0.0), "aperture"),
    (dict(threshold=1.5), "threshold"),
    (dict(max_angle=95.0), "max_angle"),
    (dict(frequency_ghz=-0.4), "frequency_ghz"),
    (dict(min_picks=3), "min_picks"),
])
def test_find_diffractions_refuses_bad_options(survey, kwargs, where):
    with pytest.raises(SettingsError) as info:
        find_diffractions(survey.lines[0], **kwargs)
    assert info.value.where == where


def test_bars_just_under_the_surface_are_found_from_an_earlier_start():
    # concrete: a bar under 5 cm of cover at 0.12 m/ns has its apex at 2 d / v = 0.83 ns,
    # above the default search start (two dominant periods, about 1 ns at 2 GHz); searched
    # from 0.5 ns it is found and fitted (geometry of the synthetic scene)
    from slicer.synthetic import grid_lines
    ground = Ground(velocity=0.12, attenuation_db_per_m=20.0,
                    targets=(LineTarget(-1.0, 0.5, 1.0, 0.5, 0.05, amplitude=0.03),))
    radar = Radar(frequency_mhz=2000.0, sample_interval_ns=0.025, samples=400,
                  time_zero_ns=1.5, seed=1)
    plan = grid_lines(west=0.0, south=0.0, length=1.0, width=0.0001, line_spacing=0.05,
                      trace_spacing=0.01, direction="y")[0]
    line = correct_time_zero(simulate_line(ground, radar, plan), time_zero="auto")
    assert find_diffractions(line) == []
    (found,) = find_diffractions(line, min_time=0.5)
    assert found.velocity == pytest.approx(0.12, rel=0.02)
    assert found.depth == pytest.approx(0.05, abs=0.01)
    with pytest.raises(SettingsError, match="min_time"):
        find_diffractions(line, min_time=-1.0)
