"""Options of the public functions given something that is not a number (text, None, a list,
a dict, a bool, an object) or a number no survey has: one SettingsError naming the option,
never a TypeError, ValueError, KeyError or OverflowError from inside NumPy, and never a hang.

DEVELOPERS.md: every library error derives from one base exception. The values are drawn by
hypothesis; each call is bounded by an alarm so a loop over a huge option fails the test rather
than the run (find_diffractions once looped for ever on ``aperture=1e300``).
"""

from __future__ import annotations

import signal
import warnings

import matplotlib
import numpy as np
import pytest
import xarray as xr
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import slicer
from slicer.core.errors import SettingsError, SlicerError

matplotlib.use("Agg")

NOT_NUMBERS = st.one_of(st.text(max_size=8), st.none(), st.booleans(),
                        st.lists(st.floats(), min_size=2, max_size=3),
                        st.dictionaries(st.text(max_size=3), st.integers(), max_size=2),
                        st.builds(object))
ANYTHING = st.one_of(NOT_NUMBERS, st.floats(), st.integers(-10**6, 10**6),
                     st.sampled_from([1e300, -1e300, 1e-300]))


def _line():
    rng = np.random.default_rng(0)
    data = rng.normal(size=(40, 200)).astype(np.float32)
    data[:, 30] += 20.0  # a direct wave to pick
    return xr.DataArray(data, dims=("trace", "twt"), coords={
        "twt": ("twt", 0.1 * np.arange(200), {"units": "ns"}),
        "distance": ("trace", 0.05 * np.arange(40)), "x": ("trace", 0.05 * np.arange(40)),
        "y": ("trace", np.zeros(40))})


LINE = _line()
DATA = np.ones((2, 30, 30), np.float32)
DATA[:, 10:20, 10:20] = 4.0
CUBE = slicer.new_cube(DATA, west=0.0, north=1.5, cell=0.05, crs="EPSG:32633",
                       top=np.array([0.2, 0.3]), bottom=np.array([0.3, 0.4]))
WINDOWS = slicer.make_windows(0.0, 1.0, 0.1)
TABLE = slicer.reduce_to_windows(LINE, WINDOWS, velocity=0.1).assign_coords(
    line=("trace", np.zeros(40, int)))

CALLS = {
    "dewow window_ns": lambda b: slicer.dewow(LINE, window_ns=b),
    "apply_gain value": lambda b: slicer.apply_gain(LINE, value=b),
    "apply_gain kind": lambda b: slicer.apply_gain(LINE, kind=b),
    "correct_time_zero time_zero": lambda b: slicer.correct_time_zero(LINE, time_zero=b),
    "correct_time_zero threshold": lambda b: slicer.correct_time_zero(LINE, threshold=b),
    "make_windows top": lambda b: slicer.make_windows(b, 1.0, 0.1),
    "make_windows step": lambda b: slicer.make_windows(0.0, 1.0, b),
    "make_windows thickness": lambda b: slicer.make_windows(0.0, 1.0, 0.1, thickness=b),
    "reduce_to_windows windows": lambda b: slicer.reduce_to_windows(LINE, b, velocity=0.1),
    "migrate taper": lambda b: slicer.migrate(LINE, velocity=0.1, taper=b),
    "migrate velocity": lambda b: slicer.migrate(LINE, velocity=b),
    "find_diffractions aperture": lambda b: slicer.find_diffractions(LINE, aperture=b),
    "find_diffractions min_time": lambda b: slicer.find_diffractions(LINE, min_time=b),
    "find_diffractions velocities": lambda b: slicer.find_diffractions(LINE, velocities=b),
    "grid_slices cell": lambda b: slicer.grid_slices(TABLE, cell=b, progress=False),
    "grid_slices radius": lambda b: slicer.grid_slices(TABLE, cell=0.05, radius=b,
                                                       progress=False),
    "grid_slices table": lambda b: slicer.grid_slices(b, cell=0.05, progress=False),
    "section spacing": lambda b: slicer.section(CUBE, [(0.2, 0.5), (1.2, 1.2)], spacing=b),
    "outline threshold": lambda b: slicer.outline(CUBE, threshold=b),
    "outline min_area": lambda b: slicer.outline(CUBE, min_area=b),
    "outline cube": lambda b: slicer.outline(b),
    "fit_hyperbola max_radius": lambda b: slicer.fit_hyperbola(
        np.linspace(-1, 1, 21), 20 * np.sqrt(0.25 + np.linspace(-1, 1, 21) ** 2), radius=True,
        max_radius=b),
    "plot_slice index": lambda b: slicer.plot_slice(CUBE, b),
    "plot_slice vmin": lambda b: slicer.plot_slice(CUBE, 0, vmin=b),
    "to_depth_axis depths": lambda b: slicer.to_depth_axis(LINE, slicer.ConstantVelocity(0.1),
                                                           depths=b),
    "depth_error depth": lambda b: slicer.depth_error(slicer.ConstantVelocity(0.1, 0.01), b),
}


class _TooLong(Exception):
    pass


def _alarm(*_):
    raise _TooLong


@pytest.mark.parametrize("name", sorted(CALLS))
@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(value=ANYTHING)
def test_a_bad_option_is_one_settings_error(name, value):
    old = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(30)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            CALLS[name](value)
    except SlicerError:
        pass  # refused in one line, or (a good number) accepted: both are fine
    except _TooLong:
        pytest.fail(f"{name}={value!r:.40} ran for more than 30 s")
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


@pytest.mark.parametrize("name", sorted(CALLS))
def test_text_is_refused_naming_the_option(name):
    with pytest.raises(SettingsError) as info:
        CALLS[name]("abc")
    assert info.value.where  # the option (or the object) at fault is named


@pytest.mark.parametrize("name", ["grid_slices cell", "grid_slices radius", "outline min_area",
                                  "fit_hyperbola max_radius"])
@pytest.mark.parametrize("value", [4.494232837155791e305, 1.7e308])
def test_the_largest_floats_are_one_settings_error_or_a_result(name, value):
    # values the random search above found (or, for the cell and radius, a sweep of extremes
    # on 2026-12-04): each had overflowed into an OverflowError or a NumPy ValueError
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            CALLS[name](value)
        except SlicerError as exc:
            assert str(exc)  # one line naming the option
