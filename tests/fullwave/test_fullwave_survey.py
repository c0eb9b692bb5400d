"""slicer measured on a survey it did not make: the full-wave (2-D FDTD) fixture of
tests/fullwave/data, written by tests/fullwave/make_survey.py with the solver that
tests/fullwave/test_fdtd.py verifies against analytic physics.

Truth comes from the simulation's inputs (truth.json): the ground's velocity c / sqrt(9), the
pipes' positions and radii, the interface depth, the source current's peak time. The targets
are those of issue 13: velocity within 2 % of truth, pipe depths within a quarter wavelength
(0.062 m at 400 MHz in 0.1 m/ns ground), and no stripe under a pipe, in the default depth
slices, brighter than half the weaker pipe. All are met (measured figures in each test); a
target missed would be marked ``xfail(strict=True)`` with its figure, so the mark flips when
it is met.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest

import slicer
from slicer.pipeline.velocity_survey import analyse_velocity
from slicer.velocity.targets import target_radius

HERE = Path(__file__).parent
DATA = HERE / "data"
sys.path.insert(0, str(HERE))
import make_survey  # noqa: E402  (the fixture's generator, beside this file)

TRUTH = json.loads((DATA / "truth.json").read_text())
QUARTER = TRUTH["quarter_wavelength"]  # m
FINE_DEPTHS = "0:1.0:0.02"  # m, slices finer than the default step, to read depths


@pytest.fixture(scope="module")
def velocity_analysis():
    settings = slicer.load_settings(DATA / "survey.toml")
    return analyse_velocity(settings, progress=False,
                            separation=TRUTH["antenna_separation"],
                            antenna_height=TRUTH["antenna_height"])


def _known_radii():
    """The pipes' radii as a user who knows them gives them: each with its route in plan (the
    pipes run along y, across the lines; truth.json pipe_axis), the default uncertainty."""
    ys = TRUTH["lines"]["y"]
    return [target_radius(p["radius"], route=((p["x"], ys[0] - 0.5), (p["x"], ys[-1] + 0.5)))
            for p in TRUTH["pipes"]]


@pytest.fixture(scope="module")
def known_radii_analysis():
    settings = slicer.load_settings(DATA / "survey.toml")
    return analyse_velocity(settings, progress=False,
                            separation=TRUTH["antenna_separation"],
                            antenna_height=TRUTH["antenna_height"], target_radius=_known_radii())


@pytest.fixture(scope="module")
def lines():
    settings = slicer.load_settings(DATA / "survey.toml")
    return [slicer.read_line(entry.file) for entry in settings.lines]


def _build(tmp_path_factory, **options):
    """Build the fixture survey with slicer's defaults and ``options``; the cube."""
    out = tmp_path_factory.mktemp("build") / "out"
    settings = slicer.load_settings(DATA / "survey.toml", out=str(out), **options)
    return slicer.build(settings, progress=False).cube.load()


def _profile(cube):
    """Slice value against depth and x: the median over the lines (all copies of one profile
    but for their noise). Returns (depth centres m, x m, values)."""
    values = np.nanmedian(cube.transpose("depth", "y", "x").values, axis=1)
    return np.asarray(cube["depth"].values, float), np.asarray(cube["x"].values, float), values


# ------------------------------------------------------------------------ the fixture itself

def test_fixture_trace_is_what_the_script_simulates():
    """One trace re-simulated (the apex over the steel pipe) equals the committed line's trace
    less the line's seeded noise, to float32 rounding (1e-5 of the trace's peak)."""
    index = int(round(TRUTH["pipes"][0]["x"] / TRUTH["lines"]["trace_spacing"]))
    trace = make_survey.simulate_trace(index)
    noise = make_survey.line_noise(3, TRUTH["noise"]["std"])[index]
    import segyio

    with segyio.open(DATA / "FW03.sgy", ignore_geometry=True) as f:
        stored = f.trace[index]
    assert stored.shape == trace.shape == (TRUTH["samples"],)
    assert np.abs(stored - (trace + noise)).max() < 1e-5 * np.abs(trace).max()


