"""Tests of slicer.gridding.windows: slice windows in depth or time and the mean of a trace
over each."""

import re

import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import SettingsError
from slicer.gridding.windows import (
    MAX_WINDOWS,
    Windows,
    make_windows,
    parse_range,
    reduce_to_windows,
)


def linear_line(a, b, n=200, dt=0.1, t_start=-2.0, traces=3):
    twt = t_start + dt * np.arange(n)
    data = np.tile(a + b * twt, (traces, 1)).astype(np.float32)
    return xr.DataArray(data, dims=("trace", "twt"), coords={"twt": twt})


def test_contract_range_gives_24_slices():
    w = make_windows(*parse_range("0:2.4:0.1", option="--depths"))
    assert len(w) == 24
    np.testing.assert_allclose(w.top, np.arange(24) * 0.1, atol=1e-12)
    np.testing.assert_allclose(w.bottom, np.arange(1, 25) * 0.1, atol=1e-12)
    assert w.axis == "depth" and w.units == "m"


def test_thickness_other_than_step():
    w = make_windows(0.0, 1.0, 0.1, thickness=0.3)
    assert len(w) == 8  # tops 0.0 ... 0.7, the last ending at 1.0
    np.testing.assert_allclose(w.bottom - w.top, 0.3)
    assert w.bottom[-1] == pytest.approx(1.0)


@pytest.mark.parametrize("text", ["0:2", "a:b:c", "0:2:0.1:4", "0:nan:0.1", "", "0:inf:1"])
def test_bad_range_text(text):
    with pytest.raises(SettingsError, match="--depths"):
        parse_range(text, option="--depths")


@pytest.mark.parametrize("top, bottom, step, thickness", [
    (0, 2, 0, None), (0, 2, -0.1, None), (2, 1, 0.1, None), (1, 1, 0.1, None),
    (-0.5, 1, 0.1, None), (0, 1, 0.1, 2.0), (0, 1, 0.1, -0.1)])
def test_bad_windows(top, bottom, step, thickness):
    with pytest.raises(SettingsError):
        make_windows(top, bottom, step, thickness=thickness)


def test_depth_windows_to_time():
    # t = 2 d / v (ASTM D6432-19 section 5): 0.5-0.6 m at 0.1 m/ns -> 10-12 ns
    w = Windows("depth", np.array([0.5]), np.array([0.6]))
    top, bottom = w.times(0.1)
    assert top[0] == pytest.approx(10.0) and bottom[0] == pytest.approx(12.0)
    with pytest.raises(SettingsError, match="velocity"):
        w.times(None)


@settings(max_examples=60, deadline=None)
@given(st.floats(-3, 3), st.floats(-2, 2), st.floats(0, 13), st.floats(0.001, 4))
def test_window_mean_of_a_linear_trace_is_exact(a, b, top, thick):
    # The mean of a + b t over [t1, t2] is a + b (t1 + t2) / 2 (elementary calculus), for any
    # window, aligned with samples or not, thinner or thicker than the sample interval.
    line = linear_line(a, b)
    w = Windows("twt", np.array([top]), np.array([top + thick]))
    out = reduce_to_windows(line, w).values
    expected = a + b * (2 * top + thick) / 2
    np.testing.assert_allclose(out, expected, atol=1e-4 * (1 + abs(a) + 20 * abs(b)))


def test_window_mean_of_a_sampled_curve_converges():
    twt = np.arange(0, 30, 0.05)
    line = xr.DataArray(np.sin(twt)[None, :].astype(np.float32), dims=("trace", "twt"),
                        coords={"twt": twt})
    w = Windows("twt", np.array([1.0, 4.03]), np.array([2.5, 9.71]))
    got = reduce_to_windows(line, w).values[0]
    exact = (np.cos(w.top) - np.cos(w.bottom)) / (w.bottom - w.top)
    np.testing.assert_allclose(got, exact, atol=2e-4)


def test_windows_the_record_does_not_reach_are_nan():
    line = linear_line(1.0, 0.0)  # record -2 .. 17.9 ns
    w = Windows("twt", np.array([0.0, 17.0, 18.0]), np.array([1.0, 17.9, 19.0]))
    out = reduce_to_windows(line, w).values[0]
    assert np.isfinite(out[:2]).all() and np.isnan(out[2])


