"""Tests of slicer.processing.migration: Stolt and phase-shift migration of a line."""

import warnings

import numpy as np
import pytest
import scipy.fft
import scipy.optimize
import xarray as xr

from slicer.core.errors import SettingsError, SlicerWarning
from slicer.processing.migration import interval_velocity, migrate, trace_spacing
from slicer.synthetic import forward as _forward
from slicer.synthetic.forward import PointTarget

# The worked case of check-values.md, "Migration" (Stolt 1978, Geophysics 43:23-48): traces
# every 0.05 m, samples every 0.2 ns, a 400 MHz Ricker wavelet, a point diffractor at 6.4 m
# along the line and 2.0 m deep in ground of 0.1 m/ns.
DX, DT, SAMPLES, TRACES = 0.05, 0.2, 512, 257
X0, Z0, V = 6.4, 2.0, 0.1


def make_line(times, amplitudes, *, dx=DX, dt=DT, samples=SAMPLES, t_start=0.0):
    """A line from arrival times/amplitudes (traces, reflectors) rendered by the forward model."""
    n = times.shape[0]
    distance = dx * np.arange(n)
    twt = t_start + dt * np.arange(samples)
    data = _forward.render_reflections(twt, times, amplitudes, kind="ricker", frequency_ghz=0.4)
    return xr.DataArray(
        data.astype(np.float32), dims=("trace", "twt"), name="amplitude",
        coords={"twt": ("twt", twt, {"units": "ns"}), "trace": np.arange(n),
                "distance": ("trace", distance, {"units": "m"}),
                "x": ("trace", 500.0 + distance, {"units": "m"}),
                "y": ("trace", np.full(n, 200.0), {"units": "m"})},
        attrs={"line": "test", "history": "simulated", "units": "1"})


@pytest.fixture(scope="module")
def point_line():
    x = DX * np.arange(TRACES)
    times, amplitudes = _forward.arrivals(x, np.zeros_like(x), (PointTarget(X0, 0.0, Z0),),
                                          velocity=V, pattern_exponent=0.0)
    return make_line(times, amplitudes)


def focus(image, *, x0, t0, dx=DX, half_time=4.0):
    """Peak position and the fraction of the energy within +-3 traces x +-half_time ns of it
    (4 ns is +-0.2 m at 0.1 m/ns) and of the truth."""
    energy = np.asarray(image.values, dtype=float) ** 2
    distance, twt = image["distance"].values, image["twt"].values
    i, j = np.unravel_index(np.argmax(np.abs(image.values)), energy.shape)

    def fraction(xc, tc):
        box = ((np.abs(distance - xc) <= 3 * dx + 1e-9)[:, None]
               & (np.abs(twt - tc) <= half_time + 1e-9)[None, :])
        return energy[box].sum() / energy.sum()

    return distance[i], twt[j], fraction(x0, t0), fraction(distance[i], twt[j])


def test_stolt_focuses_the_worked_case(point_line):
    # check-values.md, Migration (Stolt 1978): peak at (6.400 m, 2.010 m), 97 % of the energy
    # within +-3 traces x +-0.2 m (7.5 % before); suggested check: peak within 1 trace and
    # 2 samples, focused fraction > 0.9.
    t0 = 2 * Z0 / V
    *_, before, _ = focus(point_line, x0=X0, t0=t0)
    image = migrate(point_line, velocity=V)
    x, t, after, _ = focus(image, x0=X0, t0=t0)
    assert abs(x - X0) <= DX + 1e-9
    assert abs(t - t0) <= 2 * DT + 1e-9
    assert after > 0.9
    assert before == pytest.approx(0.075, abs=0.02)
    assert image.dtype == np.float32 and image.dims == point_line.dims
    np.testing.assert_array_equal(image["twt"].values, point_line["twt"].values)
    assert image.attrs["migration_velocity"] == V
    assert image.attrs["history"].startswith("simulated; Stolt migration 0.1 m/ns")


