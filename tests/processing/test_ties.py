"""Tests of slicer.processing.ties: ties at line crossings: crossings, tie measurement, network
solution."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import SettingsError, SlicerWarning
from slicer.processing.steps import correct_time_zero, dewow
from slicer.processing.ties import apply_ties, find_crossings, measure_ties, solve_ties
from slicer.synthetic import Ground, Layer, PointTarget, Radar, grid_lines, simulate_line
from slicer.synthetic.forward import ricker

W, S = 1000.0, 2000.0
GATE = (6.0, 40.0)  # ns: below the direct wave, down past both layers


def _line(name, x, y, samples=None, dt=0.1, t0=0.0):
    x, y = np.asarray(x, float), np.asarray(y, float)
    data = np.zeros((x.size, 8), np.float32) if samples is None else np.asarray(samples,
                                                                               np.float32)
    twt = t0 + dt * np.arange(data.shape[1])
    return xr.DataArray(data, dims=("trace", "twt"), name="amplitude",
                        coords={"twt": ("twt", twt, {"units": "ns"}),
                                "trace": np.arange(x.size), "x": ("trace", x), "y": ("trace", y)},
                        attrs={"line": name, "time_zero_ns": 0.0, "history": "made in a test"})


@pytest.fixture(scope="module")
def network():
    """Five west-east and five south-north lines over point targets and two layers.

    Every line's true time zero is 3 ns plus a known fraction-of-a-sample offset, but all are
    corrected with 3 ns, so the recorded samples themselves (not just the time axis) are out of
    step by the offsets; every line also carries a known gain. The sets are offset by a part of
    a trace spacing, so no crossing falls on a trace.
    """
    ground = Ground(velocity=0.1, attenuation_db_per_m=2.0,
                    targets=(PointTarget(W + 1.0, S + 1.0, 0.6),
                             PointTarget(W + 2.5, S + 3.0, 0.9, amplitude=1.5),
                             PointTarget(W + 3.2, S + 1.7, 0.4, amplitude=0.7)),
                    layers=(Layer(1.0, 0.5), Layer(1.6, 0.4)))
    radar = Radar(samples=450, seed=3)
    plans = (grid_lines(west=W - 0.2, south=S + 0.013, length=4.4, width=4.0, line_spacing=1.0,
                        trace_spacing=0.05, direction="x", prefix="E")
             + grid_lines(west=W + 0.025, south=S - 0.2, length=4.4, width=4.0,
                          line_spacing=1.0, trace_spacing=0.05, direction="y", prefix="N"))
    rng = np.random.default_rng(5)
    offsets = rng.uniform(-0.7, 0.7, len(plans))  # ns
    gains = np.exp(rng.uniform(math.log(0.6), math.log(1.6), len(plans)))
    lines = []
    for plan, offset, gain in zip(plans, offsets, gains, strict=True):
        raw = simulate_line(ground, dataclasses.replace(radar, time_zero_ns=3.0 + offset), plan)
        line = dewow(correct_time_zero(raw, time_zero=3.0), window_ns=3.75)
        scaled = (line * np.float32(gain)).astype(np.float32)
        scaled.attrs = line.attrs
        lines.append(scaled)
    crossings = find_crossings(lines)
    ties = measure_ties(lines, crossings, window=GATE)
    return {"lines": lines, "names": [p.name for p in plans], "offsets": offsets,
            "gains": gains, "crossings": crossings, "ties": ties}


# --- measuring ---------------------------------------------------------------------------------

def _wavelet_line(name, delay, amplitude, dt=0.1, t0=0.0, n=400):
    twt = t0 + dt * np.arange(n)
    trace = amplitude * (ricker(twt - 15.0 - delay, 0.4) - 0.6 * ricker(twt - 24.0 - delay, 0.4))
    return _line(name, [0.0], [0.0], trace[None, :], dt=dt, t0=t0)


def _one_crossing(a="A", b="B"):
    return xr.Dataset({"line_a": ("crossing", [a]), "trace_a": ("crossing", [0]),
                       "line_b": ("crossing", [b]), "trace_b": ("crossing", [0])})


@pytest.mark.parametrize("dt_b, t0_b", [(0.1, 0.0), (0.1, 0.037), (0.05, 0.0)])
def test_measured_shift_and_ratio_match_a_known_delay(dt_b, t0_b):
    # Line b is line a delayed by 0.37 ns (not a whole number of samples) and halved; the
    # wavelet is rendered at exact times, so the truth is known. Cross-correlation through
    # scipy.signal.correlate is the reference method; sub-sample refinement by a parabola
    # through the peak is common practice. Also with b's axis starting 0.037 ns late, and
    # on a finer sample interval (cubic-spline path).
    a = _wavelet_line("A", 0.0, 1.0)
    b = _wavelet_line("B", 0.37, 0.5, dt=dt_b, t0=t0_b, n=int(400 * 0.1 / dt_b))
    tie = measure_ties([a, b], _one_crossing(), max_shift_ns=2.0, window=(8.0, 32.0))
    assert float(tie.shift_ns[0]) == pytest.approx(0.37, abs=0.01)
    assert float(tie.amplitude_ratio[0]) == pytest.approx(0.5, rel=0.01)
    assert float(tie.quality[0]) > 0.99
    # the other way round the shift changes sign and the ratio inverts
    back = measure_ties([a, b], _one_crossing("B", "A"), max_shift_ns=2.0, window=(8.0, 32.0))
    assert float(back.shift_ns[0]) == pytest.approx(-0.37, abs=0.01)
    assert float(back.log_ratio[0]) == pytest.approx(-float(tie.log_ratio[0]), abs=0.01)


def test_shift_beyond_the_limit_is_left_out():
    a, b = _wavelet_line("A", 0.0, 1.0), _wavelet_line("B", 1.6, 1.0)
    with pytest.warns(SlicerWarning, match="shift limit"):
        tie = measure_ties([a, b], _one_crossing(), max_shift_ns=0.5, window=(8.0, 32.0))
    assert np.isnan(float(tie.shift_ns[0]))
    assert float(tie.quality[0]) == 0.0


@pytest.mark.parametrize("kwargs, where", [({"max_shift_ns": 0.0}, "max_shift_ns"),
                                           ({"window": (10.0, 5.0)}, "window"),
                                           ({"half_width": -1}, "half_width")])
def test_measure_options_are_checked(kwargs, where):
    a, b = _wavelet_line("A", 0.0, 1.0), _wavelet_line("B", 0.0, 1.0)
    with pytest.raises(SettingsError, match=where):
        measure_ties([a, b], _one_crossing(), **kwargs)


def test_crossing_naming_an_unknown_line_is_refused():
    a = _wavelet_line("A", 0.0, 1.0)
    with pytest.raises(SettingsError, match="'B'"):
        measure_ties([a], _one_crossing())


# --- the network -------------------------------------------------------------------------------

def test_network_recovers_time_zero_offsets_and_gains(network):
    ties, names = network["ties"], network["names"]
    assert float(ties.quality.min()) > 0.9
    solution = solve_ties(ties, names)
    est = solution.time_zero_ns.values
    truth = network["offsets"]
    error = (est - est.mean()) - (truth - truth.mean())  # ties fix offsets up to a constant
    gain_error = np.log(solution.gain.values * network["gains"])  # gain x truth is constant
    gain_error -= gain_error.mean()
    a = solution.attrs
    print(f"\ntie misfit before {a['misfit_before_ns']:.3f} ns, after "
          f"{a['misfit_after_ns']:.4f} ns; worst line time zero error "
          f"{np.abs(error).max():.4f} ns; gain misfit before {a['gain_misfit_before']:.3f}, "
          f"after {a['gain_misfit_after']:.4f} Np; worst gain error "
          f"{np.abs(gain_error).max():.4f} Np")
    assert np.abs(error).max() < 0.1  # one sample (0.1 ns)
    assert np.abs(gain_error).max() < 0.02  # 2 %
    assert a["misfit_after_ns"] < 0.1 * a["misfit_before_ns"]
    assert a["gain_misfit_after"] < 0.1 * a["gain_misfit_before"]
    assert abs(est.mean()) < 1e-9 and abs(solution.log_gain.values.mean()) < 1e-9
    assert solution.used.values.all() and (solution.ties.values == 5).all()


def test_applied_solution_leaves_no_misfit(network):
    lines, names = network["lines"], network["names"]
    solution = solve_ties(network["ties"], names)
    fixed = apply_ties(lines, solution)
    again = measure_ties(fixed, network["crossings"], window=GATE)
    # what is left is the scatter of the ties about the solution (gain_misfit_after)
    assert np.abs(again.shift_ns.values).max() < 0.05
    assert np.abs(again.log_ratio.values).max() < 0.05
    assert np.sqrt(np.mean(again.log_ratio.values ** 2)) < 0.015
    k = names.index("E002")
    d, g = float(solution.time_zero_ns[k]), float(solution.gain[k])
    np.testing.assert_allclose(fixed[k].twt.values, lines[k].twt.values - d)
    np.testing.assert_allclose(fixed[k].values, lines[k].values * np.float32(g), rtol=1e-6)
    assert fixed[k].attrs["time_zero_ns"] == pytest.approx(3.0 + d)
    assert fixed[k].attrs["history"].endswith(f"tie correction: time zero {d:+.3f} ns, "
                                              f"gain {g:.4g}")
    with pytest.warns(SlicerWarning, match="X9"):
        other = apply_ties([_line("X9", [0.0], [0.0])], solution)
    assert other[0].attrs["time_zero_ns"] == 0.0


def test_reference_line_is_held_fixed(network):
    ties, names = network["ties"], network["names"]
    free = solve_ties(ties, names)
    held = solve_ties(ties, names, reference="N003")
    k = names.index("N003")
    assert held.time_zero_ns.values[k] == 0.0 and held.gain.values[k] == 1.0
    np.testing.assert_allclose(held.time_zero_ns.values,
                               free.time_zero_ns.values - free.time_zero_ns.values[k], atol=1e-9)
    np.testing.assert_allclose(held.log_gain.values,
                               free.log_gain.values - free.log_gain.values[k], atol=1e-9)
    np.testing.assert_allclose(held.shift_residual_ns.values, free.shift_residual_ns.values,
                               atol=1e-9)


def _ties(rows, quality=None):
    la, lb, shift, ratio = zip(*rows, strict=True)
    q = np.ones(len(rows)) if quality is None else np.asarray(quality, float)
    return xr.Dataset({"line_a": ("crossing", list(la)), "line_b": ("crossing", list(lb)),
                       "shift_ns": ("crossing", np.array(shift, float)),
                       "log_ratio": ("crossing", np.array(ratio, float)),
                       "quality": ("crossing", q)})


def test_loop_misclosure_is_spread_equally():
    # A closed loop of three equally weighted differences that do not add up (misclosure
    # 1 + 1 - 1.5 = 0.5): least squares spreads the misclosure equally, each residual a third
    # of it (the level-loop adjustment of surveying; e.g. Ghilani 2010, Adjustment
    # Computations, 5th ed., Wiley). Derivation: minimise (a-1)^2 + (b-1)^2 + (a+b-1.5)^2,
    # a = b = 5/6.
    ties = _ties([("A", "B", 1.0, -0.2), ("B", "C", 1.0, -0.2), ("A", "C", 1.5, -0.3)])
    sol = solve_ties(ties, ["A", "B", "C"])
    d = sol.time_zero_ns.values
    assert d[1] - d[0] == pytest.approx(5 / 6) and d[2] - d[1] == pytest.approx(5 / 6)
    np.testing.assert_allclose(sol.shift_residual_ns.values, [1 / 6, 1 / 6, -1 / 6])
    # the log ratios close the loop misclosure -0.1 the same way
    np.testing.assert_allclose(sol.log_ratio_residual.values, [-0.1 / 3, -0.1 / 3, 0.1 / 3],
                               atol=1e-12)
    assert sol.attrs["misfit_before_ns"] == pytest.approx(math.sqrt((1 + 1 + 2.25) / 3))
    assert sol.attrs["misfit_after_ns"] == pytest.approx(1 / 6)


def test_low_quality_tie_gives_way():
    # weight w on the third tie: minimise (a-1)^2 + (b-1)^2 + w (a+b-1.5)^2, so
    # a = b = (1 + 1.5 w) / (1 + 2 w) (weighted least squares, weights = quality)
    w = 0.6
    ties = _ties([("A", "B", 1.0, 0.0), ("B", "C", 1.0, 0.0), ("A", "C", 1.5, 0.0)],
                 quality=[1.0, 1.0, w])
    d = solve_ties(ties, ["A", "B", "C"]).time_zero_ns.values
    assert d[1] - d[0] == pytest.approx((1 + 1.5 * w) / (1 + 2 * w))
    with pytest.warns(SlicerWarning, match="left out"):
        d = solve_ties(ties, ["A", "B", "C"], min_quality=0.7).time_zero_ns.values
    assert d[1] - d[0] == pytest.approx(1.0) and d[2] - d[1] == pytest.approx(1.0)


@given(st.integers(3, 8), st.integers(0, 2**32 - 1))
@settings(max_examples=25, deadline=None)
def test_consistent_ties_are_solved_exactly(n, seed):
    # ties that are exact differences of per-line offsets on a connected network (a chain
    # plus random extra ties) must come back exactly, up to the common offset
    rng = np.random.default_rng(seed)
    d, g = rng.normal(0, 1, n), rng.normal(0, 0.3, n)
    pairs = [(k, k + 1) for k in range(n - 1)]
    pairs += [tuple(sorted(rng.choice(n, 2, replace=False))) for _ in range(n)]
    names = [f"L{k}" for k in range(n)]
    ties = _ties([(names[i], names[j], d[j] - d[i], g[i] - g[j]) for i, j in pairs],
                 quality=rng.uniform(0.5, 1.0, len(pairs)))
    sol = solve_ties(ties, names)
    np.testing.assert_allclose(sol.time_zero_ns.values, d - d.mean(), atol=1e-9)
    np.testing.assert_allclose(sol.log_gain.values, g - g.mean(), atol=1e-9)
    assert sol.attrs["misfit_after_ns"] < 1e-9


def test_disconnected_network_is_refused(network):
    ties, names = network["ties"], network["names"]
    # a line with no tie at all
    with pytest.raises(SettingsError, match="not connected: Z9 has no chain"):
        solve_ties(ties, [*names, "Z9"])
    # two separate patches: A-B and C-D
    patches = _ties([("A", "B", 0.1, 0.0), ("C", "D", 0.2, 0.0)])
    with pytest.raises(SettingsError, match="C, D have no chain of ties to A"):
        solve_ties(patches, ["A", "B", "C", "D"], reference="A")
    # the poor ties of one line left out cut it off
    cut = ties.copy()
    cut["quality"] = cut.quality.where((cut.line_a != "E004") & (cut.line_b != "E004"), 0.1)
    with pytest.warns(SlicerWarning, match="left out"), \
            pytest.raises(SettingsError, match="E004"):
        solve_ties(cut, names)


@pytest.mark.parametrize("args, kwargs, where", [
    ((["A", "A"],), {}, "line_names"),
    ((["A", "B"],), {"reference": "Q"}, "reference"),
    ((["A", "B"],), {"min_quality": 2.0}, "min_quality"),
    ((["A"],), {}, "ties"),
])
def test_solve_options_are_checked(args, kwargs, where):
    ties = _ties([("A", "B", 0.1, 0.0)])
    with pytest.raises(SettingsError, match=where):
        solve_ties(ties, *args, **kwargs)


def test_tie_table_without_measurements_is_refused():
    with pytest.raises(SettingsError, match="shift_ns"):
        solve_ties(_one_crossing(), ["A", "B"])
