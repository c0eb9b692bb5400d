"""Polarity: the sign of a reflection relative to the direct wave, on analytic traces.

Reflection amplitudes come from the normal-incidence Fresnel coefficient
``r = (n1 - n2) / (n1 + n2)``, ``n = sqrt(relative permittivity)`` (any electromagnetics text,
e.g. Jackson, Classical Electrodynamics, sect. 7.3), and ``r = -1`` for a perfect conductor;
wavelets are Ricker (Ricker 1953). Neither comes from slicer's forward model.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal
import xarray as xr
from hypothesis import given
from hypothesis import strategies as st

from slicer.core.errors import SettingsError
from slicer.gridding.windows import Windows, window_signs
from slicer.processing.polarity import direct_wave_polarity, leading_lobe_signs_core

DT, F = 0.1, 0.5  # ns, GHz


def ricker(t):
    a = (math.pi * F * t) ** 2
    return (1 - 2 * a) * np.exp(-a)


def fresnel(eps1, eps2):
    n1, n2 = math.sqrt(eps1), math.sqrt(eps2)
    return (n1 - n2) / (n1 + n2)


def env(line):
    """Envelope by scipy.signal.hilbert (the reference analytic signal)."""
    return line.copy(data=np.abs(scipy.signal.hilbert(line.values, axis=-1)))


def line_with(reflections, *, source=1.0, n_traces=5):
    """Traces with a direct wave at twt 0 of sign ``source`` and reflections ``(ns, r)``."""
    t = DT * np.arange(-20, 500)
    trace = source * ricker(t)
    for ns, r in reflections:
        trace = trace + source * r * 0.3 * ricker(t - ns)
    return xr.DataArray(np.tile(trace, (n_traces, 1)).astype(np.float32), dims=("trace", "twt"),
                        coords={"twt": ("twt", t, {"units": "ns"})})


@pytest.mark.parametrize("source", [1.0, -1.0])
def test_void_and_metal_in_wet_ground_have_opposite_signs(source):
    ground = 9.0  # relative permittivity, v = 0.1 m/ns
    void, metal = fresnel(ground, 1.0), -1.0  # +0.5: the direct wave's sign; -1: opposite
    line = line_with([(15.0, void), (30.0, metal)], source=source)
    polarity = direct_wave_polarity(line, period_ns=1 / F)
    assert polarity == int(source)
    windows = Windows("twt", np.array([13.0, 28.0]), np.array([17.0, 32.0]))
    signs = window_signs(line, env(line), windows) * polarity
    np.testing.assert_array_equal(signs[:, 0], np.sign(void))
    np.testing.assert_array_equal(signs[:, 1], np.sign(metal))


def test_depth_windows_use_the_velocity():
    line = line_with([(20.0, -1.0)])  # 1.0 m at 0.1 m/ns
    windows = Windows("depth", np.array([0.9]), np.array([1.1]))
    assert (window_signs(line, env(line), windows, velocity=0.1) == -1).all()


def test_windows_beyond_the_record_are_nan_and_thin_windows_take_the_nearest_sample():
    line = line_with([(20.0, 1.0)])
    twt = line["twt"].values
    out = leading_lobe_signs_core(line.values, env(line).values, axis_values=twt,
                                  top=np.array([19.99, 60.0]), bottom=np.array([20.01, 70.0]))
    assert (out[:, 0] == 1).all() and np.isnan(out[:, 1]).all()


@given(st.lists(st.tuples(st.floats(5, 45), st.sampled_from([-1.0, -0.5, 0.25, 0.6])),
                min_size=1, max_size=1),
       st.sampled_from([1.0, -1.0]))
def test_sign_of_any_single_reflection(reflections, source):
    (ns, r), = reflections
    line = line_with([(ns, r)], source=source)
    p = direct_wave_polarity(line, period_ns=1 / F)
    windows = Windows("twt", np.array([ns - 1.0]), np.array([ns + 1.0]))
    assert (window_signs(line, env(line), windows) * p == np.sign(r)).all()


def test_a_record_without_time_zero_or_direct_wave_is_refused():
    line = line_with([])
    with pytest.raises(SettingsError):
        direct_wave_polarity(line.assign_coords(twt=line["twt"] + 100), period_ns=2.0)
    with pytest.raises(SettingsError, match="silent"):
        direct_wave_polarity(line * 0, period_ns=2.0)


def test_a_void_whose_bottom_echo_is_stronger_reads_as_a_void():
    # an air-filled pipe in wet ground: top reflection +0.5 (void polarity), then 1 ns later
    # its bottom, air back to ground, of the opposite sign and here stronger (-0.8): the
    # leading lobe is the top's
    t = DT * np.arange(-20, 500)
    trace = ricker(t) + 0.3 * (0.5 * ricker(t - 20.0) - 0.8 * ricker(t - 21.0))
    line = xr.DataArray(np.tile(trace, (3, 1)).astype(np.float32), dims=("trace", "twt"),
                        coords={"twt": ("twt", t, {"units": "ns"})})
    strongest = np.sign(line.values[0, np.argmax(np.abs(line.values[0] * (t > 15)))])
    assert strongest == -1  # the plain strongest-sample rule would read metal
    windows = Windows("twt", np.array([19.0]), np.array([22.0]))
    assert (window_signs(line, env(line), windows) == 1).all()


@pytest.mark.parametrize("source", [1.0, -1.0])
def test_a_mixed_phase_wavelet_keeps_opposite_signs(source):
    # a two-lobed (derivative-like) wavelet, +1 then -0.8, as a full-wave record's: metal and
    # void still read opposite, with the direct wave as reference
    def doublet(t):
        return -np.gradient(ricker(t), t) / 2.0

    t = DT * np.arange(-20, 500)
    trace = source * (doublet(t) + 0.3 * (-1.0 * doublet(t - 15.0) + 0.5 * doublet(t - 30.0)))
    line = xr.DataArray(np.tile(trace, (3, 1)).astype(np.float32), dims=("trace", "twt"),
                        coords={"twt": ("twt", t, {"units": "ns"})})
    p = direct_wave_polarity(line, period_ns=1 / F)
    windows = Windows("twt", np.array([14.0, 29.0]), np.array([16.0, 31.0]))
    signs = window_signs(line, env(line), windows) * p
    assert (signs[:, 0] == -1).all() and (signs[:, 1] == 1).all()
