"""Tests of slicer.pipeline.velocity_survey: the survey-wide velocity from the diffraction
hyperbolas of every line (the library side of ``slicer velocity``), its JSON and model, the
per-line figures and the written model file.

The survey is the invented small survey of tests/conftest.py: two point targets in ground of
0.1 m/ns, crossed by six lines 0.5 m apart. Sources named beside the checks:
- A point diffractor at depth z, seen from a line passing at horizontal distance r from it,
  gives a hyperbola whose apex is at the closest trace and at two-way time
  t0 = 2 sqrt(z^2 + r^2) / v (straight rays, zero offset; Yilmaz 2001, "Seismic Data
  Analysis", SEG, ch. 4 [memory for the chapter]); depth from time is d = v t / 2 (ASTM
  D6432-19, section 5 [memory for the section]).
- PNG: ISO/IEC 15948:2004 (= W3C PNG specification), the 8-byte signature and the IHDR chunk
  holding width and height as big-endian 32-bit integers.
- matplotlib: a figure of W x H inches saved at ``dpi`` is W*dpi x H*dpi pixels.
- TOML v1.0.0 as read by the Python standard library's ``tomllib``.
"""

from __future__ import annotations

import json
import math
import struct
import tomllib

import pytest

import slicer
from slicer.core.errors import OutputError, SettingsError
from slicer.pipeline.velocity_survey import (
    VelocityAnalysis,
    analyse_velocity,
    write_velocity_outputs,
)
from slicer.velocity.model_file import read_velocity_model
from slicer.velocity.models import ConstantVelocity
from slicer.velocity.targets import target_radius

VELOCITY = 0.1  # m/ns, the velocity of the small survey's invented ground
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def analysed(small_survey, tmp_path_factory):
    figures = tmp_path_factory.mktemp("velocity") / "figures"
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1, time_zero=3.0)
    return analyse_velocity(settings, progress=False, figures=figures), figures, settings


def test_survey_velocity_is_the_grounds(analysed):
    analysis, _, _ = analysed
    assert isinstance(analysis, VelocityAnalysis)
    # the acceptance rule of the velocity analysis: within 3 % of the true velocity
    assert analysis.velocity == pytest.approx(VELOCITY, rel=0.03)
    assert 0 < analysis.velocity_std < 0.03 * VELOCITY
    assert analysis.kept and all(f in analysis.fits for f in analysis.kept)


def test_every_fit_sits_where_a_target_diffracts(analysed, small_survey):
    analysis, _, settings = analysed
    targets = small_survey.ground.targets
    lines = {e.file.stem for e in settings.lines}
    assert {f.line for f in analysis.fits} == lines  # every line has hyperbolas
    for f in analysis.fits:
        # the target whose apex this is: the nearest along the line (lines run west-east)
        t = min(targets, key=lambda t: abs(t.x - f.x))
        assert abs(f.x - t.x) <= 0.05, f  # within one trace spacing of 0.05 m
        r = abs(f.y - t.y)  # the line passes r metres from the target
        expected = 2 * math.hypot(t.depth, r) / VELOCITY
        # a tenth of the 2.5 ns period of the 400 MHz wavelet
        assert f.time == pytest.approx(expected, abs=0.25), (f, expected)


def test_json_gives_each_fit_its_depth_at_the_survey_velocity(analysed):
    analysis, _, _ = analysed
    doc = json.loads(json.dumps(analysis.to_json()))  # plain JSON values only
    assert doc["velocity"] == analysis.velocity and doc["velocity_std"] == analysis.velocity_std
    assert doc["units"]["velocity"] == "m/ns" and doc["units"]["depth"] == "m"
    assert doc["velocity_group_spread"] == analysis.velocity_group_spread >= 0.0
    assert len(doc["fits"]) == len(analysis.fits)
    assert sum(f["kept"] for f in doc["fits"]) == len(analysis.kept)
    for fit, row in zip(analysis.fits, doc["fits"], strict=True):
        assert (row["line"], row["x"], row["y"], row["time"]) == (fit.line, fit.x, fit.y,
                                                                  fit.time)
        assert row["depth"] == pytest.approx(analysis.velocity * fit.time / 2, rel=1e-12)


def test_model_is_the_estimate(analysed):
    analysis, _, _ = analysed
    model = analysis.model()
    assert isinstance(model, ConstantVelocity)
    assert (model.velocity, model.velocity_std) == (analysis.velocity, analysis.velocity_std)
    assert f"{len(analysis.kept)} of {len(analysis.fits)}" in model.note


def test_one_figure_per_line(analysed):
    analysis, figures, settings = analysed
    pngs = sorted(figures.glob("*.png"))
    assert [p.stem for p in pngs] == sorted(e.file.stem for e in settings.lines)
    for p in pngs:
        head = p.read_bytes()[:24]
        assert head[:8] == PNG_SIGNATURE and head[12:16] == b"IHDR"
        width, height = struct.unpack(">II", head[16:24])
        # a radargram's page, 9 x 4.6 in at 110 dpi (slicer.outputs.radargram.plot_radargram)
        assert (width, height) == (round(9 * 110), round(4.6 * 110))
    assert not list(figures.glob("*.tmp*"))