def test_fixture_files_are_small_and_read_by_slicer(lines):
    """The fixture stays under 3 MB, and slicer reads the rev 2 extended interval (0.1 ns)."""
    size = sum(p.stat().st_size for p in DATA.iterdir())
    assert size < 3e6, size
    assert len(lines) == TRUTH["lines"]["count"]
    for line in lines:
        assert line.sizes["trace"] == TRUTH["lines"]["traces"]
        assert line.attrs["sample_interval_ns"] == pytest.approx(TRUTH["sample_interval"])


# --------------------------------------------------------------------- slicer's measurements

def test_time_zero_pick_is_on_the_direct_wave(lines):
    """slicer's automatic time zero (the direct wave's main peak; DEVELOPERS.md glossary) lies
    after the source's emission and within one period of the direct wave's arrival (the
    transmitter-receiver distance at c). Measured 2026: 4.142-4.143 ns on every line, 0.39 ns
    after the emission (3.75 ns) and 0.075 ns before the direct wave's geometric arrival
    (4.217 ns); the time that makes the steel pipe's top depth exact at the true velocity
    (its apex time less 2 d / v) is 4.00 ns."""
    period = 1e3 / TRUTH["centre_frequency"]  # ns
    picks = np.array([slicer.pick_time_zero(line) for line in lines])
    lo, hi = TRUTH["emission_time"], TRUTH["direct_wave_time"] + period
    assert np.all((picks > lo) & (picks < hi)), (picks, lo, hi)


# Diagnosis (2026; slicer/velocity/diffraction.py docstring): the antennas' coupling through the
# air-ground interface. Envelope picks of the steel pipe (line FW03) drift early against the
# straight ray by 0.2 ns at 28 deg and 0.4-0.46 ns at 41-52 deg; the refracted least-time
# (Fermat) path leads it by 0.26 ns and 0.9-2.2 ns there, so fits with it read 20-80 % slow;
# the plane-wave-spectrum model of slicer/velocity/coupling.py, with the true v, depth and h,
# puts the same picks within 0.02-0.05 ns of the data to 48 deg. The fixture's velocity:
# 0.1128 +- 0.0026 m/ns (+12.9 %, 4.9 sigma) with straight rays; 0.1035 +- 0.0034 (+3.6 %,
# 1.0 sigma) with envelope picks corrected and fitted as points (round targets read fast as
# points, sqrt(z / (z - r)) = 1.07 and 1.08). The envelope's residual (0.03-0.06 ns, the same
# with 12 mm conductors in the pipes' place) made a free radius read 6-15 % slow; lags against
# the apex echo leave 0.014-0.021 ns (test_fullwave_coupling.py), and the free radius is then
# resolved (F-test on the lags' own residuals): radii 0.047-0.056 m and 0.068-0.083 m
# (truth 0.05 and 0.075).
def test_velocity_within_two_percent(velocity_analysis):
    """Issue 13 target: the survey velocity within 2 % of c / sqrt(9) = 0.0999 m/ns, without
    the pipes' radii. The Yee grid's own phase velocity at 400 MHz (0.0997-0.0998 m/ns,
    truth.json grid_velocity) is within 0.3 % of it, well inside the target. A round target
    of radius r whose centre is at depth z, fitted as a point, reads sqrt(z / (z - r)) = 1.07
    times too fast (apex curvature of t = 2 (sqrt(z^2 + x^2) - r) / v against the point form;
    geometry), so the pipes must be fitted as round targets of free radius. Measured 2026:
    0.09825 +- 0.0027 m/ns (-1.7 %, 0.63 sigma; the steel pipe's fits -1.0 to -2.0 %, the
    air-filled pipe's -1.3 to -2.4 %, 14 of 16 fits round; with envelope picks fitted as
    points, before, 0.1035 +- 0.0034, +3.6 %)."""
    v = velocity_analysis.velocity
    assert abs(v / TRUTH["velocity"] - 1) < 0.02, (v, velocity_analysis.velocity_std)


