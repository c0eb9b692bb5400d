"""Vertical sections through a synthetic cube holding a known dipping plane.

The cube is written here from a formula (a plane dipping east at a known slope, its echo a
Gaussian in depth), not by slicer's pipeline; values between cells are checked against
scipy.interpolate.RegularGridInterpolator, the reference bilinear interpolator.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.interpolate
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from slicer.core.errors import SettingsError
from slicer.outputs.cube import new_cube
from slicer.outputs.section import plot_section, section

WEST, NORTH, CELL = 500000.0, 4200010.0, 0.1
NX, NY = 80, 100  # 8 m east, 10 m north
TOPS = np.round(np.arange(0.0, 2.0, 0.05), 6)
SLOPE, DEPTH0 = 0.15, 0.4  # the plane: depth = 0.4 + 0.15 * (x - WEST)


def plane_cube(holes=False):
    x = WEST + CELL * (np.arange(NX) + 0.5)
    mid = TOPS + 0.025
    depth = DEPTH0 + SLOPE * (x - WEST)
    data = np.exp(-((mid[:, None, None] - depth[None, None, :]) / 0.05) ** 2)
    data = np.broadcast_to(data, (len(TOPS), NY, NX)).copy()
    if holes:
        data[:, 40:60, 30:50] = np.nan  # a tree: no traces
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633", top=TOPS,
                    bottom=TOPS + 0.05)


def test_a_section_across_the_dip_follows_the_plane():
    cube = plane_cube()
    s = section(cube, [(WEST + 0.5, NORTH - 5), (WEST + 7.5, NORTH - 5)], spacing=0.1)
    assert s.dims == ("distance", "depth")
    peak = s["depth"].values[np.argmax(s.values, axis=1)]
    truth = DEPTH0 + SLOPE * (s["x"].values - WEST)
    assert np.abs(peak - truth).max() <= 0.025 + 1e-9  # half a slice
    np.testing.assert_allclose(s["distance"].values[-1], 7.0)
    assert s["distance"].attrs["units"] == "m"


def test_a_section_along_the_strike_stays_at_one_depth():
    cube = plane_cube()
    x = WEST + 4.05
    s = section(cube, [(x, NORTH - 0.5), (x, NORTH - 9.5)])
    peak = s["depth"].values[np.argmax(s.values, axis=1)]
    assert np.ptp(peak) == 0 and abs(peak[0] - (DEPTH0 + SLOPE * 4.05)) <= 0.025


@settings(max_examples=30, deadline=None)
@given(st.lists(st.tuples(st.floats(0.1, 7.9), st.floats(0.1, 9.9)), min_size=2, max_size=4,
                unique=True))
def test_values_equal_the_reference_bilinear_interpolator(vertices):
    cube = plane_cube()
    pts = [(WEST + u, NORTH - v) for u, v in vertices]
    assume(all(math.hypot(a[0] - b[0], a[1] - b[1]) > 1e-6
               for a, b in zip(pts, pts[1:], strict=False)))
    s = section(cube, pts, spacing=0.37)
    ref = scipy.interpolate.RegularGridInterpolator(
        (cube["y"].values[::-1], cube["x"].values), np.moveaxis(cube.values[:, ::-1, :], 0, -1),
        method="linear", bounds_error=False, fill_value=np.nan)
    expected = ref(np.column_stack([s["y"].values, s["x"].values]))
    np.testing.assert_allclose(s.values, expected, rtol=1e-5, atol=1e-6)
    # every vertex is a sample
    for px, py in pts:
        assert np.isclose(np.hypot(s["x"].values - px, s["y"].values - py), 0).any()


def test_gaps_stay_gaps():
    cube = plane_cube(holes=True)
    s = section(cube, [(WEST + 0.5, NORTH - 5), (WEST + 7.5, NORTH - 5)])
    inside_hole = (s["x"].values > WEST + 3.1) & (s["x"].values < WEST + 4.9)
    assert np.isnan(s.values[inside_hole]).all()
    assert np.isfinite(s.values[~inside_hole & (s["x"].values < WEST + 2.5)]).all()


@pytest.mark.parametrize("points, spacing, match", [
    ([(WEST, NORTH)], None, "two or more"),
    ([(WEST + 1, NORTH - 1), (WEST + 1, NORTH - 1)], None, "the same"),
    ([(WEST + 1, NORTH - 1), (math.nan, NORTH - 1)], None, "finite"),
    ([(WEST + 1, NORTH - 1), (WEST + 2, NORTH - 1)], 0.0, "positive"),
    # 1 m at 1e-9 m is 1e9 samples (21 GB had been asked for): refused, naming the least
    ([(WEST + 1, NORTH - 1), (WEST + 2, NORTH - 1)], 1e-9, "choose at least 1e-05 m"),
    ([(0.0, 0.0), (1.0, 1.0)], None, "misses"),
    ("abc", None, "points"),
])
def test_bad_paths_are_refused(points, spacing, match):
    with pytest.raises(SettingsError, match=match):
        section(plane_cube(), points, spacing=spacing)


def section_image(figure):
    ax = next(a for a in figure.axes if a.get_images())
    return ax.get_images()[0]


def test_plot_section_takes_the_overview_display_options(tmp_path):
    sec = section(plane_cube(holes=True), [(WEST + 0.5, NORTH - 5), (WEST + 7.5, NORTH - 5)])
    values = sec.transpose("depth", "distance").values
    shared = section_image(plot_section(sec, clip=(5, 95)))
    # Reference: numpy.nanpercentile over the whole section.
    expected = np.nanpercentile(values, [5, 95])
    assert (shared.norm.vmin, shared.norm.vmax) == pytest.approx(tuple(expected))
    rows = section_image(plot_section(sec, stretch="per-slice", clip=(5, 95)))
    shown = np.ma.filled(rows.get_array().astype(float), np.nan)
    # Per-slice: each depth row on 0-1 of its own 5th-95th nanpercentiles.
    for i in (3, 10, 25):
        low, high = np.nanpercentile(values[i], [5, 95])
        np.testing.assert_allclose(shown[i], (values[i] - low) / (high - low), rtol=1e-5,
                                   atol=1e-6)
    assert (rows.norm.vmin, rows.norm.vmax) == (0, 1)
    path = tmp_path / "section.png"
    plot_section(sec, path, colormap="greyscale", dpi=50)
    from PIL import Image
    with Image.open(path) as image:  # reference: Pillow reads the PNG back
        rgb = np.asarray(image.convert("RGB")).astype(int)
    assert rgb.std() > 10
    assert (rgb[..., 0] == rgb[..., 1]).all() and (rgb[..., 1] == rgb[..., 2]).all()


def test_plot_section_refuses_bad_display_options():
    sec = section(plane_cube(), [(WEST + 0.5, NORTH - 5), (WEST + 7.5, NORTH - 5)])
    for options, where in (({"colormap": "magmaa"}, "colormap"), ({"stretch": "row"}, "stretch"),
                           ({"clip": (50, 10)}, "clip")):
        with pytest.raises(SettingsError) as info:
            plot_section(sec, **options)
        assert info.value.where == where
    with pytest.raises(SettingsError, match="magma"):
        plot_section(sec, colormap="magmaa")


def test_a_section_keeps_the_cubes_float32_and_its_vertices_as_one_array(tmp_path):
    # amplitudes stay float32 (the project's data model) though interpolation runs in
    # float64; the path is one flat array (x1, y1, x2, y2): NetCDF attributes hold arrays,
    # not Python lists
    cube = new_cube(np.random.default_rng(2).random((3, 20, 30), dtype=np.float32), west=0.0,
                    north=1.0, cell=0.05, crs="EPSG:32633", top=np.array([0.1, 0.2, 0.3]),
                    bottom=np.array([0.2, 0.3, 0.4]))
    sec = section(cube, [(0.2, 0.5), (1.3, 0.6)])
    assert sec.dtype == np.float32
    vertices = sec.attrs["section_vertices"]
    assert isinstance(vertices, np.ndarray) and vertices.dtype == np.float64
    np.testing.assert_array_equal(vertices, [0.2, 0.5, 1.3, 0.6])
    sec.to_dataset(name="s").to_netcdf(tmp_path / "s.nc", engine="h5netcdf")
    plot_section(sec, tmp_path / "s.png")
    assert (tmp_path / "s.png").stat().st_size > 0
