"""Tests of slicer.synthetic on uneven ground: surface models (terrain), the straight-ray travel
times below them, the tracks, line-table columns, DEM and truth written for them
(terrain_files) and the ready sloping survey (scenarios)."""

from __future__ import annotations

import csv
import dataclasses
import json
import math
import warnings

import numpy as np
import pyproj
import pytest
import rasterio
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from rasterio.transform import xy as cell_centre_xy
from scipy.signal import hilbert

from slicer.core.errors import SettingsError, SlicerWarning
from slicer.io.linetable import read_line_table
from slicer.synthetic import (
    SLOPE_ELEVATIONS,
    Ground,
    Layer,
    LineTarget,
    Mound,
    PlannedLine,
    PlateTarget,
    PointTarget,
    Radar,
    Slope,
    SurfaceOptions,
    grid_lines,
    simulate_line,
    slope_survey,
    write_survey,
)

#: CODATA 2018 speed of light in vacuum, m/ns (exact by the SI definition of the metre).
C = 0.299792458

#: A radar with nothing but the reflections and a long record, so peaks can be located.
CLEAN = Radar(direct_amplitude=0.0, ringing_amplitude=0.0, wow_amplitude=0.0, noise=0.0,
              samples=700)


def _peak_times(data: np.ndarray, twt: np.ndarray) -> np.ndarray:
    """Time of each trace's envelope maximum, ns (envelope: |analytic signal|, scipy)."""
    return twt[np.argmax(np.abs(hilbert(data, axis=-1)), axis=-1)]


def _plane(x, y, *, x0, y0, z0, gx, gy):
    # the plane through (x0, y0, z0) rising gx per metre in x and gy in y, written out here
    return z0 + gx * (np.asarray(x) - x0) + gy * (np.asarray(y) - y0)


# --- surface models ----------------------------------------------------------------------------

def test_slope_elevation_matches_hand_computed_values():
    s = Slope(x0=10.0, y0=20.0, z0=100.0, gradient_x=0.1, gradient_y=-0.05)
    # hand-computed: 100 + 0.1 dx - 0.05 dy
    got = s.elevation([10.0, 12.0, 10.0, 14.0, 0.0], [20.0, 20.0, 24.0, 22.0, 0.0])
    np.testing.assert_allclose(got, [100.0, 100.2, 99.8, 100.3, 100.0], atol=1e-12)
    # 3-4-5 triangle: a 0.08 / 0.06 slope has a steepest grade of exactly 0.10 (10 %)
    assert Slope(0.0, 0.0, 0.0, 0.08, 0.06).grade == pytest.approx(0.10, abs=1e-15)
    assert s.elevation(np.zeros((2, 3)), 20.0).shape == (2, 3)  # broadcasts


def test_mound_elevation_matches_hand_computed_values():
    m = Mound(x0=5.0, y0=5.0, base=50.0, height=1.2, radius=2.0)
    # Gaussian bump: full height at the centre, exp(-1/2) = 0.6065307 of it one radius out
    # (tables of e^x), exp(-2) = 0.1353353 two radii out, the base far away
    got = m.elevation([5.0, 7.0, 5.0, 9.0, 105.0], [5.0, 5.0, 3.0, 5.0, 5.0])
    np.testing.assert_allclose(
        got, [51.2, 50.0 + 1.2 * 0.6065307, 50.0 + 1.2 * 0.6065307, 50.0 + 1.2 * 0.1353353,
              50.0], atol=1e-6)


_SLOPE_FIELDS = ("x0", "y0", "z0", "gradient_x", "gradient_y")
_MOUND_FIELDS = ("x0", "y0", "base", "height", "radius")


@settings(max_examples=40, deadline=None)
@given(which=st.sampled_from([(Slope, f) for f in _SLOPE_FIELDS]
                             + [(Mound, f) for f in _MOUND_FIELDS]),
       bad=st.sampled_from([math.nan, math.inf, -math.inf, "1.0", None, True]))
def test_bad_surface_parameters_name_the_field(which, bad):
    kind, name = which
    good = dict.fromkeys(_SLOPE_FIELDS if kind is Slope else _MOUND_FIELDS, 1.0)
    with pytest.raises(SettingsError) as info:
        kind(**{**good, name: bad})
    assert info.value.where == f"{kind.__name__}.{name}"


