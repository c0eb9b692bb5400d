"""Tests of slicer.processing.steps: time zero, dewow, background removal, gain, envelope and
the fused chain."""


import numpy as np
import pytest
import scipy.signal
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import SettingsError
from slicer.processing.steps import (
    apply_gain,
    correct_time_zero,
    dewow,
    dominant_frequency,
    envelope,
    gain_curve,
    pick_time_zero,
    remove_background,
)

DT = 0.1  # ns


def ricker(t, f):
    """Ricker wavelet, peak 1 at t = 0 (f in GHz, t in ns); Ricker (1953), Geophysics 18."""
    a = (np.pi * f * t) ** 2
    return (1 - 2 * a) * np.exp(-a)


def make_line(samples, dt=DT, t0=0.0):
    samples = np.atleast_2d(samples).astype(np.float32)
    twt = t0 + dt * np.arange(samples.shape[-1])
    return xr.DataArray(samples, dims=("trace", "twt"),
                        coords={"twt": ("twt", twt, {"units": "ns"})},
                        attrs={"line": "test", "sample_interval_ns": dt, "time_zero_ns": 0.0,
                               "history": ""})


# Taner, Koehler & Sheriff (1979), Geophysics 44:1041-1063: the envelope of
# exp(-(t-tc)^2/2s^2) cos(2 pi f0 (t-tc) + phi) is the Gaussian when f0 s is large (Bedrosian's
# theorem). Worked numbers (dt 0.1 ns, 1024 samples, f0 0.4 GHz, s 2.5 ns) give a maximum
# error of 3.3e-10 for any phase in float64; our float32 output adds ~1e-7.
@pytest.mark.parametrize("phi", [0.0, 0.7, np.pi / 2, 2.5])
def test_envelope_of_gaussian_modulated_cosine(phi):
    t = DT * np.arange(1024)
    tc, s, f0 = 51.2, 2.5, 0.4
    gauss = np.exp(-((t - tc) ** 2) / (2 * s**2))
    env = envelope(make_line(gauss * np.cos(2 * np.pi * f0 * (t - tc) + phi))).values[0]
    assert np.max(np.abs(env - gauss)) < 1e-6


def test_envelope_matches_scipy_hilbert_for_a_tapered_trace():
    # scipy.signal.hilbert is the reference analytic signal; our zero padding only changes the
    # result where the trace does not vanish at its ends.
    rng = np.random.default_rng(1)
    x = rng.normal(size=512) * scipy.signal.windows.tukey(512, 0.5)
    x[:20] = x[-20:] = 0
    ours = envelope(make_line(x)).values[0]
    ref = np.abs(scipy.signal.hilbert(x))
    assert np.max(np.abs(ours - ref)) < 0.02 * np.max(ref)
    assert np.corrcoef(ours, ref)[0, 1] > 0.999


def test_envelope_runs_the_same_on_dask():
    rng = np.random.default_rng(2)
    line = make_line(rng.normal(size=(40, 256)))
    eager = envelope(line)
    lazy = envelope(line.chunk({"trace": 7}))
    assert lazy.chunks is not None
    np.testing.assert_allclose(lazy.compute().values, eager.values, rtol=1e-6)
    assert "envelope" in eager.attrs["history"]


def direct_wave_line(t0, n_traces=30, n=512, wow=0.0, seed=0):
    rng = np.random.default_rng(seed)
    t = DT * np.arange(n)
    trace = ricker(t - t0, 0.4) + 0.2 * ricker(t - t0 - 20, 0.4)
    drift = wow * np.exp(-t / 15.0)
    data = trace + drift + 0.01 * rng.normal(size=(n_traces, n))
    return make_line(data)


@pytest.mark.parametrize("t0", [3.0, 3.04, 7.55])
def test_time_zero_pick_finds_the_direct_wave_peak(t0):
    # The synthetic direct wave is a Ricker whose main peak is at t0 (the project's convention).
    assert pick_time_zero(direct_wave_line(t0, wow=0.5)) == pytest.approx(t0, abs=0.03)


def gaussian_derivative(t, f):
    """First derivative of a Gaussian, two lobes of equal size and opposite sign about t = 0,
    normalised to a peak of 1; f (GHz) its peak frequency, sigma = 1 / (2 pi f) (common
    practice for a radar source pulse)."""
    sigma = 1.0 / (2.0 * np.pi * f)
    return -(t / sigma) * np.exp(0.5 - 0.5 * (t / sigma) ** 2)


