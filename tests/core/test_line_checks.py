"""A line that steps cannot read time from is refused in one SettingsError naming the step,
where it had given quiet wrong answers (sample numbers taken for nanoseconds, a reversed
record migrated, a frequency read along the wrong axis).

The expected values come from the line's own construction: a Ricker wavelet (Ricker 1953,
Geophysics 18) whose peak frequency is known.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from slicer.core.errors import SettingsError, SlicerError
from slicer.core.line_checks import checked_line
from slicer.core.physics import to_depth
from slicer.gridding.windows import make_windows, reduce_to_windows
from slicer.processing.migration import migrate
from slicer.processing.steps import (
    apply_gain,
    correct_time_zero,
    dewow,
    dominant_frequency,
    envelope,
    pick_time_zero,
    remove_background,
)

DT = 0.1


def line(n_traces=12, n=300, f=0.4):
    t = DT * np.arange(n)
    a = (np.pi * f * (t - 5.0)) ** 2
    trace = (1 - 2 * a) * np.exp(-a)
    rng = np.random.default_rng(1)
    data = (trace + 0.01 * rng.normal(size=(n_traces, n))).astype(np.float32)
    return xr.DataArray(data, dims=("trace", "twt"),
                        coords={"twt": ("twt", t, {"units": "ns"}),
                                "distance": ("trace", 0.05 * np.arange(n_traces))},
                        attrs={"line": "L1", "history": ""})


STEPS = {
    "dominant_frequency": dominant_frequency,
    "pick_time_zero": pick_time_zero,
    "correct_time_zero": lambda x: correct_time_zero(x, time_zero=1.0),
    "dewow": lambda x: dewow(x, window_ns=3.0),
    "remove_background": remove_background,
    "apply_gain": apply_gain,
    "envelope": envelope,
    "migrate": lambda x: migrate(x, velocity=0.1),
    "to_depth": lambda x: to_depth(x, velocity=0.1),
}


@pytest.mark.parametrize("name", sorted(STEPS))
@pytest.mark.parametrize(("spoil", "match"), [
    (lambda x: x.drop_vars("twt"), "needs a 'twt' dim with a coordinate"),
    (lambda x: x.rename(twt="time"), "needs a 'twt' dim"),
    (lambda x: x.isel(twt=slice(None, None, -1)), "must increase in even steps"),
    (lambda x: x.assign_coords(twt=("twt", x["twt"].values ** 1.1, {"units": "ns"})),
     "must increase in even steps"),
    (lambda x: x.assign_coords(twt=("twt", x["twt"].values, {"units": "ms"})), "in 'ms'"),
    (lambda x: x.isel(twt=slice(0, 1)), "at least two samples"),
    (lambda x: x.values, "takes a line: an xarray.DataArray"),
    (lambda x: x.to_dataset(name="amplitude"), "not a Dataset"),
])
def test_a_line_steps_cannot_read_time_from_is_refused(name, spoil, match):
    with pytest.raises(SettingsError, match=match) as info:
        STEPS[name](spoil(line()))
    assert isinstance(info.value, SlicerError) and name in str(info.value)


def test_the_frequency_is_read_along_twt_whatever_the_order_of_dims():
    # the wavelet's peak frequency, 0.4 GHz (to the spectrum's resolution, 1 / 30 ns)
    assert dominant_frequency(line()) == pytest.approx(0.4, abs=1 / 30)
    assert dominant_frequency(line().transpose()) == dominant_frequency(line())
    assert pick_time_zero(line().transpose()) == pick_time_zero(line())
    assert checked_line(line().transpose(), step="s").dims == ("trace", "twt")


def test_steps_across_traces_need_a_trace_dim():
    one = line().isel(trace=0)
    for step in (remove_background, pick_time_zero):
        with pytest.raises(SettingsError, match="needs a 'trace' dim"):
            step(one)
    assert envelope(one).dims == ("twt",)  # trace by trace: one trace will do


def test_windows_on_the_wrong_axis_are_refused():
    with pytest.raises(SettingsError, match="'depth' \\(m\\) or 'twt' \\(ns\\), not 'banana'"):
        make_windows(0, 1, 0.1, axis="banana")
    in_depth = to_depth(envelope(line()), velocity=0.1)
    with pytest.raises(SettingsError, match="twt windows cannot be cut from a line in depth"):
        reduce_to_windows(in_depth, make_windows(0, 20, 2, axis="twt"))
    got = reduce_to_windows(in_depth, make_windows(0, 1, 0.5))
    assert got["top"].attrs["units"] == "m" and got.sizes["slice"] == 2