@pytest.mark.parametrize("make, where", [
    (lambda: Mound(0.0, 0.0, 10.0, 1.0, 0.0), "Mound.radius"),
    (lambda: Ground(surface=Slope(0.0, 0.0, 10.0)), "Ground.reference_elevation"),
    (lambda: Ground(reference_elevation=10.0), "Ground.reference_elevation"),
    (lambda: Ground(surface=Slope(0.0, 0.0, 10.0), reference_elevation=math.nan),
     "Ground.reference_elevation"),
    (lambda: Ground(surface="flat", reference_elevation=10.0), "Ground.surface"),
    (lambda: Ground().elevation_of(Layer(1.0, 0.1)), "Ground.surface"),
    (lambda: SurfaceOptions(gnss_height=-0.1), "gnss_height"),
    (lambda: SurfaceOptions(gnss_height=math.nan), "gnss_height"),
    (lambda: SurfaceOptions(dem_cell=0.0), "dem_cell"),
    (lambda: SurfaceOptions(vertical_datum=" "), "vertical_datum"),
])
def test_bad_ground_and_options_name_the_field(make, where):
    with pytest.raises(SettingsError) as info:
        make()
    assert info.value.where == where


# --- travel times below a surface --------------------------------------------------------------

SLOPE = Slope(x0=0.0, y0=0.0, z0=100.0, gradient_x=0.1, gradient_y=0.05)


def test_point_target_under_a_slope_follows_the_straight_ray():
    ref, v = 101.0, 0.1
    # a stone whose top is at 98.8 m under (4, 1), and a boulder of radius 0.2 m beside it
    stone = PointTarget(4.0, 1.0, ref - 98.8)
    boulder = PointTarget(6.0, 1.0, ref - 98.6, radius=0.2)
    ground = Ground(velocity=v, targets=(stone, boulder), surface=SLOPE, reference_elevation=ref)
    x, y = np.linspace(0.0, 8.0, 161), np.full(161, 0.5)
    times, amplitudes = ground.arrivals(x, y)
    surface = _plane(x, y, x0=0.0, y0=0.0, z0=100.0, gx=0.1, gy=0.05)
    # common practice: straight-ray travel time 2 sqrt(h^2 + (surface - z)^2) / v from the
    # antenna on the surface to the target (h its horizontal offset)
    h = np.hypot(x - 4.0, y - 1.0)
    np.testing.assert_allclose(times[:, 0], 2 * np.sqrt(h ** 2 + (surface - 98.8) ** 2) / v,
                               rtol=1e-12)
    # Shihab & Al-Nuaimy (2005): a round target of radius R reflects at
    # (2 / v)[sqrt((z0 + R)^2 + h^2) - R], z0 here the vertical distance to its top
    h = np.hypot(x - 6.0, y - 1.0)
    np.testing.assert_allclose(
        times[:, 1], 2 * (np.sqrt((surface - 98.6 + 0.2) ** 2 + h ** 2) - 0.2) / v, rtol=1e-12)
    assert np.all(amplitudes > 0)
    # the rendered trace peaks there too (within a sample), after time zero
    line = PlannedLine("S", 0.0, 0.5, 8.0, 0.5, 161)
    one = Ground(velocity=v, targets=(stone,), surface=SLOPE, reference_elevation=ref)
    da = simulate_line(one, CLEAN, line)
    expected = CLEAN.time_zero_ns + 2 * np.sqrt(np.hypot(x - 4.0, 0.5) ** 2
                                                 + (surface - 98.8) ** 2) / v
    near = np.abs(x - 4.0) <= 1.0  # where the antenna pattern leaves a clear peak
    picked = _peak_times(da.values[near], da["twt"].values)
    assert np.max(np.abs(picked - expected[near])) <= CLEAN.sample_interval_ns


def test_level_floor_across_a_sloping_line_follows_the_surface():
    eps_r = 9.0
    v = C / math.sqrt(eps_r)  # Davis & Annan (1989): v = c / sqrt(er)
    ref, z_floor = 101.0, 98.6
    ground = Ground(velocity=v, layers=(Layer(ref - z_floor, 0.5),), surface=SLOPE,
                    reference_elevation=ref)
    line = PlannedLine("F", 0.0, 2.0, 10.0, 2.0, 201)
    da = simulate_line(ground, CLEAN, line)
    x = da["x"].values
    surface = _plane(x, 2.0, x0=0.0, y0=0.0, z0=100.0, gx=0.1, gy=0.05)
    # ASTM D6432-19, section 5: a level reflector d below the antenna arrives 2 d / v after
    # time zero (normal incidence), d = surface(x) - z_floor
    expected = CLEAN.time_zero_ns + 2 * (surface - z_floor) / v
    picked = _peak_times(da.values, da["twt"].values)
    assert np.max(np.abs(picked - expected)) <= CLEAN.sample_interval_ns


