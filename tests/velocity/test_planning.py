"""Tests of slicer.velocity.planning: survey planning numbers (wavelength, resolution, Fresnel
zone, footprint, sampling, attenuation)."""

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError
from slicer.velocity.planning import ROWS, attenuation_db_per_m, plan_survey


@pytest.fixture(scope="module")
def dry_sand():
    """400 MHz in dry sand, er = 4, target at 2 m (check-values.md, survey design)."""
    return plan_survey(frequency_mhz=400, permittivity=4.0, target_depth_m=2.0)


def test_wavelength_and_vertical_resolution(dry_sand):
    # lambda = v / f, v = c / sqrt(er) (Davis & Annan 1989, Geophys. Prosp. 37:531, Table 1)
    assert dry_sand.velocity == pytest.approx(0.1499, abs=1e-4)
    assert dry_sand.wavelength_m == pytest.approx(0.3747, abs=1e-4)
    # quarter-wavelength criterion: common practice (Jol (ed.) 2009, Ground Penetrating Radar
    # Theory and Applications, Elsevier)
    assert dry_sand.vertical_resolution_m == pytest.approx(0.0937, abs=1e-4)


def test_fresnel_zone(dry_sand):
    # Sheriff & Geldart (1995), Exploration Seismology, 2nd ed.: r = sqrt(lambda z/2 +
    # lambda^2/16); z = 2 m -> 0.619 m
    assert dry_sand.fresnel_radius_m == pytest.approx(0.619, abs=1e-3)


def test_antenna_footprint(dry_sand):
    # Annan (1996), cited in Martinez & Byrnes (2001), Kansas Geological Survey Bulletin 247:
    # A = lambda/4 + z / sqrt(er - 1) = 1.248 m at z = 2 m, short axis A / 2
    assert dry_sand.footprint_long_m == pytest.approx(1.248, abs=1e-3)
    assert dry_sand.footprint_short_m == pytest.approx(0.624, abs=1e-3)


def test_sampling(dry_sand):
    # Annan (2009), in Jol (ed.) 2009, ch. 1: trace spacing <= c / (4 f sqrt(er)) = 0.0937 m,
    # sample interval <= 1 / (6 f) = 0.417 ns
    assert dry_sand.trace_spacing_m == pytest.approx(0.0937, abs=1e-4)
    assert dry_sand.trace_spacing_m == pytest.approx(dry_sand.wavelength_m / 4)
    assert dry_sand.sample_interval_ns == pytest.approx(0.417, abs=1e-3)


def test_time_window():
    # Annan (2009), in Jol (ed.) 2009, ch. 1: 1.3 x 2 d_max / v; d_max 3 m in er 4 -> 52.0 ns
    plan = plan_survey(frequency_mhz=400, permittivity=4.0, target_depth_m=3.0)
    assert plan.time_window_ns == pytest.approx(52.0, abs=0.1)


def test_line_spacing_rule(dry_sand):
    # common practice: two lines across every target, footprints meeting at its depth
    assert dry_sand.line_spacing_m == pytest.approx(dry_sand.footprint_short_m)
    small = plan_survey(frequency_mhz=400, permittivity=4.0, target_depth_m=2.0,
                        target_size_m=0.4)
    assert small.line_spacing_m == pytest.approx(0.2)


def test_attenuation_low_loss_value():
    # Annan (2009): alpha = 1636 sigma / sqrt(er) dB/m; 10 mS/m, er 9 -> 5.45 dB/m
    plan = plan_survey(frequency_mhz=400, permittivity=9.0, conductivity_ms_per_m=10.0,
                       target_depth_m=1.0)
    assert plan.attenuation_low_loss_db_per_m == pytest.approx(5.45, abs=0.01)
    # the constant 1636 is (1/2) sqrt(mu0 / eps0) in dB (check-values.md, from the constants)
    low, _, _ = attenuation_db_per_m(frequency_mhz=100, permittivity=1.0,
                                     conductivity_ms_per_m=1000.0)
    assert low == pytest.approx(1636, rel=1e-3)
    # at a small loss tangent the exact plane-wave value agrees with the approximation
    assert plan.loss_tangent < 0.1 and not plan.warnings
    assert plan.attenuation_db_per_m == pytest.approx(5.45, rel=0.01)
    assert plan.two_way_loss_db == pytest.approx(2 * 1.0 * plan.attenuation_db_per_m)


