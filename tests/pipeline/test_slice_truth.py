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

from slicer.pipeline.build import build_cube
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


def ridge_offsets(cube):
    """Per grid row, the distance (m) from the drain's true line to the brightest cell within
    1 m of it."""
    xs = cube["x"].values
    out = []
    for y in cube["y"].values:
        if not N + 0.5 < y < N + 5.5:
            continue
        row = cube.sel(y=y).values
        near = np.abs(xs - drain_x(y)) < 1.0
        k = int(np.nanargmax(np.where(near, row, -np.inf)))
        out.append(xs[k] - drain_x(y))
    return np.abs(np.array(out))


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