def test_a_layer_that_crops_out_is_seen_only_where_it_is_buried():
    # the ground falls from 101 m to 100 m along the line; a layer at 100.505 m is buried only
    # where the ground stands above it, and so is a pipe at 100.905 m under the line
    ground = Ground(layers=(Layer(0.495, 0.4),),
                    targets=(LineTarget(0.0, 0.0, 10.0, 0.0, 0.095),),
                    surface=Slope(0.0, 0.0, 101.0, -0.1, 0.0), reference_elevation=101.0)
    x = np.linspace(0.0, 10.0, 101)
    _, amplitudes = ground.arrivals(x, np.zeros_like(x))
    surface = 101.0 - 0.1 * x
    buried = surface > 100.505
    assert 0 < buried.sum() < x.size
    assert np.all(amplitudes[buried, 1] > 0) and np.all(amplitudes[~buried, 1] == 0)
    assert np.all((amplitudes[:, 0] > 0) == (surface > 100.905))
    da = simulate_line(ground, Radar(samples=128), PlannedLine("O", 0.0, 0.0, 10.0, 0.0, 101))
    assert np.all(np.isfinite(da.values))


def test_mound_and_plate_times():
    # a plate at 48.9 m under a mound: over the plate 2 (surface - z) / v at normal incidence
    # (ASTM D6432-19, section 5); beyond its edge the straight ray to the nearest edge
    mound = Mound(x0=2.0, y0=0.0, base=50.0, height=0.5, radius=1.5)
    ground = Ground(targets=(PlateTarget(1.0, -1.0, 3.0, 1.0, 51.0 - 48.9),), surface=mound,
                    reference_elevation=51.0)
    x = np.array([1.0, 2.0, 2.5, 4.0, -0.5])
    surface = 50.0 + 0.5 * np.exp(-((x - 2.0) ** 2) / (2 * 1.5 ** 2))
    edge = np.array([0.0, 0.0, 0.0, 1.0, 1.5])
    times, _ = ground.arrivals(x, np.zeros_like(x))
    np.testing.assert_allclose(times[:, 0], 2 * np.hypot(surface - 48.9, edge) / 0.1,
                               rtol=1e-12)


# --- level ground is unchanged -----------------------------------------------------------------

def _small(surface=None, ref=None, depth_offset=0.0):
    d = depth_offset
    ground = Ground(targets=(PointTarget(1.0, 0.5, 0.5 + d),
                             LineTarget(0.0, 0.0, 2.0, 1.0, 0.8 + d),
                             PlateTarget(0.5, 0.0, 1.5, 0.5, 0.9 + d)),
                    layers=(Layer(1.2 + d, 0.3),), surface=surface, reference_elevation=ref)
    lines = grid_lines(west=0.0, south=0.0, length=2.0, width=1.0, line_spacing=0.5,
                       trace_spacing=0.05, direction="x")
    return ground, Radar(samples=256, seed=5), lines


def test_level_ground_writes_what_it_always_wrote(tmp_path):
    ground, radar, lines = _small()
    survey = write_survey(tmp_path / "s", ground, radar, lines, format="netcdf", progress=False)
    assert sorted(p.name for p in survey.folder.iterdir()) == sorted(
        ["L000.nc", "L001.nc", "L002.nc", "lines.csv", "truth.json"])
    assert survey.line_table.read_text().splitlines()[0] == "file,start_x,start_y,end_x,end_y"
    truth = json.loads(survey.truth_file.read_text())
    assert "surface" not in truth and "elevation" not in truth["units"]
    assert all("elevation" not in t for t in truth["targets"] + truth["layers"])
    assert survey.surface_files.dem is None and survey.surface_files.tracks == ()


@pytest.mark.parametrize("raise_by", [0.0, 0.35])
def test_a_level_surface_is_level_ground(raise_by):
    """A flat surface ``raise_by`` above the reference plane gives the same record as level
    ground with every depth ``raise_by`` larger (depths are measured from the plane)."""
    flat, radar, lines = _small(Slope(0.0, 0.0, 50.0 + raise_by), 50.0)
    level, _, _ = _small(depth_offset=raise_by)
    for line in lines:
        a, b = simulate_line(flat, radar, line), simulate_line(level, radar, line)
        if raise_by == 0.0:
            xr.testing.assert_identical(a, b)  # the very same numbers
        else:
            np.testing.assert_allclose(a.values, b.values, atol=1e-6)


