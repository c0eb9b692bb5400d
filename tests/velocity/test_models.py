"""Tests of slicer.velocity.models: Dix, layered and lateral velocity models, depth conversion
and depth errors."""

import math

import numpy as np
import pytest
import scipy.integrate
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError
from slicer.velocity.models import (
    ConstantVelocity,
    LateralVelocity,
    LayeredVelocity,
    depth_error,
    depth_of_time,
    time_of_depth,
    to_depth_axis,
    velocity_from_known_depth,
)

# ------------------------------------------------------------------------------------- Dix


def test_dix_worked_example():
    # Dix (1955), Geophysics 20:68-86, and check-values.md: layer 1 0.12 m/ns, 1.5 m thick
    # (t1 = 25 ns two-way); layer 2 0.08 m/ns, 1.0 m thick (t2 = 50 ns).
    t1, t2 = 2 * 1.5 / 0.12, 2 * 1.5 / 0.12 + 2 * 1.0 / 0.08
    assert (t1, t2) == pytest.approx((25.0, 50.0))
    # RMS velocity by its definition, V_rms^2 = sum v_i^2 dt_i / sum dt_i (Dix 1955)
    v_rms2 = math.sqrt((0.12**2 * t1 + 0.08**2 * (t2 - t1)) / t2)
    assert v_rms2 == pytest.approx(0.101980, abs=1e-6)
    model = LayeredVelocity.from_rms([25.0, 50.0], [0.12, 0.101980])
    assert model.velocity == pytest.approx((0.12, 0.0800), abs=1e-5)
    assert model.top_time == (0.0, 25.0)
    # true depth 2.5 m; V_rms t / 2 would put the reflector 2 % too deep, at 2.550 m
    assert depth_of_time(model, 50.0) == pytest.approx(2.5, abs=1e-3)
    assert 0.101980 * 50.0 / 2 == pytest.approx(2.550, abs=1e-3)


@pytest.mark.parametrize("times, rms, bad", [
    ([20.0, 40.0], [0.15, 0.05], "layer[1]"),   # negative under the root (check-values.md)
    ([20.0, 40.0], [0.15, 0.15 / math.sqrt(2)], "layer[1]"),  # zero under the root: v = 0
    ([20.0, 40.0], [0.10, 0.25], "layer[1]"),   # interval velocity 0.339 m/ns >= c
    ([30.0, 20.0], [0.10, 0.11], "layer[1]"),   # out of order
    ([0.0, 20.0], [0.10, 0.11], "layer[0]"),    # a reflection at time zero
    ([20.0, 40.0], [0.31, 0.11], "layer[0]"),   # an RMS velocity >= c
])
def test_dix_refuses_impossible_layers(times, rms, bad):
    with pytest.raises(SettingsError) as err:
        LayeredVelocity.from_rms(times, rms)
    assert err.value.where == bad


def test_dix_std_matches_monte_carlo():
    # linear propagation of independent RMS errors through Dix's equation, against sampling
    rng = np.random.default_rng(3)
    s = np.array([0.002, 0.003])
    model = LayeredVelocity.from_rms([25.0, 50.0], [0.12, 0.101980], s)
    vr = np.array([0.12, 0.101980]) + s * rng.standard_normal((40_000, 2))
    vint2 = np.sqrt((vr[:, 1] ** 2 * 50 - vr[:, 0] ** 2 * 25) / 25)
    assert model.velocity_std[0] == pytest.approx(0.002)
    assert model.velocity_std[1] == pytest.approx(vint2.std(), rel=0.05)


# --------------------------------------------------------------------------- layered curves

LAYERS = LayeredVelocity.by_depth([0.0, 0.8, 2.0], [0.11, 0.07, 0.13], [0.004, 0.003, 0.005])


def _slowness_time(depth):
    # two-way time by quadrature of the slowness, t = 2 int_0^d dz / v(z) (scipy reference)
    def slowness(z):
        return 1 / (0.11 if z < 0.8 else 0.07 if z < 2.0 else 0.13)
    return 2 * scipy.integrate.quad(slowness, 0, depth, points=[0.8, 2.0], limit=200)[0]