@pytest.mark.parametrize("factor, depth", [(0.9, 1.80), (1.1, 2.17)])
def test_a_wrong_velocity_defocuses(point_line, factor, depth):
    # check-values.md, Migration: velocity -10 % -> peak at 1.80 m with 51 % of the energy;
    # +10 % -> 2.17 m with 50 % (depth converted with the velocity used).
    v = V * factor
    image = migrate(point_line, velocity=v)
    x, t, at_truth, at_peak = focus(image, x0=X0, t0=2 * Z0 / V)
    assert v * t / 2 == pytest.approx(depth, abs=0.02)
    assert abs(x - X0) <= 2 * DX + 1e-9
    assert at_peak < 0.65  # well below the > 0.9 of the right velocity
    assert at_truth < 0.65


def test_gazdags_sample_steps_equal_stolt_for_one_velocity(point_line):
    # Gazdag (1978), Geophysics 43:1342-1351 and Stolt (1978) migrate a constant velocity
    # exactly; they differ only by Stolt's interpolation in frequency. A velocity that changes
    # at every sample (by 1e-9 m/ns per ns: one velocity for any practical purpose) is stepped
    # sample by sample, Gazdag's recursion with no interpolation.
    stolt = migrate(point_line, velocity=V).values.astype(float)
    steps = migrate(point_line, velocity=lambda t: V + 1e-9 * t, method="phase-shift")
    assert "(layered)" in steps.attrs["history"]  # many velocities, so not the layer path
    difference = steps.values.astype(float) - stolt
    assert np.sqrt((difference ** 2).sum() / (stolt ** 2).sum()) < 0.02
    # one layer, or layers of one velocity, are migrated as one velocity
    phase = migrate(point_line, velocity=V, method="phase-shift").values
    layered = migrate(point_line, velocity=[V, V], layer_tops=[0.0, 20.0], method="phase-shift")
    np.testing.assert_allclose(layered.values, phase, atol=1e-5 * np.abs(phase).max())


def test_a_diffractor_near_the_end_of_the_record_focuses():
    # The apex 4.8 m down lies at 96 ns of a 102 ns record, where Stolt's interpolation in
    # frequency is least accurate (farthest from the middle of the record). Gazdag's (1978)
    # phase-shift recursion interpolates nothing and is exact for one velocity (run here by a
    # velocity that changes by 1e-9 m/ns per ns, so that every sample has its own): the two
    # must agree, and the hyperbola must still collapse to its apex (check-values.md: peak
    # within 1 trace and 2 samples, focused energy fraction > 0.9). Measured 0.012 relative
    # RMS with the least-squares weights and 1.5 times the record; a polynomial through
    # 6 samples with twice the record (slicer until 2026-12-03) gave 0.022.
    x = DX * np.arange(TRACES)
    times, amplitudes = _forward.arrivals(x, np.zeros_like(x), (PointTarget(X0, 0.0, 4.8),),
                                          velocity=V, pattern_exponent=0.0)
    line = make_line(times, amplitudes)
    stolt = migrate(line, velocity=V)
    phase = migrate(line, velocity=lambda t: V + 1e-9 * t,
                    method="phase-shift").values.astype(float)
    difference = stolt.values.astype(float) - phase
    assert np.sqrt((difference ** 2).sum() / (phase ** 2).sum()) < 0.015
    x_peak, t_peak, fraction, _ = focus(stolt, x0=X0, t0=2 * 4.8 / V)
    assert abs(x_peak - X0) <= DX + 1e-9 and abs(t_peak - 96.0) <= 2 * DT + 1e-9
    assert fraction > 0.9


def _burst(line, *, seed):
    """A Hann-windowed 2.2 GHz burst, 20 ns long about 50 ns, random phase on each trace."""
    t = line["twt"].values
    window = np.where(np.abs(t - 50.0) < 10.0, np.cos(np.pi * (t - 50.0) / 20.0) ** 2, 0.0)
    phase = np.random.default_rng(seed).uniform(0, 2 * np.pi, TRACES)[:, None]
    return (0.02 * float(np.abs(line.values).max()) * window
            * np.cos(2 * np.pi * 2.2 * t + phase)).astype(np.float32)