@pytest.mark.parametrize("second", [0.97, 1.0, 1.03])
def test_a_two_lobed_direct_wave_gives_every_line_the_same_lobe(second):
    # Lines whose second lobe is a little smaller or larger than the first (noise, coupling)
    # must pick the same lobe: the first (its peak at -sigma), not flip half a period.
    f, t0 = 0.5, 8.0
    sigma = 1.0 / (2.0 * np.pi * f)
    t = DT * np.arange(400)
    wave = gaussian_derivative(t - t0, f)
    wave = np.where(t > t0, second * wave, wave)  # the later lobe scaled
    rng = np.random.default_rng(4)
    line = make_line(wave + 0.002 * rng.normal(size=(20, t.size)))
    assert pick_time_zero(line) == pytest.approx(t0 - sigma, abs=0.05)


def test_an_earlier_weaker_arrival_is_named_in_a_warning():
    # The direct wave is the earliest arrival (common practice). At 0.3 of a later flat
    # reflector it is below the default threshold (0.5), so the reflector is picked and every
    # depth would come out too shallow: a warning names the earlier arrival; a lower
    # threshold picks it, and then nothing is said.
    import warnings

    from slicer.core.errors import SlicerWarning
    t = DT * np.arange(500)
    rng = np.random.default_rng(6)
    trace = 0.3 * ricker(t - 10.0, 0.5) + 0.9 * ricker(t - 16.0, 0.5)
    line = make_line(trace + 0.002 * rng.normal(size=(20, t.size)))
    with pytest.warns(SlicerWarning, match=r"picked at 16\.0\d ns, but an earlier arrival at "
                                           r"(9\.9|10\.0|10\.1)\d ns reaches 0\.3"):
        assert pick_time_zero(line) == pytest.approx(16.0, abs=0.05)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert pick_time_zero(line, threshold=0.2) == pytest.approx(10.0, abs=0.05)
        assert pick_time_zero(direct_wave_line(3.0)) == pytest.approx(3.0, abs=0.03)


def test_correct_time_zero_shifts_axis_only():
    line = direct_wave_line(3.0)
    out = correct_time_zero(line, time_zero=3.0)
    np.testing.assert_allclose(out["twt"].values, line["twt"].values - 3.0)
    np.testing.assert_array_equal(out.values, line.values)
    assert out.attrs["time_zero_ns"] == 3.0
    auto = correct_time_zero(line, time_zero="auto")
    assert abs(auto.attrs["time_zero_ns"] - 3.0) < 0.03
    assert "picked" in auto.attrs["history"]


@pytest.mark.parametrize("bad", [-1.0, 60.0, float("nan"), "late"])
def test_time_zero_outside_record_refused(bad):
    with pytest.raises(SettingsError, match="time zero|time-zero"):
        correct_time_zero(direct_wave_line(3.0), time_zero=bad)


def test_time_zero_on_silent_line_refused():
    with pytest.raises(SettingsError, match="silent"):
        pick_time_zero(make_line(np.zeros((3, 100))))


def test_dewow_removes_drift_and_keeps_wavelet():
    t = DT * np.arange(512)
    drift = 2.0 * np.exp(-t / 15.0) + 0.5
    wavelet = ricker(t - 25, 0.4)
    out = dewow(make_line(wavelet + drift), window_ns=4.0).values[0]
    # residual drift away from the wavelet: small
    far = np.abs(t - 25) > 6
    assert np.sqrt(np.mean(out[far] ** 2)) < 0.05 * np.sqrt(np.mean(drift[far] ** 2))
    # the wavelet keeps most of its energy (common practice: window of 1-2 periods)
    near = ~far
    assert np.sum(out[near] ** 2) > 0.8 * np.sum(wavelet[near] ** 2)


def test_dewow_default_window_follows_dominant_frequency():
    line = direct_wave_line(3.0, wow=1.0)
    expected = int(round(1.5 / dominant_frequency(line) / DT)) | 1
    out = dewow(line)
    assert f"dewow {expected * DT:.2f} ns" in out.attrs["history"]
    # the wow is gone: the late part of the trace (no events) has no offset left
    assert abs(float(out.values[:, 400:].mean())) < 0.01


def test_dominant_frequency_of_ricker():
    # The amplitude spectrum of a Ricker wavelet peaks at its nominal frequency
    # (Ricker 1953; e.g. Yilmaz 2001, Seismic Data Analysis, ch. 1); resolution 1/(N dt).
    t = DT * np.arange(1024)
    f = dominant_frequency(make_line(ricker(t - 30, 0.4)))
    assert f == pytest.approx(0.4, abs=1 / (1024 * DT))


