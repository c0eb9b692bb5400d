"""Tests of slicer.synthetic.forward: the NumPy forward model."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.conventions import C_M_PER_NS
from slicer.synthetic import forward as F

DT = 0.1  # ns
T = DT * np.arange(1024)


# --- travel times ------------------------------------------------------------------------------

def test_point_target_hyperbola_matches_worked_values():
    # Yilmaz (2001), Seismic Data Analysis, SEG, ch. 4: t(x) = (2/v) sqrt(z0^2 + (x - x0)^2);
    # v = 0.1 m/ns, z0 = 1 m (worked values in check-values.md, "Diffraction hyperbola").
    t = F.point_travel_time([0.0, 0.5, 1.0, 2.0], depth=1.0, velocity=0.1)
    np.testing.assert_allclose(t, [20.000, 22.361, 28.284, 44.721], atol=1e-3)


def test_round_target_matches_worked_values():
    # Shihab & Al-Nuaimy (2005), Subsurface Sensing Technologies and Applications 6:151-166:
    # t(x) = (2/v)[sqrt((z0 + R)^2 + x^2) - R]; z0 = 1 m to the top, R = 0.1 m, v = 0.1 m/ns.
    t = F.point_travel_time([0.0, 1.0, 2.0], depth=1.0, velocity=0.1, radius=0.1)
    np.testing.assert_allclose(t, [20.000, 27.732, 43.651], atol=1e-3)


def test_layer_time_is_depth_from_time_inverted():
    # ASTM D6432-19, section 5: d = v t / 2; er = 4 (v = c / 2), 40 ns -> 2.998 m.
    v = C_M_PER_NS / 2.0
    assert F.layer_travel_time(2.998, v) == pytest.approx(40.0, abs=0.01)


def test_line_target_uses_nearest_point_of_segment():
    # A pipe along x from 0 to 10 m, 1 m deep: across it the Yilmaz (2001) hyperbola again,
    # beyond its end the distance to the end point (same worked values, v = 0.1 m/ns).
    pipe = F.LineTarget(0.0, 0.0, 10.0, 0.0, 1.0)
    px = np.array([5.0, 5.0, 10.0, 11.0, -2.0])
    py = np.array([0.0, 0.5, 0.0, 0.0, 0.0])
    t, _ = F.arrivals(px, py, [pipe], velocity=0.1)
    np.testing.assert_allclose(t[:, 0], [20.000, 22.361, 20.000, 28.284, 44.721], atol=1e-3)


def test_plate_is_specular_above_and_diffracts_at_its_edge():
    # Over the plate the travel time is the flat-reflector 2d/v (ASTM D6432-19, section 5);
    # outside it the nearest edge acts as a diffractor (Yilmaz 2001 worked values).
    plate = F.PlateTarget(0.0, 0.0, 4.0, 3.0, 1.0)
    px = np.array([0.0, 2.0, 4.0, 5.0, 2.0, 6.0])
    py = np.array([0.0, 1.5, 3.0, 1.0, -0.5, 1.0])
    t, _ = F.arrivals(px, py, [plate], velocity=0.1)
    np.testing.assert_allclose(t[:, 0], [20.0, 20.0, 20.0, 28.284, 22.361, 44.721], atol=1e-3)


def test_distance_to_segment_of_zero_length_is_point_distance():
    d = F.distance_to_segment(3.0, 4.0, 0.0, 0.0, 0.0, 0.0)
    assert d == pytest.approx(5.0)  # 3-4-5 triangle


@given(offset=st.floats(0.0, 20.0), depth=st.floats(0.01, 10.0), radius=st.floats(0.0, 1.0),
       velocity=st.floats(0.03, C_M_PER_NS))
def test_travel_time_symmetric_and_minimal_at_apex(offset, depth, radius, velocity):
    apex = F.point_travel_time(0.0, depth=depth, velocity=velocity, radius=radius)
    x0 = 100.0
    px = np.array([x0 - offset, x0, x0 + offset])
    t, _ = F.arrivals(px, np.zeros(3), [F.PointTarget(x0, 0.0, depth, radius=radius)],
                      velocity=velocity)
    assert t[0, 0] == pytest.approx(t[2, 0], rel=1e-12)
    assert t[1, 0] == pytest.approx(apex, rel=1e-12)
    assert np.all(t[:, 0] >= apex * (1 - 1e-12))
    # the apex time of a round target is the two-way time to its top: d = v t / 2 (ASTM D6432)
    assert apex == pytest.approx(2 * depth / velocity, rel=1e-12)


# --- amplitudes --------------------------------------------------------------------------------

def test_attenuation_in_decibels_over_the_two_way_path():
    # A decibel is 20 log10 of an amplitude ratio (common practice): 10 dB/m over a two-way
    # path of 2 m is -20 dB, a factor 0.1.
    lossless = F.reflection_amplitude(1.0, 1.0, attenuation_db_per_m=0.0)
    lossy = F.reflection_amplitude(1.0, 1.0, attenuation_db_per_m=10.0)
    assert lossy / lossless == pytest.approx(0.1, rel=1e-12)


def test_spreading_and_pattern():
    # geometric spreading 1/r (common practice): twice the range, half the amplitude
    assert F.reflection_amplitude(2.0, 1.0) / F.reflection_amplitude(1.0, 1.0) == 0.5
    # cos(theta)^n pattern: 60 degrees from vertical, n = 2 -> 0.25
    assert F.reflection_amplitude(1.0, 0.5, pattern_exponent=2.0) == pytest.approx(0.25)


def test_hyperbola_tails_fade():
    px = np.linspace(0.0, 3.0, 31)
    _, a = F.arrivals(px, np.zeros_like(px), [F.PointTarget(0.0, 0.0, 1.0)], velocity=0.1,
                      attenuation_db_per_m=2.0)
    assert np.all(np.diff(a[:, 0]) < 0)


@settings(max_examples=50)
@given(offset=st.floats(0.0, 50.0), depth=st.floats(1e-3, 20.0), radius=st.floats(0.0, 2.0),
       attenuation=st.floats(0.0, 100.0), exponent=st.floats(0.0, 8.0),
       kind=st.sampled_from(["point", "line", "plate", "layer"]))
def test_amplitude_never_nan(offset, depth, radius, attenuation, exponent, kind):
    targets = {"point": [F.PointTarget(0.0, 0.0, depth, radius=radius)],
               "line": [F.LineTarget(0.0, 0.0, 0.0, 1.0, depth)],
               "plate": [F.PlateTarget(0.0, 0.0, 1.0, 1.0, depth)], "layer": []}[kind]
    layers = [F.Layer(depth, 0.5)] if kind == "layer" else []
    px = np.array([0.0, offset, -offset, 0.5])
    t, a = F.arrivals(px, np.full(4, 0.5), targets, layers, velocity=0.1,
                      attenuation_db_per_m=attenuation, pattern_exponent=exponent)
    assert t.shape == a.shape == (4, 1)
    assert np.all(np.isfinite(t)) and np.all(np.isfinite(a)) and np.all(a >= 0)


# --- trace components --------------------------------------------------------------------------

@pytest.mark.parametrize("kind", F.WAVELETS)
def test_windowed_rendering_equals_the_full_sum(kind):
    rng = np.random.default_rng(1)
    times = rng.uniform(-5.0, 110.0, size=(7, 5))  # some before, some after the record
    amps = rng.normal(size=(7, 5))
    full = np.einsum("tr,trs->ts", amps,
                     F.wavelet(T[None, None, :] - times[..., None], kind=kind, frequency_ghz=0.4))
    fast = F.render_reflections(T, times, amps, kind=kind, frequency_ghz=0.4)
    np.testing.assert_allclose(fast, full, atol=1e-6)


def _raw(n_traces=5, *, noise=0.0, seed=0, times=None, amps=None, wow=0.3, ringing=0.1):
    times = np.zeros((n_traces, 0)) if times is None else times
    amps = np.zeros_like(times) if amps is None else amps
    return F.synthesize(T[:512], times, amps, kind="ricker", frequency_ghz=0.4, time_zero_ns=3.0,
                        direct_amplitude=1.0, ringing_amplitude=ringing, wow_amplitude=wow,
                        noise=noise, rng=np.random.default_rng(seed))


def test_direct_wave_main_peak_is_time_zero():
    # DEVELOPERS.md glossary: time zero is the direct wave's main peak; ringing and wow must
    # not move it by a sample.
    traces = _raw()
    assert traces.dtype == np.float32
    assert np.all(np.argmax(traces, axis=1) == round(3.0 / DT))


def test_ringing_is_the_same_on_every_trace_and_wow_is_not():
    still = _raw(wow=0.0)
    np.testing.assert_array_equal(still, np.broadcast_to(still[0], still.shape))
    direct = F.direct_wave(T[:512], time_zero_ns=3.0, amplitude=1.0, kind="ricker",
                           frequency_ghz=0.4)
    assert np.abs(still[0] - direct).max() > 0.05  # the ringing (amplitude 0.1) is there
    np.testing.assert_allclose(still[0, :30], direct[:30], atol=1e-6)  # and only after t0
    wobbly = _raw(wow=0.3)
    assert np.ptp(wobbly[:, -1]) > 0.01


def test_wow_is_low_frequency():
    w = F.wow(T, 20, amplitude=1.0, rng=np.random.default_rng(3))
    # Hann taper so that the jump between the record's ends does not leak to high frequencies
    taper = np.hanning(T.size)
    power = np.abs(np.fft.rfft((w - w.mean(axis=1, keepdims=True)) * taper, axis=1)) ** 2
    freqs = np.fft.rfftfreq(T.size, DT)
    # a tenth of the antenna frequency and up holds well under 1 % of the wow's energy
    assert power[:, freqs > 0.04].sum() < 0.01 * power.sum()


def test_noise_is_seeded():
    np.testing.assert_array_equal(_raw(noise=0.01, seed=4), _raw(noise=0.01, seed=4))
    assert np.any(_raw(noise=0.01, seed=4) != _raw(noise=0.01, seed=5))
    residual = _raw(noise=0.01, seed=4) - _raw(noise=0.0, seed=4)
    assert np.std(residual) == pytest.approx(0.01, rel=0.1)


@pytest.mark.parametrize("frequency_mhz", [250.0, 400.0, 2000.0])
def test_ringing_lasts_the_same_number_of_periods_at_any_frequency(frequency_mhz):
    # decay over two antenna periods: 1/e^5 (0.7 %) of its envelope is left ten periods on,
    # whatever the antenna (a fixed 5 ns had outlasted a 2 GHz pulse tenfold)
    from slicer.synthetic import Ground, PlannedLine, Radar, simulate_line
    period = 1000.0 / frequency_mhz
    dt = period / 25
    radar = Radar(frequency_mhz=frequency_mhz, sample_interval_ns=dt, samples=400,
                  time_zero_ns=2 * period, direct_amplitude=0.0, ringing_amplitude=1.0,
                  wow_amplitude=0.0, noise=0.0, seed=0)
    trace = simulate_line(Ground(velocity=0.1), radar, PlannedLine("L", 0, 0, 1, 0, 3))[0]
    t = trace["twt"].values
    late = np.abs(trace.values[t > 12 * period]).max()
    assert late < 0.01 * np.abs(trace.values).max()
    assert np.abs(trace.values[(t > 3 * period) & (t < 4 * period)]).max() > 0.05
