"""Slices against ground truth: a buried drain lies on its true line in every slice.

Geometry only (where a line target is, against where the slices put it): the survey is made by
slicer's own forward model, so this is a regression check of placement, not of the wave
physics (tests/fullwave holds the independent check). Below a buried target, an unmigrated
slice cuts the flanks of its hyperbola and shows two bands beside it, at
``x = sqrt((v t / 2)^2 - d^2)`` (the point-diffractor travel time; common practice); migration
collapses them onto the target.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from slicer.pipeline.cube_build import build_cube
from slicer.pipeline.settings import load_settings
from slicer.synthetic import Ground, Radar, grid_lines, write_survey
from slicer.synthetic.forward import LineTarget

E, N = 512000.0, 4650000.0
DRAIN = (E + 2.4, N + 0.0, E + 1.6, N + 6.0)  # x0, y0, x1, y1: 82 degrees to the lines
DEPTH = 0.95


def drain_x(y):
    x0, y0, x1, y1 = DRAIN
    return x0 + (y - y0) * (x1 - x0) / (y1 - y0)


@pytest.fixture(scope="module")
def drain_survey(tmp_path_factory):
    ground = Ground(velocity=0.1, attenuation_db_per_m=3.0,
                    targets=(LineTarget(*DRAIN, DEPTH, amplitude=0.8),))
    radar = Radar(frequency_mhz=400.0, wavelet="ricker", sample_interval_ns=0.1, samples=400,
                  time_zero_ns=3.0, seed=5)
    lines = grid_lines(west=E, south=N, length=4.0, width=6.0, line_spacing=0.5,
                       trace_spacing=0.05, direction="x", zigzag=True)
    folder = tmp_path_factory.mktemp("drain") / "survey"
    return write_survey(folder, ground, radar, lines, format="segy", crs="EPSG:32633",
                        progress=False)


def ridge(cube, true_x, reach):
    """Per grid row 0.5-5.5 m north, the brightest cell within ``reach`` m of the feature's
    true line ``true_x(y)``, minus that line (m)."""
    xs = cube["x"].values
    out = []
    for y in cube["y"].values:
        if not N + 0.5 < y < N + 5.5:
            continue
        row = cube.sel(y=y).values
        near = np.abs(xs - true_x(y)) < reach
        out.append(xs[int(np.nanargmax(np.where(near, row, -np.inf)))] - true_x(y))
    return np.array(out)


def ridge_offsets(cube):
    """Distance (m) from the drain's true line to the brightest cell within 1 m of it."""
    return np.abs(ridge(cube, drain_x, 1.0))


@pytest.mark.parametrize("top", [0.9, 1.0, 1.1])
def test_migrated_slices_put_the_drain_on_its_line(drain_survey, top):
    def offsets(migrate):
        settings = load_settings(drain_survey.folder / "lines.csv", crs="EPSG:32633",
                                 sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.05,
                                 depths=f"{top}:{top + 0.1:.1f}:0.1", migrate=migrate)
        cube = build_cube(settings, progress=False).cube
        return ridge_offsets(cube.isel({cube.dims[0]: 0}))

    focused = offsets("auto")  # the default: Stolt at one velocity
    assert np.median(focused) <= 0.05  # a cell of 0.05 m
    if top > DEPTH:  # below the drain the unmigrated slice cuts the hyperbola's flanks
        flank = math.sqrt((top + 0.05) ** 2 - DEPTH ** 2)  # window middle
        assert np.median(offsets("off")) == pytest.approx(flank, abs=0.1)


# --- a survey walked both ways with a wheel lag -----------------------------------------------

LAG = 0.15  # m: each trace shows the ground this far ahead of its recorded place
WALL = (E + 0.8, N + 0.0, E + 3.2, N + 6.0)  # 68 degrees to the lines


def wall_x(y):
    x0, y0, x1, y1 = WALL
    return x0 + (y - y0) * (x1 - x0) / (y1 - y0)


@pytest.fixture(scope="module")
def lagged_survey(tmp_path_factory):
    """Lines simulated where the antenna really was (LAG ahead along travel), tabled where the
    wheel said it was: a recorded-with-lag survey."""
    from slicer.synthetic.surveys import PlannedLine
    ground = Ground(velocity=0.1, attenuation_db_per_m=3.0,
                    targets=(LineTarget(*WALL, 0.5, amplitude=1.0),))
    radar = Radar(frequency_mhz=400.0, wavelet="ricker", sample_interval_ns=0.1, samples=300,
                  time_zero_ns=3.0, seed=9)
    nominal = grid_lines(west=E, south=N, length=4.0, width=6.0, line_spacing=0.5,
                         trace_spacing=0.05, direction="x", zigzag=True)
    true = []
    for ln in nominal:
        ux = math.copysign(1.0, ln.end_x - ln.start_x)
        true.append(PlannedLine(ln.name, ln.start_x + LAG * ux, ln.start_y,
                                ln.end_x + LAG * ux, ln.end_y, ln.n_traces))
    folder = tmp_path_factory.mktemp("lagged") / "survey"
    survey = write_survey(folder, ground, radar, true, format="segy", crs="EPSG:32633",
                          progress=False)
    table = survey.folder / "lines.csv"  # the wheel's positions
    rows = ["file,start_x,start_y,end_x,end_y"] + [
        f"{ln.name}.sgy,{ln.start_x},{ln.start_y},{ln.end_x},{ln.end_y}" for ln in nominal]
    table.write_text("\n".join(rows) + "\n")
    return survey


def _wall_residuals(cube):
    return ridge(cube, wall_x, 0.6)


def _lagged_build(survey, **options):
    settings = load_settings(survey.folder / "lines.csv", crs="EPSG:32633",
                             sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.05,
                             depths="0.45:0.55:0.1", **options)
    result = build_cube(settings, progress=False)
    return result.cube.isel({result.cube.dims[0]: 0}), result.record


def test_a_lagged_zigzag_survey_is_estimated_and_straightened(lagged_survey):
    before, _ = _lagged_build(lagged_survey)
    after, record = _lagged_build(lagged_survey, zigzag_shift="auto")
    found = record["zigzag"]
    assert found["estimated"] and abs(found["shift_m"] - LAG) < 0.05  # one trace spacing
    # before: every other line's wall is 2 x LAG from its neighbour's (a saw-tooth);
    # after: on the line, within a cell or two
    saw = _wall_residuals(before)
    assert np.ptp(saw) > 1.5 * LAG
    assert np.percentile(np.abs(_wall_residuals(after)), 90) <= 0.075


def test_a_given_shift_is_applied_as_given(lagged_survey):
    after, record = _lagged_build(lagged_survey, zigzag_shift=LAG)
    assert record["zigzag"] == {"estimated": False, "shift_m": LAG}
    assert np.percentile(np.abs(_wall_residuals(after)), 90) <= 0.075