def test_background_removal_cancels_identical_ringing():
    rng = np.random.default_rng(3)
    ringing = np.sin(np.arange(256) * 0.7) * np.exp(-np.arange(256) / 40)
    target = np.zeros((20, 256))
    target[10, 120:130] = 1.0
    line = make_line(ringing + target + 0 * rng.normal(size=(20, 256)))
    out = remove_background(line, method="mean").values
    expected = target - target.mean(axis=0)
    np.testing.assert_allclose(out, expected, atol=1e-5)
    med = remove_background(line, method="median").values
    np.testing.assert_allclose(med, target, atol=1e-5)  # median trace ignores one outlier
    with pytest.raises(SettingsError):
        remove_background(line, method="mode")


def test_gain_curves():
    t = np.array([-2.0, 0.0, 1.0, 4.0, 10.0])
    np.testing.assert_allclose(gain_curve(t, kind="power", value=1.0), [1, 1, 1, 4, 10])
    # 20 log10(g) grows by 6 dB per ns: a factor of 10^(6/20) = 1.995 each ns
    g = gain_curve(t, kind="exp", value=6.0)
    assert g[3] / g[2] == pytest.approx(10 ** (18 / 20), rel=1e-5)
    line = correct_time_zero(make_line(np.ones((2, 50))), time_zero=1.0)
    out = apply_gain(line, kind="power", value=2.0)
    assert out.values[0, -1] == pytest.approx((line["twt"].values[-1]) ** 2, rel=1e-5)
    with pytest.raises(SettingsError):
        apply_gain(line, kind="power", value=-1)
    with pytest.raises(SettingsError):
        gain_curve(t, kind="agc", value=1)


@settings(max_examples=30, deadline=None)
@given(st.integers(8, 300), st.floats(0.01, 2.0))
def test_envelope_is_never_below_the_trace(n, dt):
    rng = np.random.default_rng(n)
    x = rng.normal(size=(2, n))
    env = envelope(make_line(x, dt=dt)).values
    assert env.shape == x.shape
    assert np.all(env >= np.abs(x) - 1e-4)  # |x + iH[x]| >= |x|


@pytest.mark.parametrize("n", [51, 64, 257, 512])
def test_envelope_equals_scipy_hilbert_on_the_padded_trace(n):
    # Reference: scipy.signal.hilbert with the same zero padding, in double precision.
    import scipy.fft
    x = np.random.default_rng(n).normal(size=(3, n))
    nfft = scipy.fft.next_fast_len(2 * n, real=False)
    ref = np.abs(scipy.signal.hilbert(x, N=nfft, axis=-1)[:, :n])
    np.testing.assert_allclose(envelope(make_line(x)).values, ref, atol=2e-5 * np.abs(x).max())


@pytest.mark.parametrize("n_traces", [1, 30, 31])
def test_median_background_equals_numpy_median(n_traces):
    # Reference: numpy.median over the traces (the middle value, or the mean of the two middle
    # values for an even count), subtracted from every trace.
    from slicer.processing.background import median_trace as _median_trace
    x = np.random.default_rng(n_traces).normal(size=(n_traces, 97)).astype(np.float32)
    np.testing.assert_allclose(_median_trace(x), np.median(x, axis=0), rtol=1e-6, atol=1e-7)
    out = remove_background(make_line(x), method="median").values
    np.testing.assert_allclose(out, x - np.median(x, axis=0), rtol=1e-6, atol=1e-6)
    x[3 % n_traces, 5] = np.nan  # NaN propagates as in numpy.median (skipna=False)
    assert np.isnan(_median_trace(x)[5]) and np.isfinite(_median_trace(x)[6])