@pytest.mark.parametrize("depth", [0.0, 0.3, 0.8, 1.5, 2.0, 3.7])
def test_layered_time_of_depth_against_quadrature(depth):
    assert time_of_depth(LAYERS, depth) == pytest.approx(_slowness_time(depth), abs=1e-7)


def test_layered_depth_of_time_is_the_layer_sum():
    tops = np.array(LAYERS.top_time)
    assert tops == pytest.approx([0, 2 * 0.8 / 0.11, 2 * 0.8 / 0.11 + 2 * 1.2 / 0.07])
    assert LAYERS.top_depth == pytest.approx([0.0, 0.8, 2.0])
    t = np.linspace(0, 80, 161)
    thickness = np.diff(np.append(tops, np.inf))
    exact = sum(v * np.clip(t - t0, 0, dt) / 2
                for v, t0, dt in zip(LAYERS.velocity, tops, thickness, strict=True))
    np.testing.assert_allclose(depth_of_time(LAYERS, t), exact, atol=1e-12)
    np.testing.assert_allclose(time_of_depth(LAYERS, depth_of_time(LAYERS, t)), t, atol=1e-9)


def test_layered_by_time_equals_by_depth():
    again = LayeredVelocity.by_time(LAYERS.top_time, LAYERS.velocity, LAYERS.velocity_std)
    assert again == LAYERS


@pytest.mark.parametrize("tops, vels, bad", [
    ([0.0, 1.0, 0.5], [0.1, 0.1, 0.1], "layer[2]"),
    ([0.0, 1.0, 1.0], [0.1, 0.1, 0.1], "layer[2]"),
    ([0.2, 1.0], [0.1, 0.1], "layer[0]"),
    ([0.0, 1.0], [0.1, C_M_PER_NS], "layer[1]"),
    ([0.0, 1.0], [0.1, -0.1], "layer[1]"),
    ([0.0, 1.0], [0.1], "layer"),
])
def test_layered_refuses_bad_tables(tops, vels, bad):
    for build in (LayeredVelocity.by_depth, LayeredVelocity.by_time):
        with pytest.raises(SettingsError) as err:
            build(tops, vels)
        assert err.value.where == bad


layer_tables = st.lists(
    st.tuples(st.floats(0.03, 0.29), st.floats(0.05, 5.0), st.floats(0.0, 0.01)),
    min_size=1, max_size=5)


@settings(max_examples=60, deadline=None)
@given(layer_tables, st.lists(st.floats(-10, 300), min_size=2, max_size=30))
def test_depth_of_time_is_increasing_and_inverts(layers, times):
    v, thick, s = (list(c) for c in zip(*layers, strict=True))
    model = LayeredVelocity.by_depth(np.concatenate([[0], np.cumsum(thick[:-1])]), v, s)
    t = np.sort(times)
    d = depth_of_time(model, t)
    assert np.all(np.diff(d) >= 0)
    assert np.all(np.diff(d)[np.diff(t) > 1e-9] > 0)  # strictly, beyond rounding
    np.testing.assert_allclose(time_of_depth(model, d), t, atol=1e-9 * (1 + np.abs(t).max()))


# ----------------------------------------------------------------------- lateral velocities

POINTS = LateralVelocity([0.0, 10.0, 0.0, 10.0], [0.0, 0.0, 8.0, 8.0],
                         [0.08, 0.12, 0.10, 0.09], [0.004, 0.006, 0.005, 0.002],
                         length_scale=5.0)


def test_lateral_reproduces_the_measurements():
    v, s = POINTS.velocity_at(np.array(POINTS.x), np.array(POINTS.y))
    np.testing.assert_allclose(v, POINTS.velocity, rtol=1e-12)
    np.testing.assert_allclose(s, POINTS.velocity_std, rtol=1e-12)


def test_lateral_is_smooth_and_bounded_between_points():
    x = np.linspace(0.0, 10.0, 1001)
    v, _ = POINTS.velocity_at(x, np.zeros_like(x))
    assert v.min() >= min(POINTS.velocity) and v.max() <= max(POINTS.velocity)
    assert v[0] == pytest.approx(0.08) and v[-1] == pytest.approx(0.12)
    slope = np.diff(v) / np.diff(x)
    assert np.all(slope >= 0)  # from the slow point to the fast one without overshoot
    assert slope.max() < 5 * (0.12 - 0.08) / 10.0  # no jump: a few times the mean gradient
    assert np.abs(np.diff(v, 2)).max() < 1e-5  # and no kink