# --- survey files on uneven ground -------------------------------------------------------------

def _mound_survey(tmp_path, **options):
    mound = Mound(x0=100.5, y0=200.5, base=30.0, height=0.6, radius=0.8)
    ground = Ground(targets=(PointTarget(100.5, 200.5, 31.0 - 29.6),),
                    layers=(Layer(31.0 - 28.9, 0.3),), surface=mound, reference_elevation=31.0)
    lines = grid_lines(west=100.0, south=200.0, length=1.5, width=1.0, line_spacing=0.5,
                       trace_spacing=0.05, direction="x")
    survey = write_survey(tmp_path / "m", ground, Radar(samples=256, seed=4), lines,
                          format="netcdf", crs="EPSG:32633", progress=False, **options)
    return survey, mound


def _mound_z(x, y):
    # the Gaussian bump written out: 30 + 0.6 exp(-r^2 / (2 0.8^2))
    r2 = (np.asarray(x) - 100.5) ** 2 + (np.asarray(y) - 200.5) ** 2
    return 30.0 + 0.6 * np.exp(-r2 / (2 * 0.8 ** 2))


def test_tracks_and_line_table_columns(tmp_path):
    survey, _ = _mound_survey(tmp_path, gnss_height=1.8)
    rows = list(csv.reader(survey.line_table.read_text().splitlines()))
    assert rows[0] == ["file", "start_x", "start_y", "end_x", "end_y", "track",
                       "start_elevation", "end_elevation"]
    assert len(rows) == 1 + len(survey.lines)
    for row, line in zip(rows[1:], survey.lines, strict=True):
        assert row[5] == f"tracks/{line.name}.csv"
        track = survey.folder / row[5]
        fixes = list(csv.reader(track.read_text().splitlines()))
        assert fixes[0] == ["trace", "x", "y", "height"]
        table = np.array(fixes[1:], dtype=float)
        x, y = line.positions()
        np.testing.assert_array_equal(table[:, 0], np.arange(line.n_traces))
        np.testing.assert_allclose(table[:, 1], x, atol=1e-6)
        np.testing.assert_allclose(table[:, 2], y, atol=1e-6)
        # height minus the GNSS antenna's height above ground is the ground (micrometres)
        np.testing.assert_allclose(table[:, 3] - 1.8, _mound_z(x, y), atol=2e-6)
        assert float(row[6]) == pytest.approx(_mound_z(x[0], y[0]), abs=1e-6)
        assert float(row[7]) == pytest.approx(_mound_z(x[-1], y[-1]), abs=1e-6)
    assert survey.surface_files.tracks == tuple(survey.folder / r[5] for r in rows[1:])


def test_the_line_table_reads_back_with_its_tracks(tmp_path):
    survey, _ = _mound_survey(tmp_path)
    with warnings.catch_warnings():  # columns the reader may not know yet
        warnings.simplefilter("ignore", SlicerWarning)
        entries = read_line_table(survey.line_table)
    assert [e.file for e in entries] == list(survey.files)
    assert [e.track for e in entries] == list(survey.surface_files.tracks)


def test_dem_reads_back_with_rasterio(tmp_path):
    survey, _ = _mound_survey(tmp_path, dem_cell=0.1)
    x = np.concatenate([line.positions()[0] for line in survey.lines])
    y = np.concatenate([line.positions()[1] for line in survey.lines])
    with rasterio.open(survey.folder / "dem.tif") as src:
        assert pyproj.CRS.from_wkt(src.crs.to_wkt()).equals(pyproj.CRS.from_epsg(32633))
        assert src.dtypes == ("float32",) and math.isnan(src.nodata)
        assert src.units == ("m",) and src.descriptions == ("ground surface elevation",)
        assert src.tags()["VERTICAL_DATUM"] == "site datum (synthetic)"
        # north-up, 0.1 m cells, from 2 m west of and north of the outermost traces
        t = src.transform
        assert (t.a, t.b, t.d, t.e) == pytest.approx((0.1, 0.0, 0.0, -0.1))
        assert (t.c, t.f) == pytest.approx((x.min() - 2.0, y.max() + 2.0), abs=1e-9)
        assert src.bounds.right >= x.max() + 2.0 - 1e-9
        assert src.bounds.bottom <= y.min() - 2.0 + 1e-9
        assert src.bounds.right - x.max() - 2.0 < 0.1 and y.min() - 2.0 - src.bounds.bottom < 0.1
        rows, cols = np.indices(src.shape)
        cx, cy = cell_centre_xy(t, rows.ravel(), cols.ravel())  # offset="center"
        sampled = np.array([v[0] for v in src.sample(zip(cx, cy, strict=True))])
        band = src.read(1)
    np.testing.assert_allclose(sampled, _mound_z(cx, cy), atol=1e-5)  # float32 at 30 m
    np.testing.assert_array_equal(sampled, band.ravel())
    assert np.isfinite(band).all()


