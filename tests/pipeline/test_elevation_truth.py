"""Elevation slices against synthetic ground truth on a 10 % slope (issue 17's done-when).

The survey is slicer.synthetic.slope_survey: a level floor at 119.45 m under ground rising from
120.0 to 121.44 m above the datum, a drain at 119.75 m and a stone at 119.95 m. Its truth is the
scenario's own geometry; the checks are the definition of elevation (ground - depth) and a
quarter wavelength, v / f / 4 (common practice for a vertical resolution limit), as tolerance.
"""

import json

import numpy as np
import pytest

from slicer.pipeline.cube_build import build_cube
from slicer.pipeline.settings import load_settings

BASE = {"crs": "EPSG:32633", "track_crs": "EPSG:32633", "velocity": 0.1, "time_zero": 3.0,
        "radargrams": False}
QUARTER_WAVELENGTH = 0.1 / 0.4 / 4  # m: 0.1 m/ns at 400 MHz (0.4 GHz)
DRAIN_X, STONE = 513006.0, (513008.55, 4651002.05)


@pytest.fixture(scope="module")
def slope(tmp_path_factory):
    from slicer.synthetic import slope_survey, write_survey
    ground, radar, lines, crs = slope_survey()
    survey = write_survey(tmp_path_factory.mktemp("slope") / "survey", ground, radar, lines,
                          crs=crs, progress=False)
    return survey.folder, json.loads(survey.truth_file.read_text())


TERRAINS = {"gnss": {"terrain": "gnss", "gnss_height": 1.0},
            "table": {"terrain": "table"},
            "dem": {"terrain": "dem.tif"}}


def build(folder, **options):
    if options.get("terrain") == "dem.tif":
        options["terrain"] = str(folder / "dem.tif")
    return build_cube(load_settings(folder / "lines.csv", **BASE, **options),
                      progress=False).cube


def floor_slices(cube):
    """Per cell of floor-only ground, the slice holding the strongest value."""
    x, y = np.meshgrid(cube["x"].values, cube["y"].values)
    away = (np.abs(x - DRAIN_X) > 1.0) & (np.hypot(x - STONE[0], y - STONE[1]) > 1.5)
    v = cube.values
    cells = np.isfinite(v).any(axis=0) & away
    strongest = np.argmax(np.where(np.isfinite(v), v, -np.inf), axis=0)
    return strongest[cells]


@pytest.fixture(scope="module")
def cubes(slope):
    folder, _ = slope
    out = {"depth": build(folder, depths="0:2.4:0.1")}
    for name, options in TERRAINS.items():
        out[name] = build(folder, slices="elevation", datum="site datum",
                          elevations="121.4:118.6:0.1", **options)
    return out


def test_the_floor_lies_in_one_elevation_slice_and_across_many_depth_slices(cubes, slope):
    floor = slope[1]["layers"][0]["elevation"]
    depth_spread = np.unique(floor_slices(cubes["depth"])).size
    for name in TERRAINS:
        cube = cubes[name]
        held = floor_slices(cube)
        assert held.size > 5000
        assert np.unique(held).size == 1, name  # every floor cell in one slice
        top, bottom = (float(cube[f"elevation_{k}"].values[held[0]]) for k in ("top", "bottom"))
        assert bottom < floor < top  # and it is the slice holding the floor's elevation
    # below a 10 % slope the same floor runs 0.55 to 1.99 m deep: at least 12 of 0.1 m
    assert depth_spread >= 12


def test_gnss_dem_and_table_grounds_give_the_same_cube(cubes):
    # The three grounds agree to 2e-6 m (the DEM's float32 and the heights' text); a value may
    # change only where a window's top meets the ground (a trace is in or out of the window)
    reference = cubes["table"].values
    finite = np.isfinite(reference)
    peak = np.nanmax(np.abs(reference))
    for name in ("gnss", "dem"):
        other = cubes[name].values
        assert (np.isfinite(other) == finite).mean() > 0.999
        both = finite & np.isfinite(other)
        assert np.max(np.abs(other[both] - reference[both])) < 1e-3 * peak


@pytest.mark.parametrize("name", list(TERRAINS))
def test_target_elevations_within_a_quarter_wavelength(slope, name):
    folder, truth = slope
    cube = build(folder, slices="elevation", datum="site datum",
                 elevations="120.3:119.6:0.01", **TERRAINS[name])
    targets = {t["kind"]: t["elevation"] for t in truth["targets"]}
    for kind, (x, y) in {"point": STONE, "line": (DRAIN_X, 4651004.0)}.items():
        profile = cube.sel(x=x, y=y, method="nearest")
        found = float(profile["elevation"][int(np.nanargmax(profile.values))])
        assert abs(found - targets[kind]) <= QUARTER_WAVELENGTH, (kind, found)
