"""Zigzag (bidirectional) shift: estimate and correction on analytic trace x slice tables.

The tables are built here from plane geometry, not from slicer's forward model: each trace
shows the ground at its true position, which lies ``d`` ahead of its recorded position along
its direction of travel (the lag of a survey wheel or trigger; common practice). A straight
feature therefore appears as a saw-tooth of amplitude ``2 d`` on lines walked both ways, and
the estimate must find ``d`` within one trace spacing (the target the issue sets).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import SettingsError
from slicer.gridding.zigzag import estimate_zigzag_shift, shift_along_lines

TRACE_STEP = 0.05


def _table(shift, *, n_lines=16, spacing=0.5, length=16.0, angle=60.0, noise=0.0,
           zigzag=True, seed=0, transpose=False):
    """Lines along x at y = k * spacing (every other one walked west), two features:
    a straight 'drain' through (4, 0) at ``angle`` degrees from the lines, and a second
    straight feature crossing near x = 11. Gaussian profile of width 0.15 m across each."""
    rng = np.random.default_rng(seed)
    t = math.radians(angle)
    xs, ys, ls, vs = [], [], [], []
    for k in range(n_lines):
        s = np.arange(0.0, length + 1e-9, TRACE_STEP)
        forward = not (zigzag and k % 2)
        along = s if forward else length - s
        across = np.full_like(s, k * spacing)
        true = along + (shift if forward else -shift)
        drain = np.exp(-(((true - 4) * math.sin(t) - across * math.cos(t)) / 0.15) ** 2)
        wall = np.exp(-((true - 11 - 0.3 * across) / 0.2) ** 2)
        v = np.column_stack([drain, wall, drain + 0.5 * wall])
        v = v + noise * rng.standard_normal(v.shape)
        px, py = (across, along) if transpose else (along, across)
        xs.append(px), ys.append(py), ls.append(np.full(s.size, k)), vs.append(v)
    return xr.DataArray(np.concatenate(vs), dims=("trace", "slice"),
                        coords={"x": ("trace", np.concatenate(xs), {"units": "m"}),
                                "y": ("trace", np.concatenate(ys), {"units": "m"}),
                                "line": ("trace", np.concatenate(ls))})


def _drain_positions(table):
    """Along-line position (x) of the drain's peak on each line, by a parabola through the
    three best traces (analytic: the Gaussian's log is a parabola)."""
    out = []
    for k in np.unique(table["line"].values):
        t = table.where(table["line"] == k, drop=True)
        x, v = t["x"].values, t.isel(slice=0).values
        order = np.argsort(x)
        x, v = x[order], v[order]
        i = int(np.argmax(v))
        y0, y1, y2 = np.log(v[i - 1:i + 2])
        out.append(x[i] + 0.5 * (y0 - y2) / (y0 - 2 * y1 + y2) * (x[1] - x[0]))
    return np.array(out)


@settings(max_examples=25, deadline=None)
@given(shift=st.floats(-0.4, 0.4), angle=st.floats(30.0, 90.0))
def test_noise_free_shift_is_found_whatever_the_feature_angle(shift, angle):
    # An oblique feature displaces neighbouring lines' patterns by spacing / tan(angle), with
    # the sign of the side; the two-sided combination must cancel it exactly.
    est = estimate_zigzag_shift(_table(shift, angle=angle))
    assert est.shift_m == pytest.approx(shift, abs=2e-3)
    assert est.lines >= 5 and est.pairs >= 10


@pytest.mark.parametrize("seed", range(4))
def test_a_015_m_lag_is_found_within_one_trace_spacing_in_noise(seed):
    # noise of 0.2 of the feature peak, per trace and slice
    est = estimate_zigzag_shift(_table(0.15, noise=0.2, seed=seed))
    assert abs(est.shift_m - 0.15) < TRACE_STEP
    assert est.spread_m < 0.1


def test_correcting_the_shift_straightens_a_straight_feature():
    lagged = _table(0.15)
    est = estimate_zigzag_shift(lagged)
    fixed = shift_along_lines(lagged, shift=est.shift_m)
    y = np.unique(lagged["y"].values)
    for table, worst in ((lagged, None), (fixed, 0.01)):
        peaks = _drain_positions(table)
        residual = peaks - np.polyval(np.polyfit(y, peaks, 1), y)
        if worst is None:  # before: a saw-tooth of +-d along the lines about the line
            assert np.abs(residual).max() > 0.1
        else:
            assert np.abs(residual).max() < worst


def test_lines_along_y_and_negative_shift():
    est = estimate_zigzag_shift(_table(-0.12, transpose=True))
    assert est.shift_m == pytest.approx(-0.12, abs=2e-3)


def test_a_survey_walked_one_way_is_refused_in_one_line():
    with pytest.raises(SettingsError, match="walked the other way") as info:
        estimate_zigzag_shift(_table(0.1, zigzag=False))
    assert info.value.where == "--zigzag-shift"


def test_a_survey_with_nothing_to_correlate_is_refused():
    flat = _table(0.1) * 0 + 1.0
    with pytest.raises(SettingsError, match="common pattern"):
        estimate_zigzag_shift(flat)


def test_a_shift_beyond_the_search_reach_is_not_reported_as_found():
    with pytest.raises(SettingsError, match="common pattern"):
        estimate_zigzag_shift(_table(0.8), max_shift=0.05)


@pytest.mark.parametrize("bad", [0.0, -1.0, math.nan])
def test_bad_max_shift(bad):
    with pytest.raises(SettingsError):
        estimate_zigzag_shift(_table(0.1), max_shift=bad)


def test_not_a_table():
    with pytest.raises(SettingsError, match="trace x slice"):
        estimate_zigzag_shift(xr.DataArray(np.zeros((3, 3)), dims=("a", "b")))


@settings(max_examples=30, deadline=None)
@given(shift=st.floats(-2.0, 2.0))
def test_shift_moves_each_trace_along_its_own_direction(shift):
    table = _table(0.0, n_lines=4, length=2.0)
    moved = shift_along_lines(table, shift=shift)
    dx = moved["x"].values - table["x"].values
    dy = moved["y"].values - table["y"].values
    forward = (table["line"].values % 2) == 0
    np.testing.assert_allclose(dx[forward], shift, atol=1e-12)
    np.testing.assert_allclose(dx[~forward], -shift, atol=1e-12)
    np.testing.assert_allclose(dy, 0, atol=1e-12)
    np.testing.assert_array_equal(moved.values, table.values)
    back = shift_along_lines(moved, shift=-shift)
    np.testing.assert_allclose(back["x"].values, table["x"].values, atol=1e-9)


def test_shift_must_be_finite():
    with pytest.raises(SettingsError):
        shift_along_lines(_table(0.0, n_lines=2, length=2.0), shift=math.inf)