def test_velocity_within_two_percent_with_the_radii_given(known_radii_analysis):
    """Issue 13 target, with the pipes' radii given (``--target-radius R@route``; truth.json
    radii, each with the default 10 % uncertainty): within 2 % of c / sqrt(9) = 0.0999 m/ns
    (truth.json velocity; the Yee grid's own 0.0997-0.0998 within 0.3 % of it), and the truth
    within two stated uncertainties. Measured 2026: 0.0986 +- 0.0024 m/ns (-1.4 %,
    0.57 sigma; the steel pipe's fits -1.3 %, the air-filled pipe's -1.7 to -1.8 %, every one
    fitted with its own radius; with envelope picks, before, 0.0985 +- 0.0030). The form: the
    legs to the centre less the radius each (Shihab & Al-Nuaimy 2005 with separated antennas;
    geometry)."""
    a = known_radii_analysis
    assert abs(a.velocity / TRUTH["velocity"] - 1) < 0.02, (a.velocity, a.velocity_std)
    assert abs(a.velocity - TRUTH["velocity"]) < 2 * a.velocity_std, (a.velocity,
                                                                     a.velocity_std)
    kept = a.kept
    assert kept and all(f.fit.radius_given for f in kept)
    # both pipes, each with its own radius, on every line
    for pipe in TRUTH["pipes"]:
        mine = [f for f in kept if abs(f.x - pipe["x"]) <= 2 * TRUTH["lines"]["trace_spacing"]]
        assert {f.line for f in mine} == {e.stem for e in DATA.glob("FW*.sgy")}, pipe["name"]
        assert all(f.fit.radius == pipe["radius"] for f in mine)


def test_velocity_json_records_the_radii_given(known_radii_analysis):
    """The JSON of ``slicer velocity`` lists the radii given (m, with uncertainty and route)
    and which fits were fitted with one."""
    record = known_radii_analysis.to_json()
    assert [t["radius"] for t in record["target_radius"]] == [p["radius"]
                                                             for p in TRUTH["pipes"]]
    assert all(t["radius_std"] == pytest.approx(0.1 * t["radius"])
               for t in record["target_radius"])
    assert record["units"]["target_radius"] == "m"
    assert all(r["radius_given"] for r in record["fits"] if r["kept"])


def test_velocity_error_is_within_its_stated_uncertainty(velocity_analysis):
    """The stated one-sigma uncertainty of the survey velocity should cover its error (within
    three sigma; a normal error is outside 3 sigma 0.3 % of the time). Measured 2026: error
    0.0017 m/ns against 0.0027 (0.63 sigma; the systematic terms in it: the antenna height,
    and half the difference from the fit of envelope peaks); with envelope picks fitted as
    points it was 1.0 sigma, with straight rays 4.9 sigma."""
    v, std = velocity_analysis.velocity, velocity_analysis.velocity_std
    assert abs(v - TRUTH["velocity"]) < 3 * std, (v, std, TRUTH["velocity"])


# passes since the peak search's neighbourhood is a wavelength, not half the aperture (measured:
# both pipes on all 8 lines; air-filled apex x 1.644-1.651 m, 10.13 ns below the bistatic
# time zero; steel x 0.750 m, 7.47 ns)
def test_every_pipe_gets_a_hyperbola(velocity_analysis, lines):
    """Each pipe's hyperbola is found on every line: a fit within two trace spacings of the
    pipe's x and within one period of its apex time (truth.json apex_time, less the picked
    time zero). Measured 2026: the steel pipe on all 8 lines (x within 0.001 m, time 0.14 ns
    late); the air-filled pipe on none."""
    period = 1e3 / TRUTH["centre_frequency"]
    fits = velocity_analysis.fits
    t_zero = float(np.median([slicer.pick_time_zero(line) for line in lines]))  # ns
    for pipe in TRUTH["pipes"]:
        near = {f.line for f in fits
                if abs(f.x - pipe["x"]) <= 2 * TRUTH["lines"]["trace_spacing"]
                and abs(f.time - (pipe["apex_time"] - t_zero)) <= period}
        assert len(near) == TRUTH["lines"]["count"], (pipe["name"], sorted(near))


