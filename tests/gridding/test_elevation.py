"""Elevation windows and the per-trace window means (slicer.gridding.elevation)."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import quad

from slicer.core.errors import SettingsError
from slicer.gridding.elevation import (
    depth_limits,
    elevation_limits,
    make_elevation_windows,
    window_means_varying,
)
from slicer.gridding.windows import make_windows


def test_windows_count_down_from_the_top():
    # hand-computed: 12.0 down to 11.5 every 0.1 m is five windows, the first 12.0-11.9
    w = make_elevation_windows(12.0, 11.5, 0.1)
    assert w.axis == "elevation" and len(w) == 5
    np.testing.assert_allclose(w.top, [12.0, 11.9, 11.8, 11.7, 11.6], atol=1e-12)
    np.testing.assert_allclose(w.bottom, [11.9, 11.8, 11.7, 11.6, 11.5], atol=1e-12)
    assert w.units == "m"
    assert "thickness 0.1 m" in w.describe()


def test_thickness_below_the_step():
    # hand-computed: windows 0.2 m thick every 0.5 m from 3.0 m, the last ending above 2.0 m
    w = make_elevation_windows(3.0, 2.0, 0.5, thickness=0.2)
    np.testing.assert_allclose(w.top, [3.0, 2.5], atol=1e-12)
    np.testing.assert_allclose(w.top - w.bottom, 0.2, atol=1e-12)


@pytest.mark.parametrize("text", [(1.0, 2.0, 0.1), (1.0, 1.0, 0.1), (2.0, 1.0, 0.0),
                                  (2.0, 1.0, -0.1)])
def test_bad_ranges_are_refused_naming_the_option(text):
    with pytest.raises(SettingsError) as e:
        make_elevation_windows(*text)
    assert e.value.where == "--elevations"


def test_depth_limits_follow_each_trace_ground():
    w = make_elevation_windows(10.0, 9.0, 0.5)  # [10, 9.5], [9.5, 9]
    top, bottom = depth_limits(w, np.array([10.2, 9.8]))
    # hand-computed: depth = ground - elevation; a window reaching above the ground has none
    np.testing.assert_allclose(top[0], [0.2, 0.7])
    np.testing.assert_allclose(bottom[0], [0.7, 1.2])
    assert np.isnan(top[1, 0]) and np.isnan(bottom[1, 0])
    np.testing.assert_allclose([top[1, 1], bottom[1, 1]], [0.3, 0.8])


def test_time_limits_use_the_bistatic_path():
    w = make_elevation_windows(5.0, 4.0, 1.0)
    lo, hi = elevation_limits(w, np.array([5.5]), velocity=0.1, separation=0.2)
    # t = 2 sqrt(d^2 + (s/2)^2) / v (straight bistatic ray, common practice), hand-computed
    np.testing.assert_allclose(lo[0, 0], 2 * np.hypot(0.5, 0.1) / 0.1)
    np.testing.assert_allclose(hi[0, 0], 2 * np.hypot(1.5, 0.1) / 0.1)


def test_time_limits_need_one_velocity():
    w = make_elevation_windows(5.0, 4.0, 1.0)
    with pytest.raises(SettingsError):
        elevation_limits(w, np.array([5.5]), velocity=None)


def _quad_mean(trace, axis, lo, hi):
    """Reference: the mean of the linear interpolant by scipy quadrature, piece by piece
    between samples (each piece is smooth)."""
    edges = np.concatenate([[lo], axis[(axis > lo) & (axis < hi)], [hi]])
    value = sum(quad(lambda t: np.interp(t, axis, trace), a, b)[0]
                for a, b in zip(edges[:-1], edges[1:], strict=True))
    return value / (hi - lo)


def test_means_match_quadrature_of_the_linear_trace():
    rng = np.random.default_rng(3)
    axis = np.arange(64) * 0.1
    samples = rng.normal(size=(3, 64))
    top = np.array([[0.05, 1.23], [2.0, np.nan], [0.0, 6.2]])
    bottom = np.array([[0.31, 3.9], [2.07, np.nan], [6.3, 6.3]])
    got = window_means_varying(samples, axis_values=axis, top=top, bottom=bottom)
    for i, j in [(0, 0), (0, 1), (1, 0), (2, 0), (2, 1)]:
        np.testing.assert_allclose(got[i, j], _quad_mean(samples[i], axis, top[i, j],
                                                         bottom[i, j]), rtol=2e-5, atol=1e-6)
    assert np.isnan(got[1, 1])


def test_windows_beyond_the_record_have_no_value():
    axis = np.arange(10) * 1.0
    got = window_means_varying(np.ones((1, 10)), axis_values=axis,
                               top=np.array([[-0.5, 8.0, 2.0]]), bottom=np.array([[1.0, 9.5, 3.0]]))
    assert np.isnan(got[0, 0]) and np.isnan(got[0, 1])
    assert got[0, 2] == pytest.approx(1.0)


@settings(max_examples=60, deadline=None)
@given(shift=st.floats(0.0, 2.0), n=st.integers(3, 6))
def test_flat_ground_gives_the_depth_windows(shift, n):
    # On level ground at elevation z, the window [z - a, z - b] is the depth window [a, b]
    # (elevation = ground - depth, the definition); the per-trace means then equal the
    # shared-window means of the same depth windows.
    from slicer.gridding.windows import _window_means_core
    rng = np.random.default_rng(n)
    axis = np.arange(200) * 0.1
    samples = rng.normal(size=(n, 200)).astype(np.float32)
    depth = make_windows(0.0, 1.0, 0.1)
    ground = 50.0 + shift
    elev = make_elevation_windows(ground, ground - 1.0, 0.1)
    lo, hi = elevation_limits(elev, np.full(n, ground), velocity=0.1)
    got = window_means_varying(samples, axis_values=axis, top=lo, bottom=hi)
    want = _window_means_core(samples, twt=axis, t_top=2 * depth.top / 0.1,
                              t_bottom=2 * depth.bottom / 0.1)
    np.testing.assert_allclose(got, want, rtol=1e-4, atol=1e-5)