def test_attenuation_low_loss_breakdown():
    # check-values.md [computed]: 100 MHz, er 3, 10 mS/m -> 9.45 (low-loss) vs 9.08 dB/m (exact)
    plan = plan_survey(frequency_mhz=100, permittivity=3.0, conductivity_ms_per_m=10.0,
                       target_depth_m=1.0)
    assert plan.attenuation_low_loss_db_per_m == pytest.approx(9.45, abs=0.01)
    assert plan.attenuation_db_per_m == pytest.approx(9.08, abs=0.01)
    assert plan.loss_tangent == pytest.approx(0.599, abs=0.001)
    assert any("loss tangent" in w for w in plan.warnings)


@settings(max_examples=50, deadline=None)
# sigma 0 or at least 1e-9 mS/m: below that p^2 underflows the comparison's own tolerance
@given(st.floats(10, 3000), st.floats(1.5, 80),
       st.one_of(st.just(0.0), st.floats(1e-9, 0.01)))
def test_exact_attenuation_tends_to_low_loss(f, er, sigma):
    # the plane-wave attenuation in a conductor, Griffiths (1999), Introduction to
    # Electrodynamics, 3rd ed., eq. 9.126 [memory], reduces to (sigma/2) sqrt(mu/eps) as
    # sigma/(omega eps) -> 0 (ratio 1 - p^2/8) and never exceeds it
    low, exact, p = attenuation_db_per_m(frequency_mhz=f, permittivity=er,
                                         conductivity_ms_per_m=sigma)
    assert exact <= low * (1 + 1e-12)
    assert exact == pytest.approx(low, rel=max(p * p, 1e-12))


def test_velocity_given_instead_of_permittivity():
    plan = plan_survey(frequency_mhz=250, velocity=0.1, target_depth_m=2.0)
    assert plan.permittivity == pytest.approx((C_M_PER_NS / 0.1) ** 2)
    assert plan.wavelength_m == pytest.approx(0.4)
    assert plan.time_window_ns == pytest.approx(52.0)


def test_table_rows_carry_units_and_sources(dry_sand):
    rows = dry_sand.as_table()
    assert len(rows) == len(ROWS)
    for quantity, value, unit, source in rows:
        assert quantity and unit and source
        assert math.isfinite(value)
    assert ("wavelength in the ground", dry_sand.wavelength_m, "m", "v / f") in rows


@pytest.mark.parametrize("kwargs, where", [
    ({"frequency_mhz": 0}, "--frequency"),
    ({"frequency_mhz": -100}, "--frequency"),
    ({"frequency_mhz": math.nan}, "--frequency"),
    ({"frequency_mhz": "high"}, "--frequency"),
    ({"permittivity": 1.0}, "--permittivity"),
    ({"permittivity": None}, "--permittivity"),
    ({"velocity": 0.1}, "--velocity"),
    ({"permittivity": None, "velocity": 0.3}, "--velocity"),
    ({"conductivity_ms_per_m": -1}, "--conductivity"),
    ({"target_depth_m": 0}, "--target-depth"),
    ({"target_size_m": -0.5}, "--target-size"),
])
def test_impossible_inputs_refused(kwargs, where):
    args = {"frequency_mhz": 400, "permittivity": 4.0, "target_depth_m": 2.0, **kwargs}
    with pytest.raises(SettingsError) as err:
        plan_survey(**args)
    assert err.value.where == where


def test_unusual_frequency_warns():
    # common practice: GPR works from about 10 MHz to a few GHz
    plan = plan_survey(frequency_mhz=2, permittivity=4.0, target_depth_m=2.0)
    assert any("MHz" in w for w in plan.warnings)


@pytest.mark.parametrize("frequency", [4e8, 0.4, 2e5])
def test_a_frequency_in_hz_or_ghz_is_refused_by_name(frequency):
    with pytest.raises(SettingsError, match="give it in MHz") as info:
        plan_survey(frequency_mhz=frequency, permittivity=4.0, target_depth_m=2.0)
    assert info.value.where == "--frequency"