def test_lateral_is_constant_beyond_the_data():
    v, s = POINTS.velocity_at([-1e4, -2e4, 1e4], [-1e4, -1e4, -1e4])
    np.testing.assert_allclose(v, [0.08, 0.08, 0.12])
    np.testing.assert_allclose(s, [0.004, 0.004, 0.006])


def test_lateral_needs_positions_and_refuses_bad_points():
    with pytest.raises(SettingsError, match="x and y"):
        depth_of_time(POINTS, 10.0)
    with pytest.raises(SettingsError) as err:
        LateralVelocity([0.0, 0.0], [1.0, 1.0], [0.1, 0.1], length_scale=1.0)
    assert err.value.where == "point[1]"
    with pytest.raises(SettingsError) as err:
        LateralVelocity([0.0], [1.0], [0.1], length_scale=0.0)
    assert err.value.where == "length_scale"
    with pytest.raises(SettingsError) as err:
        LateralVelocity([0.0, 1.0], [1.0, 1.0], [0.1, 0.4], length_scale=1.0)
    assert err.value.where == "point[1]"


def test_lateral_depth_of_time_uses_local_velocity():
    d = depth_of_time(POINTS, 40.0, x=np.array(POINTS.x), y=np.array(POINTS.y))
    np.testing.assert_allclose(d, np.array(POINTS.velocity) * 20.0)


# ------------------------------------------------------------------------ depth conversion

DT = 0.1


def make_line(times, *, x=None, n=801):
    """One trace per reflector time: a Gaussian pulse (sigma 0.5 ns) on a 0-80 ns record."""
    twt = DT * np.arange(n)
    samples = np.exp(-((twt - np.asarray(times)[:, None]) ** 2) / (2 * 0.5**2))
    x = np.arange(len(times), dtype=float) if x is None else np.asarray(x, dtype=float)
    return xr.DataArray(
        samples.astype(np.float32), dims=("trace", "twt"), name="amplitude",
        coords={"twt": ("twt", twt, {"units": "ns"}), "trace": np.arange(len(times)),
                "x": ("trace", x, {"units": "m"}), "y": ("trace", np.zeros(len(times)))},
        attrs={"line": "L1", "history": "time zero 3.000 ns", "units": "V"})


def test_to_depth_axis_puts_the_reflector_at_its_depth():
    true = np.array([0.5, 1.73, 2.6])
    line = make_line([_slowness_time(z) for z in true])
    depths = np.arange(0.0, 3.0, 0.01)
    out = to_depth_axis(line, LAYERS, depths=depths)
    assert out.dims == ("trace", "depth") and out.dtype == np.float32
    assert out["depth"].attrs["units"] == "m" and out["depth"].attrs["positive"] == "down"
    assert "depth conversion" in out.attrs["history"] and out.name == "amplitude"
    np.testing.assert_allclose(out["x"], line["x"])
    peaks = depths[np.argmax(out.values, axis=1)]
    assert np.all(np.abs(peaks - true) <= 0.01)
    # each value is numpy.interp of the trace at the time of its depth (numpy reference)
    t = time_of_depth(LAYERS, depths)
    for i in range(line.sizes["trace"]):
        ref = np.interp(t, line["twt"].values, line.values[i].astype(float))
        np.testing.assert_allclose(out.values[i], ref, atol=1e-6)


def test_to_depth_axis_is_nan_below_the_record():
    out = to_depth_axis(make_line([20.0]), ConstantVelocity(0.1), depths=[1.0, 3.9, 4.0, 4.5])
    assert np.isfinite(out.values[0, :3]).all() and np.isnan(out.values[0, 3])
    assert out.attrs["velocity"] == 0.1


def test_to_depth_axis_lateral_model_per_trace():
    x = np.array([0.0, 3.0, 7.0, 10.0])
    v, _ = POINTS.velocity_at(x, np.zeros(4))
    line = make_line(2 * 1.2 / v, x=x)  # one reflector at 1.2 m, seen at different times
    depths = np.arange(0.0, 3.5, 0.005)
    out = to_depth_axis(line, POINTS, depths=depths)
    assert np.all(np.abs(depths[np.nanargmax(out.values, axis=1)] - 1.2) <= 0.005)