@pytest.mark.parametrize("method", ["stolt", "phase-shift"])
def test_frequencies_above_the_band_pass_through(point_line, method):
    # A Hann-windowed 2.2 GHz burst (20 ns long, random phase on each trace) lies wholly above
    # the migrated band, 4 x the 0.4 GHz dominant frequency (rounded up to 1.64 GHz here):
    # migration is linear, so it must come out exactly as it went in. Migrating every
    # frequency (band=None) moves it.
    burst = _burst(point_line, seed=3)
    spectrum = np.abs(scipy.fft.rfft(burst, n=1024, axis=1)) ** 2  # scipy.fft: (next to) no
    below = scipy.fft.rfftfreq(1024, DT) < 1.6  # energy below the band's top
    assert spectrum[:, below].sum() < 1e-6 * spectrum.sum()
    noisy = point_line.copy(data=point_line.values + burst)
    for band, passed in ((4.0, True), (None, False)):
        moved = (migrate(noisy, velocity=V, method=method, band=band).values
                 - migrate(point_line, velocity=V, method=method, band=band).values - burst)
        assert (np.abs(moved).max() < 2e-3 * np.abs(burst).max()) == passed


@pytest.mark.parametrize("method", ["stolt", "phase-shift"])
def test_a_given_dominant_frequency_sets_the_band(point_line, method):
    # The same 2.2 GHz burst as above: with the band counted from a given 0.4 GHz (the
    # forward model's wavelet; a build gives its survey's) it lies above 4 x 0.4 = 1.6 GHz and
    # passes through; counted from 0.6 GHz (top 2.4 GHz) it is migrated, and so moved.
    # Linearity of migration, as above; the band's top from band x frequency (its definition).
    burst = _burst(point_line, seed=5)
    noisy = point_line.copy(data=point_line.values + burst)
    for frequency, passed in ((0.4, True), (0.6, False)):
        moved = (migrate(noisy, velocity=V, method=method, frequency=frequency).values
                 - migrate(point_line, velocity=V, method=method,
                           frequency=frequency).values - burst)
        assert (np.abs(moved).max() < 2e-3 * np.abs(burst).max()) == passed
    history = migrate(point_line, velocity=V, method=method, frequency=0.4).attrs["history"]
    assert "frequencies to 1.6 GHz" in history


def test_lines_given_one_frequency_share_one_stolt_operator(point_line):
    # Lines of one size whose own spectra peak apart (a 0.4 GHz line, and the same with a
    # strong 0.8 GHz ringing) would each get their own band; given the survey's frequency
    # they are migrated with one operator (functools.lru_cache's counts).
    from slicer.processing.fk import stolt_operator
    t = point_line["twt"].values
    ringing = (5.0 * float(np.abs(point_line.values).max())
               * np.sin(2 * np.pi * 0.8 * t)).astype(np.float32)
    rung = point_line.copy(data=point_line.values + ringing)
    for given, operators in ((None, 2), (0.4, 1)):
        stolt_operator.cache_clear()
        for line in (point_line, rung):
            migrate(line, velocity=V, frequency=given)
        assert stolt_operator.cache_info().misses == operators


# Two layers: 0.12 m/ns down to 0.96 m (16 ns two-way), then 0.08 m/ns; a diffractor 0.64 m
# below the interface (32 ns two-way at the apex).
V1, V2, H1, H2 = 0.12, 0.08, 0.96, 0.64


def layered_time(offset):
    """Zero-offset two-way time through a flat interface, by Snell's law (ray parameter p:
    sin(a1)/v1 = sin(a2)/v2; Sheriff & Geldart 1995, Exploration Seismology, 2nd ed.)."""
    offset = abs(offset)
    if offset == 0:
        return 2 * (H1 / V1 + H2 / V2)

    def miss(p):
        return (H1 * np.tan(np.arcsin(p * V1)) + H2 * np.tan(np.arcsin(p * V2))) - offset

    p = scipy.optimize.brentq(miss, 0.0, (1 - 1e-12) / V1, xtol=1e-14)
    return 2 * (H1 / (V1 * np.sqrt(1 - (p * V1) ** 2)) + H2 / (V2 * np.sqrt(1 - (p * V2) ** 2)))


@pytest.fixture(scope="module")
def layered_line():
    x = DX * np.arange(TRACES)
    times = np.array([[layered_time(xi - X0)] for xi in x])
    return make_line(times, 1.0 / times)  # amplitude falling with the path, as spreading does