def _pipe_depths(cube) -> list[float]:
    """Depth of the brightest slice value at each pipe's x, above the interface, refined by a
    parabola through the neighbouring slices (m)."""
    depth, x, values = _profile(cube)
    found = []
    for pipe in TRUTH["pipes"]:
        col = values[:, int(np.argmin(np.abs(x - pipe["x"])))]
        usable = depth < TRUTH["interface_depth"] - QUARTER
        k = int(np.nanargmax(np.where(usable, col, -np.inf)))
        y0, y1, y2 = col[k - 1:k + 2]
        shift = 0.5 * (y0 - y2) / (y0 - 2 * y1 + y2)
        found.append(float(depth[k] + shift * (depth[1] - depth[0])))
    return found


def _depth_errors(cube) -> list[float]:
    return [f - p["depth_top"] for f, p in zip(_pipe_depths(cube), TRUTH["pipes"], strict=True)]


def test_pipe_depths_within_a_quarter_wavelength(tmp_path_factory):
    """Issue 13 target, with the true velocity given: each pipe's brightest depth (0.02 m
    slices, otherwise defaults) within a quarter wavelength (0.062 m) of its top (truth.json
    depth_top). Measured 2026: steel +0.013 m, air-filled +0.021 m."""
    errors = _depth_errors(_build(tmp_path_factory, velocity=TRUTH["velocity"],
                                  depths=FINE_DEPTHS))
    assert all(abs(e) < QUARTER for e in errors), errors


def test_pipe_depths_end_to_end(velocity_analysis, tmp_path_factory):
    """Issue 13 target, end to end: the velocity ``slicer velocity`` finds (with the antenna
    height), then the build; each pipe's depth within a quarter wavelength of its top.
    Measured 2026 at 0.0982 m/ns: steel +0.007 m, air-filled +0.012 m (at 0.1035 m/ns, points
    fitted to envelope picks, +0.026 and +0.037; at 0.1128 m/ns, with straight rays, +0.055
    and +0.078)."""
    errors = _depth_errors(_build(tmp_path_factory, velocity=velocity_analysis.velocity,
                                  depths=FINE_DEPTHS))
    assert all(abs(e) < QUARTER for e in errors), errors


def _ghost_ratio(cube) -> float:
    """Brightest stripe under a pipe over the weaker pipe, in slice contrast (a slice's value
    at the pipe's x less the slice's median over x). A pipe's own brightness: the largest
    contrast within a quarter wavelength of its top. Under it: the largest contrast in slices
    wholly between a quarter wavelength below the pipe's bottom and a quarter wavelength above
    the interface (the interface's own echo, disturbed under each pipe, is not a ghost)."""
    depth, x, values = _profile(cube)
    half = 0.5 * (depth[1] - depth[0])
    contrast = values - np.nanmedian(values, axis=1, keepdims=True)
    own, under = [], []
    for pipe in TRUTH["pipes"]:
        col = contrast[:, int(np.argmin(np.abs(x - pipe["x"])))]
        near = np.abs(depth - pipe["depth_top"]) <= QUARTER + half
        below = ((depth - half >= pipe["depth_centre"] + pipe["radius"] + QUARTER)
                 & (depth + half <= TRUTH["interface_depth"] - QUARTER))
        assert below.any(), pipe  # the window holds at least one default slice
        own.append(float(np.nanmax(col[near])))
        under.append(float(np.nanmax(col[below])))
    return max(under) / min(own)


def test_no_ghost_stripe_under_the_pipes(tmp_path_factory):
    """Issue 13 target: in the default slices (true velocity given, nothing else), nothing
    under a pipe brighter than half the weaker pipe. Measured 2026: 0.24 (the steel pipe's
    surface multiple near 0.7 m against the air-filled pipe's 556)."""
    assert _ghost_ratio(_build(tmp_path_factory, velocity=TRUTH["velocity"])) < 0.5


def test_velocity_json_records_the_antenna_height(velocity_analysis):
    """The JSON of ``slicer velocity`` says which antenna height corrected the picks (m)."""
    record = velocity_analysis.to_json()
    assert record["antenna_height"] == TRUTH["antenna_height"]
    assert record["units"]["antenna_height"] == "m"