def test_reduce_runs_on_dask_and_keeps_coordinates():
    line = linear_line(0.0, 1.0, traces=10).assign_coords(x=("trace", np.arange(10.0)))
    w = make_windows(0.0, 1.0, 0.25, axis="depth")
    eager = reduce_to_windows(line, w, velocity=0.1)
    lazy = reduce_to_windows(line.chunk({"trace": 3}), w, velocity=0.1)
    np.testing.assert_allclose(lazy.compute().values, eager.values)
    assert eager.dims == ("trace", "slice")
    np.testing.assert_allclose(eager["top"].values, w.top)
    assert "x" in eager.coords


# --- the number of windows is bounded before any array is made ---------------------------------


@pytest.mark.parametrize("top, bottom, step, thickness", [
    (0.0, 1.0, 1e-9, None),      # a billion slices: 3 GB in 9 s before the bound
    (0.0, 1e300, 0.1, None),     # 1e301 slices: numpy's "maximum allowed size exceeded"
    (0.0, 1e300, 1e-300, None),  # a count that is not even a finite float
    (0.0, 1.0, 1e-4, 0.5),       # thick windows every 0.1 mm
])
def test_too_many_windows_are_refused_with_a_step_that_works(top, bottom, step, thickness):
    with pytest.raises(SettingsError, match="--depths: .* slices, more than the 4096") as info:
        make_windows(top, bottom, step, thickness=thickness)
    message = str(info.value)
    assert "\n" not in message and not re.search(r"\d{13}", message)
    least = float(re.search(r"a step of at least (\S+) m", message).group(1))
    assert least > step
    assert len(make_windows(top, bottom, least, thickness=thickness)) <= MAX_WINDOWS


def test_window_count_limit_is_exact():
    assert len(make_windows(0.0, 4.096, 0.001)) == MAX_WINDOWS
    with pytest.raises(SettingsError, match="gives 4097 slices"):
        make_windows(0.0, 4.097, 0.001)


@settings(max_examples=200, deadline=None)
@given(st.floats(0, 1e300), st.floats(1e-300, 1e300), st.floats(1e-300, 1e300),
       st.one_of(st.none(), st.floats(1e-300, 1e300)))
def test_any_range_gives_bounded_windows_or_a_settings_error(top, span, step, thickness):
    try:
        w = make_windows(top, top + span, step, thickness=thickness, axis="twt")
    except SettingsError as exc:
        assert "\n" not in str(exc) and not re.search(r"\d{13}", str(exc))
        return
    assert 1 <= len(w) <= MAX_WINDOWS
    assert np.all(w.bottom <= top + span + 1e-9 * span + 1e-300)


def test_thickness_a_rounding_error_above_the_range_gives_one_window():
    # found by the property above: the range 2**53-ish long, the thickness 3 ns more (within
    # the 1e-9 tolerance), which once gave no window at all
    w = make_windows(0.0, 9007199200697795.0, 1.0, thickness=9007199200697798.0, axis="twt")
    assert len(w) == 1 and w.top[0] == 0.0


@settings(max_examples=80, deadline=None)
@given(n=st.integers(2, 300), dt=st.floats(0.01, 2.0), start=st.floats(-50, 50),
       seed=st.integers(0, 2**16), dtype=st.sampled_from([np.float32, np.float64]))
def test_window_means_equal_the_trapezoid_integral_of_the_linear_trace(n, dt, start, seed,
                                                                       dtype):
    # Reference: numpy.interp's linear trace at the window's ends and the samples inside it,
    # integrated by numpy.trapezoid (exact for a piecewise-linear function), over the length.
    from slicer.gridding.windows import _window_means_core
    rng = np.random.default_rng(seed)
    twt = start + dt * np.arange(n)
    samples = (rng.standard_normal((3, n)) * 10 + 5).astype(dtype)
    ends = np.sort(rng.uniform(twt[0], twt[-1], size=(6, 2)), axis=1)
    ends[:, 1] = np.maximum(ends[:, 1], ends[:, 0] + 1e-3 * dt)  # no empty window
    ends = ends[ends[:, 1] <= twt[-1]]
    got = _window_means_core(samples, twt=twt, t_top=ends[:, 0], t_bottom=ends[:, 1])
    for j, (a, b) in enumerate(ends):
        inside = twt[(twt > a) & (twt < b)]
        t = np.concatenate([[a], inside, [b]])
        for i in range(3):
            want = np.trapezoid(np.interp(t, twt, samples[i].astype(np.float64)), t) / (b - a)
            tol = (2e-6 if dtype == np.float32 else 1e-12) * np.abs(samples[i]).max() + 1e-12
            assert abs(got[i, j] - want) <= tol + 1e-6 * abs(want), (got[i, j], want)