def test_written_model_reads_back(analysed, tmp_path):
    analysis, _, _ = analysed
    path = write_velocity_outputs(analysis, tmp_path / "v")
    assert path == tmp_path / "v" / "velocity.toml"
    data = tomllib.loads(path.read_text())
    assert data["kind"] == "constant" and data["velocity"] == analysis.velocity
    back = read_velocity_model(path)
    assert (back.velocity, back.velocity_std) == (analysis.velocity, analysis.velocity_std)
    with pytest.raises(OutputError, match="--overwrite"):
        write_velocity_outputs(analysis, tmp_path / "v")
    assert write_velocity_outputs(analysis, tmp_path / "v", overwrite=True) == path


def test_picks_open_in_gdal_as_points_in_the_survey_crs(analysed, tmp_path):
    # read back through GDAL/OGR (pyogrio), the reference reader of the GeoPackage
    import dataclasses

    import pyogrio
    import pyproj
    local = analysed[0]
    assert local.crs is None  # the fixture's survey has no CRS: a local grid
    write_velocity_outputs(local, tmp_path / "local")
    assert pyogrio.read_info(tmp_path / "local" / "picks.gpkg", layer="picks")["crs"] is None
    analysis = dataclasses.replace(local, crs="EPSG:32633")
    write_velocity_outputs(analysis, tmp_path / "v")
    path = tmp_path / "v" / "picks.gpkg"
    info = pyogrio.read_info(path, layer="picks")
    assert pyproj.CRS.from_user_input(info["crs"]).to_epsg() == 32633
    assert info["geometry_type"] == "Point" and info["features"] == len(analysis.fits)
    types = dict(zip(info["fields"], info["dtypes"], strict=True))
    assert types["kept"] == "int32" and types["velocity"] == "float64"
    assert types["line"] == "object"
    import numpy as np
    meta, _, geometry, fields = pyogrio.raw.read(path, layer="picks")
    import shapely
    xs = [shapely.from_wkb(g).x for g in geometry]
    np.testing.assert_allclose(sorted(xs), sorted(f.x for f in analysis.fits), atol=1e-9)
    kept = fields[list(meta["fields"]).index("kept")]
    assert kept.sum() == len(analysis.kept)


def test_a_given_radius_applies_near_its_route_only(analysed, small_survey):
    """A radius given with a route is fitted for the hyperbolas whose apex lies within 0.5 m of
    it (slicer.velocity.targets.ROUTE_TOLERANCE), the others are fitted as before. The small
    survey's targets are points: given a radius r, a point's curve reads slow, by about
    sqrt((z - r) / z) at distance z (the apex curvature of the round form against the
    point's; geometry, Shihab & Al-Nuaimy 2005 for the form), z = sqrt(depth^2 + d^2) for a
    line passing d from the target: 0.982-0.991 for 0.02 m here (measured: 0.985-0.993)."""
    plain, _, settings = analysed
    near = small_survey.ground.targets[0]  # 0.55 m deep; the other is 1.9 m away in x
    given = target_radius(0.02, std=0.0, route=((near.x, near.y - 3), (near.x, near.y + 3)))
    analysis = analyse_velocity(settings, progress=False, target_radius=[given])
    assert analysis.target_radius == (given,)
    assert len(analysis.fits) == len(plain.fits)
    changed = 0
    for before, after in zip(plain.fits, analysis.fits, strict=True):
        if abs(after.x - near.x) <= 0.5:
            changed += 1
            assert after.fit.radius_given and after.fit.radius == 0.02
            # the refit uses picks to 50 degrees, the search's its own reach: within 0.5 %
            z = math.hypot(near.depth, after.y - near.y)
            assert after.velocity / before.velocity == pytest.approx(
                math.sqrt((z - 0.02) / z), abs=0.005), (before, after)
        else:
            assert not after.fit.radius_given and after.velocity == before.velocity
    assert changed >= 3
    doc = analysis.to_json()
    assert doc["target_radius"] == [{"radius": 0.02, "radius_std": 0.0,
                                     "route": [[near.x, near.y - 3], [near.x, near.y + 3]]}]
    assert plain.to_json()["target_radius"] == []


@pytest.mark.parametrize("given", ["0.05", [0.05], [target_radius(0.05), target_radius(0.07)],
                                   -0.05])
def test_a_bad_target_radius_is_refused(analysed, given):
    _, _, settings = analysed
    with pytest.raises(SettingsError):
        analyse_velocity(settings, progress=False, target_radius=given)


def test_a_search_that_finds_nothing_says_where_it_looked(small_survey):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1, time_zero=3.0)
    with pytest.raises(SettingsError, match=r"0 usable hyperbola fits.*searched from 45 ns "
                       r"down, at velocities 0\.05-0\.2 m/ns.*--earliest"):
        analyse_velocity(settings, progress=False, earliest=45.0)  # below both targets


@pytest.mark.parametrize("earliest", [500.0, -1.0, "abc"])
def test_an_earliest_time_outside_the_record_is_refused_by_name(small_survey, earliest):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1, time_zero=3.0)
    with pytest.raises(SettingsError) as info:
        analyse_velocity(settings, progress=False, earliest=earliest)
    assert info.value.where == "--earliest"
