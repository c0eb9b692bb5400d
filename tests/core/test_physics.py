"""Tests of slicer.core.physics: velocity and permittivity, two-way time and depth."""

import math

import numpy as np
import pytest
import xarray as xr
from hypothesis import given
from hypothesis import strategies as st

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError
from slicer.core.physics import (
    check_velocity,
    depth_from_time,
    permittivity_from_velocity,
    time_from_depth,
    to_depth,
    velocity_from_permittivity,
)


# Davis & Annan (1989), Geophysical Prospecting 37:531-551, Table 1: v = c / sqrt(er).
# Tabulated velocities are given to two or three figures, hence the tolerance.
@pytest.mark.parametrize("er, v_table", [(1, 0.30), (4, 0.1499), (9, 0.0999), (25, 0.0600),
                                         (80, 0.0335)])
def test_velocity_from_permittivity_matches_davis_annan_table(er, v_table):
    if er == 1:  # air: the table's 0.30 m/ns is c itself, which ground must stay below
        assert C_M_PER_NS == pytest.approx(v_table, abs=0.001)
        with pytest.raises(SettingsError):
            velocity_from_permittivity(er)
        return
    assert velocity_from_permittivity(er) == pytest.approx(v_table, abs=0.0002)


# Davis & Annan (1989) Table 1 [ranges recalled from memory]: dry sand er 3-5 -> ~0.15 m/ns,
# saturated sand 20-30 -> ~0.06 m/ns, fresh water 80 -> 0.033 m/ns.
@pytest.mark.parametrize("er, lo, hi", [(3, 0.15, 0.18), (5, 0.12, 0.15), (20, 0.06, 0.07),
                                        (30, 0.05, 0.06), (80, 0.033, 0.034)])
def test_velocity_ranges_of_common_ground(er, lo, hi):
    assert lo - 0.002 <= velocity_from_permittivity(er) <= hi + 0.002


def test_depth_from_two_way_time_astm_example():
    # ASTM D6432-19, section 5: d = v t / 2; 40 ns in dry sand (er = 4) -> 2.998 m.
    v = velocity_from_permittivity(4)
    assert depth_from_time(40.0, velocity=v) == pytest.approx(2.998, abs=0.001)
    assert time_from_depth(2.998, velocity=v) == pytest.approx(40.0, abs=0.01)


@pytest.mark.parametrize("bad", [0, -0.1, C_M_PER_NS, 0.3, 1.0, math.nan, math.inf, "fast",
                                 1e-6, 0.0099])
def test_impossible_velocity_refused(bad):
    # below 0.01 m/ns: relative permittivity 900, ten times water's 81 (c / 9 = 0.0333 m/ns,
    # the slowest natural ground; from memory): a unit slip, not a ground
    with pytest.raises(SettingsError, match="velocity"):
        check_velocity(bad)


@pytest.mark.parametrize("bad", [1.0, 0.5, -4, math.nan, "wet"])
def test_impossible_permittivity_refused(bad):
    with pytest.raises(SettingsError, match="permittivity"):
        velocity_from_permittivity(bad)


@given(st.floats(0.01, 0.299), st.floats(0, 500))
def test_time_depth_round_trip(v, t):
    assert time_from_depth(depth_from_time(t, velocity=v), velocity=v) == pytest.approx(t)


@given(st.floats(1.001, 100))
def test_permittivity_round_trip(er):
    assert permittivity_from_velocity(velocity_from_permittivity(er)) == pytest.approx(er)


def test_to_depth_relabels_axis():
    line = xr.DataArray(np.ones((3, 5), np.float32), dims=("trace", "twt"),
                        coords={"twt": np.arange(5) * 2.0}, attrs={"line": "a"})
    out = to_depth(line, velocity=0.1)
    assert out.dims == ("trace", "depth")
    np.testing.assert_allclose(out["depth"].values, np.arange(5) * 0.1)
    assert out["depth"].attrs["positive"] == "down"
    assert out.attrs["velocity"] == 0.1 and out.attrs["line"] == "a"


# --- antenna separation: straight rays below the antennas' midpoint (Pythagoras; the usual
# common-offset geometry, e.g. Annan 2009 in Jol (ed.), "Ground Penetrating Radar: Theory and
# Applications", ch. 1 - cited from memory). Check values computed here by hand.

def test_bistatic_time_hand_value():
    from slicer.core.physics import time_from_depth
    # d = 1.0 m, s = 0.5 m, v = 0.1 m/ns: t = 2 sqrt(1 + 0.25^2) / 0.1 = 20.615528 ns
    assert float(time_from_depth(1.0, velocity=0.1, separation=0.5)) == pytest.approx(
        20.615528, abs=1e-6)
    # the direct ground wave, d = 0: t = s / v = 5 ns
    assert float(time_from_depth(0.0, velocity=0.1, separation=0.5)) == pytest.approx(5.0)


def test_bistatic_depth_hand_value():
    from slicer.core.physics import depth_from_time
    # t = 20 ns, v = 0.1 m/ns, s = 0.5 m: d = sqrt(1.0^2 - 0.25^2) = 0.968246 m (not 1.0)
    assert float(depth_from_time(20.0, velocity=0.1, separation=0.5)) == pytest.approx(
        0.968246, abs=1e-6)
    # before the ground wave: depth 0
    assert float(depth_from_time(3.0, velocity=0.1, separation=0.5)) == 0.0


@given(d=st.floats(0, 20), s=st.floats(0, 2), v=st.floats(0.03, 0.299))
def test_bistatic_round_trip(d, s, v):
    from slicer.core.physics import depth_from_time, time_from_depth
    t = time_from_depth(d, velocity=v, separation=s)
    # d = sqrt((v t / 2)^2 - (s / 2)^2): near d = 0 the difference of squares cancels and the
    # root amplifies the rounding of t, to a few sqrt(machine epsilon) x s / 2 (< 3e-8 s)
    assert float(depth_from_time(t, velocity=v, separation=s)) == pytest.approx(
        d, abs=1e-9 + 3e-8 * s)


@pytest.mark.parametrize("bad", [-0.1, math.inf, math.nan, 12.0, "wide"])
def test_bad_separation_refused(bad):
    from slicer.core.physics import check_separation
    with pytest.raises(SettingsError) as info:
        check_separation(bad)
    assert info.value.where == "--antenna-separation"


def test_picked_time_zero_is_the_direct_wave_minus_separation_over_c():
    import xarray as xr

    from slicer.core.conventions import C_M_PER_NS
    from slicer.processing.steps import correct_time_zero
    t = 0.05 * np.arange(400)
    a = (math.pi * 0.5 * (t - 5.0)) ** 2  # a Ricker wavelet peaking at 5.0 ns
    line = xr.DataArray(np.tile((1 - 2 * a) * np.exp(-a), (4, 1)), dims=("trace", "twt"),
                        coords={"twt": t})
    together = correct_time_zero(line)
    apart = correct_time_zero(line, separation=0.3)
    assert together.attrs["time_zero_ns"] == pytest.approx(5.0, abs=0.01)
    # 0.3 m / 0.2998 m/ns = 1.0007 ns earlier
    assert apart.attrs["time_zero_ns"] == pytest.approx(5.0 - 0.3 / C_M_PER_NS, abs=0.01)
    assert together.attrs["time_zero_ns"] - apart.attrs["time_zero_ns"] == pytest.approx(
        1.000692, abs=1e-6)