@pytest.mark.parametrize("model", [LAYERS, POINTS, ConstantVelocity(0.1)],
                         ids=["layered", "lateral", "constant"])
def test_to_depth_axis_dask_equals_eager(model):
    line = make_line(np.linspace(10, 60, 7), x=np.linspace(0, 10, 7))
    depths = np.arange(0.0, 3.0, 0.02)
    eager = to_depth_axis(line, model, depths=depths)
    lazy = to_depth_axis(line.chunk({"trace": 3}), model, depths=depths)
    assert lazy.chunks is not None
    np.testing.assert_array_equal(lazy.compute().values, eager.values)


def test_to_depth_axis_refusals():
    line = make_line([20.0])
    for bad in ([], [1.0, 0.5], [-0.1, 0.2], [[0.1, 0.2]], [0.0, np.nan]):
        with pytest.raises(SettingsError, match="depths"):
            to_depth_axis(line, LAYERS, depths=bad)
    with pytest.raises(SettingsError, match="x and y"):
        to_depth_axis(line.drop_vars("x"), POINTS, depths=[0.5])


# --------------------------------------------------------------------------- uncertainties

def test_depth_error_constant_and_permittivity():
    # sigma_d = d sigma_v / v for d = v t / 2 with exact t (first-order error propagation)
    model = ConstantVelocity(0.1, 0.005)
    np.testing.assert_allclose(depth_error(model, [0.0, 1.0, 2.0]), [0.0, 0.05, 0.1])
    # v = c / sqrt(er) (Davis & Annan 1989, Geophys. Prosp. 37:531-551, Table 1): er 4 -> 0.1499
    er_model = ConstantVelocity.from_permittivity(4.0, 0.4)
    assert er_model.velocity == pytest.approx(0.1499, abs=1e-4)
    slope = (C_M_PER_NS / math.sqrt(4.0 + 1e-4) - C_M_PER_NS / math.sqrt(4.0 - 1e-4)) / 2e-4
    assert er_model.velocity_std == pytest.approx(abs(slope) * 0.4, rel=1e-6)


def test_depth_error_layered_sum_and_monte_carlo():
    model = LayeredVelocity.by_depth([0.0, 1.5], [0.12, 0.08], [0.006, 0.004])
    # in layer 1 only: d sigma / v; at 2.5 m: sqrt((s1 dt1 / 2)^2 + (s2 dt2 / 2)^2), 25 ns each
    assert depth_error(model, 1.0) == pytest.approx(1.0 * 0.006 / 0.12)
    assert depth_error(model, 2.5) == pytest.approx(math.hypot(0.006 * 12.5, 0.004 * 12.5))
    rng = np.random.default_rng(5)
    v = np.array([0.12, 0.08]) + np.array([0.006, 0.004]) * rng.standard_normal((40_000, 2))
    assert depth_error(model, 2.5) == pytest.approx((v @ [12.5, 12.5]).std(), rel=0.03)
    with pytest.raises(SettingsError, match="depth"):
        depth_error(model, -1.0)


def test_velocity_from_known_depth():
    # v = 2 d / t (ASTM D6432-19, section 5) with errors of a quotient added in quadrature
    # (Taylor 1997, An Introduction to Error Analysis, 2nd ed., section 3.6)
    model = velocity_from_known_depth(1.0, 20.0, depth_std=0.02, twt_std=0.2)
    assert model.velocity == pytest.approx(0.1)
    assert model.velocity_std == pytest.approx(0.1 * math.hypot(0.02, 0.01))
    assert depth_of_time(model, 20.0) == pytest.approx(1.0)
    assert velocity_from_known_depth(2.998, 40.0).velocity_std == 0.0
    for args, where in [((0.0, 20.0), "depth_m"), ((1.0, -2.0), "twt_ns"),
                        ((10.0, 20.0), "twt_ns"), ((1.0, math.nan), "twt_ns")]:
        with pytest.raises(SettingsError) as err:
            velocity_from_known_depth(*args)
        assert err.value.where == where
    with pytest.raises(SettingsError):
        velocity_from_known_depth(1.0, 20.0, depth_std=-0.1)
    with pytest.raises(SettingsError, match="speed of light"):
        velocity_from_known_depth(10.0, 20.0)


