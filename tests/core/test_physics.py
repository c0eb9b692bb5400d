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


@pytest.mark.parametrize("bad", [0, -0.1, C_M_PER_NS, 0.3, 1.0, math.nan, math.inf, "fast"])
def test_impossible_velocity_refused(bad):
    with pytest.raises(SettingsError, match="velocity"):
        check_velocity(bad)


@pytest.mark.parametrize("bad", [1.0, 0.5, -4, math.nan, "wet"])
def test_impossible_permittivity_refused(bad):
    with pytest.raises(SettingsError, match="permittivity"):
        velocity_from_permittivity(bad)


@given(st.floats(0.001, 0.299), st.floats(0, 500))
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