def test_truth_records_the_surface_and_elevations(tmp_path):
    survey, mound = _mound_survey(tmp_path, gnss_height=0.0, vertical_datum="local benchmark")
    truth = json.loads(survey.truth_file.read_text())
    assert truth["surface"] == {"kind": "mound", "x0": 100.5, "y0": 200.5, "base": 30.0,
                                "height": 0.6, "radius": 0.8}
    assert truth["vertical_datum"] == "local benchmark"
    assert truth["gnss_antenna_height_m"] == 0.0 and truth["reference_elevation"] == 31.0
    assert [t["elevation"] for t in truth["targets"]] == pytest.approx([29.6])
    assert [t["elevation"] for t in truth["layers"]] == pytest.approx([28.9])
    assert truth["units"]["elevation"] == "m above the vertical datum"
    with rasterio.open(survey.folder / truth["dem"]) as src:
        assert src.tags()["VERTICAL_DATUM"] == "local benchmark"


def test_bad_surface_options_write_nothing(tmp_path):
    ground, radar, lines = _small(Slope(0.0, 0.0, 10.0), 10.0)
    with pytest.raises(SettingsError, match="gnss_height"):
        write_survey(tmp_path / "x", ground, radar, lines, gnss_height=math.inf, progress=False)
    assert not (tmp_path / "x").exists()


# --- the ready sloping survey ------------------------------------------------------------------

def test_slope_survey_scenario():
    ground, radar, lines, crs = slope_survey()
    assert crs == "EPSG:32633" and len(lines) == 17
    assert {line.n_traces for line in lines} == {241}
    x = np.concatenate([line.positions()[0] for line in lines])
    y = np.concatenate([line.positions()[1] for line in lines])
    assert (np.ptp(x), np.ptp(y)) == pytest.approx((12.0, 8.0))
    assert ground.surface.grade == pytest.approx(0.10)  # a 10 % slope
    z = ground.surface.elevation(x, y)
    assert (z.min(), z.max()) == pytest.approx((120.0, 121.44))
    drain, stone = ground.targets
    (floor,) = ground.layers
    assert [ground.elevation_of(t) for t in (floor, drain, stone)] == pytest.approx(
        [SLOPE_ELEVATIONS[k] for k in ("floor", "drain", "stone")], abs=1e-9)
    # every reflector lies below every antenna; the floor (deepest at the north-east corner)
    # stays inside the record with room for the wavelet
    assert z.min() - max(SLOPE_ELEVATIONS[k] for k in ("floor", "drain", "stone")) > 0.0
    # hand-computed: 120 + 0.08 * 8.55 + 0.06 * 2.05 - 119.95 = 0.857 m over the stone
    assert ground.surface.elevation(stone.x, stone.y) - 119.95 == pytest.approx(0.857)
    deepest = radar.time_zero_ns + 2 * (z.max() - SLOPE_ELEVATIONS["floor"]) / ground.velocity
    assert deepest == pytest.approx(42.8) and deepest + 6.0 < radar.record_ns
    # the floor alone, clean: its arrival follows the ground along a line (ASTM D6432-19, s. 5)
    only_floor = dataclasses.replace(ground, targets=())
    clean = dataclasses.replace(radar, direct_amplitude=0.0, ringing_amplitude=0.0,
                                wow_amplitude=0.0, noise=0.0)
    da = simulate_line(only_floor, clean, lines[8])
    lx, ly = lines[8].positions()
    expected = 3.0 + 2 * (_plane(lx, ly, x0=513000.0, y0=4651000.0, z0=120.0, gx=0.08,
                                 gy=0.06) - 119.45) / 0.1
    assert np.max(np.abs(_peak_times(da.values, da["twt"].values) - expected)) <= 0.1