def test_phase_shift_focuses_under_an_interface(layered_line):
    t0 = layered_time(0.0)
    tops = [0.0, 2 * H1 / V1]
    image = migrate(layered_line, velocity=[V1, V2], layer_tops=tops, method="phase-shift")
    x, t, fraction, _ = focus(image, x0=X0, t0=t0)
    assert abs(x - X0) <= DX + 1e-9
    assert abs(t - t0) <= 2 * DT + 1e-9
    assert fraction > 0.85
    # no single velocity does as well (Stolt with the upper, lower or mean velocity)
    for v in (V1, V2, 0.5 * (V1 + V2)):
        assert focus(migrate(layered_line, velocity=v), x0=X0, t0=t0)[2] < fraction - 0.15
    # the same layers given by depth, or as a function of time, give the same image
    by_depth = migrate(layered_line, velocity=[V1, V2], layer_tops=[0.0, H1], tops="depth",
                       method="phase-shift")
    np.testing.assert_allclose(by_depth.values, image.values, atol=1e-6)
    as_function = migrate(layered_line, velocity=lambda t: np.where(t < tops[1], V1, V2),
                          method="phase-shift")
    np.testing.assert_allclose(as_function.values, image.values, atol=1e-6)
    assert "layered" in image.attrs["history"] and "migration_velocity" not in image.attrs
    # Each layer is crossed in one phase shift and imaged by Stolt's mapping within it; Gazdag's
    # recursion, one phase shift per sample with the interface between two samples, gives the
    # same image up to Stolt's interpolation (the first velocity is changed by 1e-9 m/ns per
    # ns, so that every sample has its own velocity and the recursion runs).
    steps = migrate(layered_line, method="phase-shift",
                    velocity=lambda t: np.where(t < tops[1], V1 + 1e-9 * t, V2))
    difference = steps.values.astype(float) - image.values
    assert np.sqrt((difference ** 2).sum() / (image.values.astype(float) ** 2).sum()) < 0.02


def test_interval_velocity_from_depth_tops():
    # the second top at 0.96 m lies 2 * 0.96 / 0.12 = 16 ns down
    speed = interval_velocity([V1, V2, 0.1], layer_tops=[0.0, H1, H1 + H2], tops="depth")
    np.testing.assert_allclose(speed(np.array([0.0, 15.9, 16.1, 31.9, 32.1])),
                               [V1, V1, V2, V2, 0.1])


def test_samples_before_time_zero_pass_through(point_line):
    before = np.full((TRACES, 15), 0.25, dtype=np.float32)
    data = np.concatenate([before, point_line.values], axis=1)
    twt = DT * np.arange(data.shape[1]) - 15 * DT - 1e-12  # rounding of a time-zero shift
    shifted = xr.DataArray(data, dims=point_line.dims, name="amplitude",
                           coords={**{k: c for k, c in point_line.coords.items() if k != "twt"},
                                   "twt": ("twt", twt, {"units": "ns"})},
                           attrs=point_line.attrs)
    assert shifted.sizes["twt"] == SAMPLES + 15
    for method in ("stolt", "phase-shift"):
        out = migrate(shifted, velocity=V, method=method)
        np.testing.assert_array_equal(out.values[:, :15], before)
        reference = migrate(point_line, velocity=V, method=method).values
        np.testing.assert_allclose(out.values[:, 15:], reference,
                                   atol=1e-4 * np.abs(reference).max())
        np.testing.assert_array_equal(out["twt"].values, twt)


@pytest.mark.parametrize("method", ["stolt", "phase-shift"])
def test_steps_run_by_blocks_around_migration_equal_the_steps_in_turn(point_line, method):
    # A build's line task hands its steps before and after migration to the migration, which
    # runs them on each block of traces: the result must be that of the three in turn, the
    # samples above the surface taking the step before and the step after too, and the
    # worked case must still focus where Stolt (1978) puts its apex (check-values.md,
    # Migration: within a trace and two samples of (6.4 m, 2 z0 / v = 40 ns))
    from slicer.processing.migration import migration_plan
    data = np.concatenate([np.full((TRACES, 15), 0.25, dtype=np.float32), point_line.values],
                          axis=1)
    twt = DT * np.arange(data.shape[1]) - 15 * DT
    ramp = np.linspace(0.5, 2.0, data.shape[1], dtype=np.float32)

    def before(block):  # per sample and trace, as dewow and background removal are
        return block * ramp

    def after(block):  # as the gain and the envelope
        return np.abs(block * ramp[::-1])

    apply, _, _ = migration_plan(twt, dx=DX, velocity=V, method=method)
    expected = after(apply(before(data)))
    got = apply(data, prepare=before, finish=after)
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-6 * np.abs(expected).max())
    np.testing.assert_array_equal(got[:, :15], after(before(data))[:, :15])
    image = point_line.copy(data=got[:, 15:])
    x, t, focused, _ = focus(image, x0=X0, t0=2 * Z0 / V)
    assert abs(x - X0) <= DX + 1e-9 and abs(t - 2 * Z0 / V) <= 2 * DT + 1e-9
    assert focused > 0.8


