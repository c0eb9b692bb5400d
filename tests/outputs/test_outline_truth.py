"""Anomaly outlines against buried truth: a wall, a pipe, a cellar floor and scattered stones.

A small synthetic survey (slicer.synthetic, our own invented scenario) is built through the whole
pipeline and outlined with the default rule. Each target's outline in the slice holding its top
is compared with its true footprint by intersection over union (shapely, the reference geometry
library), and outlines away from every target are counted.

Footprint rule: the target's plan shape (a wall or pipe: its line; a stone: its disc; the
cellar: its rectangle) widened by the radar's lateral resolution plus half a grid cell. Across
the survey lines, which 2-D migration leaves as recorded, that is the first Fresnel zone's
radius ``sqrt(lambda d / 2 + lambda² / 16)`` (GPR textbooks, e.g. Annan's "Ground penetrating
radar: principles, procedures and applications"; from memory); along the lines, after
migration, a quarter wavelength (migrated lateral resolution about half a wavelength: common
practice, from memory). The cellar's rectangle is not widened: its edges are real.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
import shapely.affinity
import shapely.geometry

from slicer import build_cube
from slicer.outputs.outlines import outline
from slicer.pipeline.settings import load_settings
from slicer.synthetic import (
    Ground,
    LineTarget,
    PlateTarget,
    PointTarget,
    Radar,
    grid_lines,
    write_survey,
)

E, N = 512000.0, 4650000.0
VELOCITY, FREQUENCY_GHZ, CELL = 0.1, 0.4, 0.05
WAVELENGTH = VELOCITY / FREQUENCY_GHZ  # m: v / f
# every top sits mid-slice (slices 0.1 m thick from 0.2 m)
TARGETS = {
    "wall": LineTarget(E + 0.8, N + 0.8, E + 5.0, N + 2.6, 0.45),  # 23 degrees off the lines
    "pipe": LineTarget(E + 7.0, N + 0.5, E + 7.0, N + 5.5, 0.75, amplitude=0.8),  # across
    "cellar": PlateTarget(E + 1.5, N + 3.5, E + 4.0, N + 5.5, 1.05),
    "stone 1": PointTarget(E + 5.55, N + 4.55, 0.55, amplitude=0.6, radius=0.15),
    "stone 2": PointTarget(E + 5.05, N + 0.75, 0.85, amplitude=0.6, radius=0.15),
    "stone 3": PointTarget(E + 0.85, N + 2.55, 0.65, amplitude=0.5, radius=0.1),
}
#: Lowest IoU asserted per target: measured with the default rule less 0.1 (measured: wall
#: 0.88, pipe 0.58, cellar 0.72, stones 0.33, 0.35, 0.36), so that losing a tenth fails.
MIN_IOU = {"wall": 0.78, "pipe": 0.48, "cellar": 0.62, "stone 1": 0.23, "stone 2": 0.25,
           "stone 3": 0.26}
#: Outlines allowed away from every target: measured 2 with the default rule (margin 2);
#: 25 with rules 2 and 3 off (robust deviations only, the rule before issue 16).
MAX_FALSE = 4


def fresnel_radius(depth: float) -> float:
    """First Fresnel zone radius, m (see the module docstring)."""
    return math.sqrt(WAVELENGTH * depth / 2 + WAVELENGTH ** 2 / 16)


def footprint(target):
    """The footprint by the module docstring's rule (lines run along x)."""
    if isinstance(target, PlateTarget):
        return shapely.geometry.box(target.xmin, target.ymin, target.xmax, target.ymax)
    if isinstance(target, LineTarget):
        shape = shapely.geometry.LineString([(target.x0, target.y0), (target.x1, target.y1)])
    else:
        shape = shapely.geometry.Point(target.x, target.y).buffer(target.radius, 64)
    along = WAVELENGTH / 4 + CELL / 2
    across = fresnel_radius(target.depth) + CELL / 2
    # widening by an ellipse: squeeze y so that it becomes a circle, buffer, stretch back
    squeezed = shapely.affinity.scale(shape, 1.0, along / across, origin=(0, 0))
    return shapely.affinity.scale(squeezed.buffer(along, 64), 1.0, across / along,
                                  origin=(0, 0))


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    ground = Ground(velocity=VELOCITY, attenuation_db_per_m=2.0, targets=tuple(TARGETS.values()))
    radar = Radar(frequency_mhz=FREQUENCY_GHZ * 1000, wavelet="ricker", sample_interval_ns=0.1,
                  samples=320, time_zero_ns=3.0, seed=16)
    lines = grid_lines(west=E, south=N, length=8.0, width=6.0, line_spacing=0.25,
                       trace_spacing=0.05, direction="x", zigzag=True)
    folder = tmp_path_factory.mktemp("outline_truth")
    written = write_survey(folder, ground, radar, lines, format="segy", crs="EPSG:32633",
                           progress=False, overwrite=True)
    settings = load_settings(written.line_table, crs="EPSG:32633", sample_interval=0.1,
                             time_zero=3.0, velocity=VELOCITY, cell=CELL, depths="0.2:1.4:0.1")
    return build_cube(settings, progress=False).cube


