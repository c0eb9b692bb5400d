"""Tests of slicer.pipeline.line_tasks: the per-line task (read, place, fused chain, windows)
equals the public step-by-step xarray functions."""

import numpy as np
import pytest
import xarray as xr

import slicer
from slicer.geometry.survey import load_line, survey_info
from slicer.gridding.windows import make_windows, reduce_to_windows
from slicer.pipeline.line_tasks import LineJob, reduce_line
from slicer.processing.steps import (
    apply_gain,
    correct_time_zero,
    dewow,
    envelope,
    remove_background,
)


@pytest.mark.parametrize("options", [
    {"depths": "0:2.4:0.1", "velocity": 0.1, "dewow": 1.5, "background": "median",
     "migrate": "off"},
    {"times": "0:40:2.5", "dewow": "off", "background": "mean", "gain": "exp:0.2"},
    {"depths": "0.05:1.9:0.15", "thickness": 0.07, "velocity": 0.09, "gain": "none", "dewow": 2.2,
     "migrate": "off"}])
def test_line_task_equals_the_single_steps(small_survey, options):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, **options)
    info = survey_info(settings.lines, sample_interval_ns=0.1)
    windows = settings.requested_windows
    velocity = settings.resolved_velocity
    job = LineJob(1, settings.lines[1], settings, windows, velocity, 0.1, None)
    got = reduce_line(job)

    line = correct_time_zero(load_line(settings.lines[1], settings, sample_interval_ns=0.1),
                             time_zero=3.0)
    if settings.dewow != "off":
        line = dewow(line, window_ns=float(settings.dewow))
    if settings.background != "off":
        line = remove_background(line, method=settings.background)
    if settings.gain_curve is not None:
        line = apply_gain(line, kind=settings.gain_curve[0], value=settings.gain_curve[1])
    env = envelope(line)
    expected = reduce_to_windows(env, windows, velocity=velocity).values
    assert got["values"].shape == (info.lines[1].n_traces, len(windows))
    np.testing.assert_allclose(got["values"], expected, rtol=1e-5,
                               atol=1e-6 * np.nanmax(np.abs(expected)))
    assert got["history"] == env.attrs["history"]
    np.testing.assert_array_equal(got["x"], line["x"].values)


def test_window_values_equal_the_labelled_table():
    from slicer.gridding.windows import window_values
    rng = np.random.default_rng(4)
    twt = -1.0 + 0.1 * np.arange(300)
    line = xr.DataArray(rng.normal(size=(5, 300)).astype(np.float32), dims=("trace", "twt"),
                        coords={"twt": twt})
    w = make_windows(0.0, 1.2, 0.1, axis="depth")
    np.testing.assert_array_equal(window_values(line, w, velocity=0.1),
                                  reduce_to_windows(line, w, velocity=0.1).values)
