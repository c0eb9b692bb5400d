"""Header positions that repeat in runs (a receiver slower than the radar) are spread between
the fixes; a few repeats (a pause) are kept."""

import numpy as np
import pytest
import xarray as xr
from hypothesis import given
from hypothesis import strategies as st

from slicer.core.errors import SlicerWarning
from slicer.geometry.positions import positions_from_headers
from slicer.geometry.repeats import stairs_spread


@given(every=st.integers(2, 10), n=st.integers(12, 400), speed=st.floats(0.01, 0.2),
       heading=st.floats(0, 2 * np.pi))
def test_stairs_of_a_steady_walk_are_spread_back_onto_it(every, n, speed, heading):
    # a cart at constant speed (analytic: positions linear in the trace index) whose receiver
    # updates every `every` traces and holds its fix in between: interpolating between the
    # fixes, and beyond the last at the same rate, gives every trace its own place back
    true_x = 530000.0 + speed * np.cos(heading) * np.arange(n)
    true_y = 180000.0 + speed * np.sin(heading) * np.arange(n)
    held = (np.arange(n) // every) * every
    x, y, repeats = stairs_spread(true_x[held], true_y[held])
    assert repeats == n - 1 - (n - 1) // every
    np.testing.assert_allclose(x, true_x, rtol=0, atol=1e-6)
    np.testing.assert_allclose(y, true_y, rtol=0, atol=1e-6)


def test_a_short_pause_is_kept_as_recorded():
    x = np.concatenate([np.arange(50) * 0.05, np.full(3, 49 * 0.05), 2.5 + np.arange(47) * 0.05])
    y = np.zeros_like(x)
    sx, sy, repeats = stairs_spread(x, y)
    assert repeats == 3  # 3 % of the steps: under REPEAT_SHARE, a cart that stood still
    assert sx is x and sy is y


def test_headers_in_stairs_place_the_line_and_say_so():
    n = 161
    held = (np.arange(n) // 4) * 4
    line = xr.DataArray(np.zeros((n, 8), np.float32), dims=("trace", "twt"),
                        coords={"twt": ("twt", 0.1 * np.arange(8), {"units": "ns"}),
                                "trace": np.arange(n), "header_x": ("trace", 0.05 * held),
                                "header_y": ("trace", np.zeros(n))},
                        attrs={"source": "L000.sgy"})
    with pytest.warns(SlicerWarning, match=r"L000\.sgy: 120 of 161 traces repeat.*spread"):
        placed = positions_from_headers(line)
    np.testing.assert_allclose(placed["x"].values, 0.05 * np.arange(n), atol=1e-9)
    np.testing.assert_allclose(np.diff(placed["distance"].values), 0.05, atol=1e-9)


def test_a_crew_standing_still_at_the_end_stays_where_it_stood():
    # every trace its own fix for 1000 traces 2 cm apart, then 150 traces standing still:
    # 13 % repeats, but one long run is a pause, not stairs; nothing moves past the end
    x = np.concatenate([0.02 * np.arange(1000), np.full(150, 0.02 * 999)])
    sx, _, repeats = stairs_spread(x, np.zeros_like(x))
    assert repeats == 150 and sx is x


def test_stairs_ending_in_a_pause_go_one_update_past_the_last_fix_only():
    # fixes every 4 traces, 0.08 m apart (2 cm a trace), then the crew stands for 200 traces
    # at the last fix: the last stair is extrapolated by one run (3 traces), the pause held
    n = 800
    held = (np.arange(n) // 4) * 4
    x = np.concatenate([0.02 * held, np.full(200, 0.02 * held[-1])])
    sx, _, _ = stairs_spread(x, np.zeros_like(x))
    np.testing.assert_allclose(sx[:n], 0.02 * np.arange(n), atol=1e-9)
    np.testing.assert_allclose(sx[n:], 0.02 * (n - 1), atol=1e-9)