def slice_of(cube, depth: float) -> int:
    tops, bottoms = cube["depth_top"].values, cube["depth_bottom"].values
    return int(np.flatnonzero((tops <= depth) & (depth < bottoms))[0])


def iou_per_target(cube, found) -> dict[str, float]:
    result = {}
    for name, target in TARGETS.items():
        true = footprint(target)
        k = slice_of(cube, target.depth)
        mine = [p["geometry"] for p in found.patches if p["slice"] == k
                and p["geometry"].intersects(true)]
        drawn = shapely.unary_union(mine) if mine else shapely.geometry.Polygon()
        result[name] = drawn.intersection(true).area / drawn.union(true).area
    return result


def false_outlines(found) -> list[dict]:
    """Outlines of any slice farther than 0.5 m from every footprint."""
    near = shapely.unary_union([footprint(t) for t in TARGETS.values()]).buffer(0.5)
    return [p for p in found.patches if not p["geometry"].intersects(near)]


def test_outlines_match_the_true_footprints(survey):
    ious = iou_per_target(survey, outline(survey))
    assert {name: round(v, 2) for name, v in ious.items() if v < MIN_IOU[name]} == {}


def test_stones_are_outlined_where_they_lie(survey):
    found = outline(survey)
    for name, stone in TARGETS.items():
        if not isinstance(stone, PointTarget):
            continue
        k = slice_of(survey, stone.depth)
        mine = [p["geometry"] for p in found.patches if p["slice"] == k
                and p["geometry"].intersects(footprint(stone))]
        centre = shapely.unary_union(mine).centroid
        # measured within 0.02 m; a quarter wavelength (the migrated resolution's half) allowed
        assert math.hypot(centre.x - stone.x, centre.y - stone.y) <= WAVELENGTH / 4, name


def test_few_outlines_in_target_free_ground(survey):
    assert len(false_outlines(outline(survey))) <= MAX_FALSE
    # the bound can fail: without rules 2 and 3 (robust deviations only) halos and faint
    # texture pass on quiet synthetic ground
    assert len(false_outlines(outline(survey, fraction=0.0, floor=0.0))) > MAX_FALSE


def test_bodies_start_within_one_slice_of_each_top(survey):
    found = outline(survey)
    step = 0.1
    for name, target in TARGETS.items():
        true = footprint(target)
        k = slice_of(survey, target.depth)
        top = float(survey["depth_top"].values[k])
        # the body that holds the target's outline in its slice
        holding = [b for b in found.bodies if b["geometry"].intersects(true)
                   and b["top"] <= top + 1e-9 and b["bottom"] >= top + step - 1e-9]
        assert holding, name
        assert min(abs(b["top"] - top) for b in holding) <= step + 1e-9, name