def test_dask_backed_line_gives_the_same_image(point_line):
    lazy = migrate(point_line.chunk({"trace": 64}), velocity=V)
    assert lazy.chunks is not None
    np.testing.assert_array_equal(lazy.values, migrate(point_line, velocity=V).values)


def test_trace_spacing_is_the_median_step_and_uneven_lines_warn(point_line):
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # an even line does not warn
        assert trace_spacing(point_line) == pytest.approx(DX)
    distance = point_line["distance"].values.copy()
    distance[100:] += 0.03  # one long step (wheel slip): the median ignores it, with a warning
    with pytest.warns(SlicerWarning, match="even spacing"):
        assert trace_spacing(point_line.assign_coords(distance=("trace", distance))) == (
            pytest.approx(DX))


@pytest.mark.parametrize("kwargs, match", [
    (dict(velocity=0.1, method="kirchhoff"), "method"),
    (dict(velocity=0.35), "speed of light"),
    (dict(velocity=0.0), "positive"),
    (dict(velocity=[0.1, 0.08], layer_tops=[0.0, 10.0]), "Stolt"),
    (dict(velocity=[0.1, 0.08], layer_tops=[0.0, 10.0, 20.0], method="phase-shift"),
     "2 velocities for 3"),
    (dict(velocity=[0.1, 0.08], layer_tops=[5.0, 10.0], method="phase-shift"), "ascend"),
    (dict(velocity=[0.1, 0.08], method="phase-shift"), "layer_tops"),
    (dict(velocity=[0.1, 0.08], layer_tops=[0, 1], tops="feet", method="phase-shift"), "tops"),
    (dict(velocity=lambda t: 0.5 + 0 * t, method="phase-shift"), "speed of light"),
    (dict(velocity=0.1, taper=1.5), "taper"),
    (dict(velocity=0.1, pad=1), "padding"),
    (dict(velocity=0.1, pad=1.2), "padding"),
    (dict(velocity=0.1, pad=5), "padding"),
    (dict(velocity=0.1, pad=float("nan")), "padding"),
    (dict(velocity=0.1, pad="2"), "padding"),
    (dict(velocity=0.1, band=0.5), "band"),
    (dict(velocity=0.1, band=float("nan")), "band"),
    (dict(velocity=0.1, frequency=0.0), "GHz"),
    (dict(velocity=0.1, frequency=-0.4), "GHz"),
    (dict(velocity=0.1, frequency=float("inf")), "GHz"),
    (dict(velocity=0.1, frequency="400 MHz"), "GHz"),
])
def test_bad_settings_are_refused(point_line, kwargs, match):
    with pytest.raises(SettingsError, match=match):
        migrate(point_line, **kwargs)


def test_lines_that_cannot_be_migrated_are_refused(point_line):
    with pytest.raises(SettingsError, match="distance"):
        migrate(point_line.drop_vars("distance"), velocity=V)
    early = point_line.assign_coords(twt=point_line["twt"] - 500.0)
    with pytest.raises(SettingsError, match="time zero"):
        migrate(early, velocity=V)


def test_a_stack_of_no_lines_migrates_to_no_lines():
    # (lines, trace, twt) samples with no lines: an empty result of that shape, not NumPy's
    # "need at least one array to stack" (found by review)
    from slicer.processing.migration import migration_plan
    apply, _, _ = migration_plan(DT * np.arange(20), dx=DX, velocity=V)
    out = apply(np.empty((0, 5, 20), dtype=np.float32))
    assert out.shape == (0, 5, 20) and out.dtype == np.float32