@pytest.mark.parametrize("n_traces", [1023, 1024, 2000, 3165])
def test_background_median_is_numpy_median_of_every_kth_trace(n_traces):
    # Reference: numpy.median of traces 0, k, 2k... with k = n // 512 (all of them below 1024),
    # so at least 512 traces spread over the whole line.
    from slicer.processing.background import MEDIAN_TRACES, background_median
    rng = np.random.default_rng(n_traces)
    wavelet = np.sin(np.linspace(0, 12, 64)).astype(np.float32)  # the same on every trace
    x = (wavelet + 0.1 * rng.normal(size=(n_traces, 64))).astype(np.float32)
    k = max(1, n_traces // MEDIAN_TRACES)
    got = background_median(x)
    np.testing.assert_allclose(got, np.median(x[::k], axis=0), rtol=1e-6, atol=1e-7)
    assert x[::k].shape[0] >= MEDIAN_TRACES and (k == 1) == (n_traces < 2 * MEDIAN_TRACES)
    # the common wavelet comes through: within 4 standard errors of a median of Gaussian noise
    # (sqrt(pi / 2) sigma / sqrt(count): the sample median's asymptotic variance
    # pi sigma^2 / (2 n), Laplace's result; quoted from memory)
    error = 4 * np.sqrt(np.pi / 2) * 0.1 / np.sqrt(x[::k].shape[0])
    assert np.max(np.abs(got - wavelet)) < error


def step_by_step(line, dewow_ns, background, gain):
    # The single xarray steps, one after another: what the fused chain must reproduce.
    if dewow_ns != "off":
        line = dewow(line, window_ns=dewow_ns)
    if background is not None:
        line = remove_background(line, method=background)
    if gain is not None:
        line = apply_gain(line, kind=gain[0], value=gain[1])
    return envelope(line)


@pytest.mark.parametrize("dewow_ns, background, gain", [
    (None, "median", ("power", 1.0)), (2.5, "mean", ("exp", 0.3)), ("off", None, None),
    (1.1, "median", None), ("off", "mean", ("power", 2.0))])
@pytest.mark.parametrize("n_traces", [30, 31])
def test_fused_chain_equals_the_single_steps(dewow_ns, background, gain, n_traces):
    from slicer.processing.steps import process_chain
    line = correct_time_zero(direct_wave_line(3.0, n_traces=n_traces, wow=0.8, seed=n_traces),
                             time_zero=3.0)
    expected = step_by_step(line, dewow_ns, background, gain)
    fused = process_chain(line, dewow_ns=dewow_ns, background=background, gain=gain)
    scale = float(np.abs(expected.values).max())
    np.testing.assert_allclose(fused.values, expected.values, rtol=0, atol=1e-5 * scale)
    assert fused.dtype == np.float32 and fused.name == "envelope"
    assert fused.attrs["history"] == expected.attrs["history"]
    np.testing.assert_array_equal(fused["twt"].values, expected["twt"].values)
    lazy = process_chain(line.chunk({"trace": 7}), dewow_ns=dewow_ns, background=background,
                         gain=gain)
    assert lazy.chunks is not None
    np.testing.assert_allclose(lazy.compute().values, fused.values, rtol=0, atol=1e-6 * scale)


def test_fused_chain_refuses_what_the_steps_refuse():
    from slicer.processing.steps import process_chain
    line = direct_wave_line(3.0)
    with pytest.raises(SettingsError, match="background"):
        process_chain(line, background="mode")
    with pytest.raises(SettingsError, match="gain"):
        process_chain(line, gain=("power", -1.0))
    with pytest.raises(SettingsError, match="dewow"):
        process_chain(line, dewow_ns=-2.0)


@pytest.mark.parametrize("shape", [(40, 512), (3, 100), (2, 5, 300), (7, 40), (300,)])
def test_baseline_removal_is_scipys_gaussian_filter(shape):
    # reference: scipy.ndimage.gaussian_filter1d (mode "nearest", truncated at 4 sigma), which
    # remove_baseline computes as an FFT convolution of the edge-padded traces
    import scipy.ndimage

    from slicer.processing.trace_basics import remove_baseline
    x = np.random.default_rng(3).normal(size=shape).cumsum(axis=-1)  # a drifting baseline
    sigma = max(1.0, shape[-1] / 20)
    expected = x - scipy.ndimage.gaussian_filter1d(x, sigma, axis=-1, mode="nearest")
    np.testing.assert_allclose(remove_baseline(x), expected, rtol=0,
                               atol=1e-12 * np.abs(expected).max())


def test_steps_keep_the_input_order_of_dims_and_its_chunks():
    # xarray's apply_ufunc moves the core dim last; a (twt, trace) line must come back as it
    # went in, and a line chunked by traces keep its chunks after the background (which
    # needs every trace at once)
    import slicer
    rng = np.random.default_rng(8)
    line = xr.DataArray(rng.normal(size=(120, 64)).astype(np.float32), dims=("trace", "twt"),
                        coords={"twt": ("twt", 0.1 * np.arange(64), {"units": "ns"})})
    flipped = line.transpose("twt", "trace")
    for step in (slicer.dewow, slicer.apply_gain, slicer.envelope, slicer.remove_background):
        out = step(flipped)
        assert out.dims == ("twt", "trace")
        np.testing.assert_array_equal(out.transpose("trace", "twt").values, step(line).values)
    chunked = slicer.remove_background(line.chunk({"trace": 40}))
    assert chunked.chunks == ((40, 40, 40), (64,))
    np.testing.assert_array_equal(chunked.values, slicer.remove_background(line).values)
