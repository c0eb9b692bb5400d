"""Elevation slices in a build: options, ground from three sources, bad input refused."""

import csv
import shutil

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

from slicer.cli import main
from slicer.core.errors import InputFileError, LineTableError, SettingsError
from slicer.pipeline.cube_build import build_cube
from slicer.pipeline.settings import load_settings

WEST, SOUTH = 512000.0, 4650000.0  # the small survey's corner (tests/conftest.py)
BASE = {"crs": "EPSG:32633", "velocity": 0.1, "time_zero": 3.0}


def slope(x, y):
    """The invented ground: 10 % up to the east from 100 m above the datum, 3 % up north."""
    return 100.0 + 0.1 * (np.asarray(x) - WEST) + 0.03 * (np.asarray(y) - SOUTH)


@pytest.fixture
def survey(small_survey, tmp_path):
    """The small survey with line tables of flat and sloping ends, tracks with heights and a
    DEM of the slope (written here, from the formula above)."""
    folder = tmp_path / "survey"
    shutil.copytree(small_survey.folder, folder)
    rows = list(csv.DictReader(open(folder / "lines.csv", encoding="utf-8")))
    (folder / "tracks").mkdir()
    for name, ground, track in (("flat.csv", lambda x, y: 100.0 + 0 * x, False),
                                ("slope.csv", slope, False), ("gnss.csv", slope, True)):
        with open(folder / name, "w", newline="", encoding="utf-8") as fh:
            extra = ["track"] if track else ["start_elevation", "end_elevation"]
            out = csv.DictWriter(fh, fieldnames=[*rows[0], *extra])
            out.writeheader()
            for r in rows:
                sx, sy, ex, ey = (float(r[k]) for k in ("start_x", "start_y", "end_x", "end_y"))
                if track:
                    path = folder / "tracks" / (r["file"][:-4] + ".csv")
                    n = 81  # traces per line (tests/conftest.py: 4 m every 0.05 m)
                    x, y = np.linspace(sx, ex, n), np.linspace(sy, ey, n)
                    with open(path, "w", encoding="utf-8") as t:  # a GNSS antenna 1.2 m up
                        t.write("trace,x,y,height\n")
                        t.writelines(f"{k},{x[k]:.4f},{y[k]:.4f},{ground(x[k], y[k]) + 1.2:.5f}\n"
                                     for k in range(n))
                    out.writerow({**r, "track": f"tracks/{path.name}"})
                else:
                    out.writerow({**r, "start_elevation": ground(sx, sy),
                                  "end_elevation": ground(ex, ey)})
    cell, nx, ny = 0.25, 28, 20
    xc = WEST - 1 + cell * (np.arange(nx) + 0.5)
    yc = SOUTH + 4 - cell * (np.arange(ny) + 0.5)
    with rasterio.open(folder / "dem.tif", "w", driver="GTiff", width=nx, height=ny, count=1,
                       dtype="float32", crs="EPSG:32633", nodata=np.nan,
                       transform=from_origin(WEST - 1, SOUTH + 4, cell, cell)) as dst:
        dst.write(slope(xc[None, :], yc[:, None]).astype(np.float32), 1)
    return folder


def cube_of(table, **options):
    settings = load_settings(table, **{**BASE, **options})
    return build_cube(settings, progress=False).cube


def test_level_ground_gives_the_depth_slices(survey):
    # Elevation = ground - depth (the definition): on level ground at 100 m the slice
    # 100.0-99.9 m is the depth slice 0.0-0.1 m, value for value.
    depth = cube_of(survey / "flat.csv", depths="0:1.5:0.1")
    elevation = cube_of(survey / "flat.csv", terrain="table", datum="site datum",
                        elevations="100:98.5:0.1")
    assert elevation.dims[0] == "elevation" and len(elevation) == len(depth) == 15
    np.testing.assert_allclose(elevation.values, depth.values, rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(100.0 - elevation["elevation"].values, depth["depth"].values,
                               atol=1e-9)
    assert elevation.attrs["vertical_datum"] == "site datum"


def test_gnss_heights_and_a_dem_give_the_table_cube(survey):
    table = cube_of(survey / "slope.csv", terrain="table", datum="d", elevations="100.4:98.1:0.1")
    gnss = cube_of(survey / "gnss.csv", terrain="gnss", gnss_height=1.2, datum="d",
                   elevations="100.4:98.1:0.1", track_crs="EPSG:32633")
    dem = cube_of(survey / "lines.csv", terrain=str(survey / "dem.tif"), datum="d",
                  elevations="100.4:98.1:0.1")
    for other in (gnss, dem):
        # the three grounds agree to the text of the heights (1e-5 m) or the DEM's float32;
        # a cell may still change where a window's top meets the ground (a trace in or out)
        same = np.isfinite(table.values) & np.isfinite(other.values)
        assert same.sum() > 0.9 * np.isfinite(table.values).sum()
        peak = np.nanmax(np.abs(table.values), axis=(1, 2), keepdims=True)
        close = np.abs(other.values - table.values) <= 1e-3 * peak
        assert close[same].mean() > 0.99


def test_slices_above_the_ground_are_empty(survey):
    # the ground rises from 100.0 (west) to 100.4 m (east, + 0.075 north): the slice
    # 100.4-100.3 m lies above the western half, which has no value there
    cube = cube_of(survey / "slope.csv", terrain="table", datum="d", elevations="100.4:99.5:0.1")
    top = cube.isel(elevation=0).values
    west = cube["x"].values < WEST + 2.0
    assert np.isnan(top[:, west]).all() and np.isfinite(top[:, ~west]).any()
    assert np.isfinite(cube.isel(elevation=-1).values).mean() > 0.9


def test_default_elevations_span_the_ground_and_the_record(survey):
    cube = cube_of(survey / "slope.csv", terrain="table", datum="d", slices="elevation")
    top, bottom = cube["elevation_top"].values, cube["elevation_bottom"].values
    # hand-computed: highest ground 100.4 + 0.075 = 100.475 m, lowest 100.0 m; the record
    # reaches 0.1 m/ns x (51.2 - 3.0) ns / 2 = 2.41 m below the lowest, to 97.59 m; 0.1 m steps
    np.testing.assert_allclose([top[0], bottom[-1]], [100.4, 97.6], atol=1e-9)
    np.testing.assert_allclose(top - bottom, 0.1, atol=1e-9)
    assert np.isfinite(cube.values).any(axis=(1, 2)).all()  # every slice has values


@pytest.mark.parametrize(("options", "error", "where"), [
    ({"slices": "elevation", "datum": "d"}, SettingsError, "--terrain"),
    ({"terrain": "table", "elevations": "100:99:0.1"}, SettingsError, "--datum"),
    ({"elevations": "100:99:0.1", "terrain": "table", "datum": "d", "depths": "0:1:0.1"},
     SettingsError, "--depths"),
    ({"slices": "depth", "elevations": "100:99:0.1"}, SettingsError, "--elevations"),
    ({"datum": "d"}, SettingsError, "--datum"),
    ({"slices": "elevation", "terrain": "gnss", "datum": "d"}, SettingsError,
     "--gnss-height"),
    ({"slices": "elevation", "terrain": "table", "datum": "d", "gnss_height": 1.0},
     SettingsError, "--gnss-height"),
    ({"slices": "elevation", "terrain": "nowhere.tif", "datum": "d"}, InputFileError,
     "nowhere.tif"),
    ({"slices": "elevation", "terrain": "table", "datum": "d", "elevations": "99:100:0.1"},
     SettingsError, "--elevations"),
])
def test_bad_options_name_the_option(survey, options, error, where):
    with pytest.raises(error) as e:
        load_settings(survey / "slope.csv", **{**BASE, **options})
    assert where in (e.value.where or "")


def test_a_dem_needs_the_survey_crs(survey):
    with pytest.raises(SettingsError) as e:
        load_settings(survey / "lines.csv", velocity=0.1, terrain=str(survey / "dem.tif"),
                      datum="d", slices="elevation")
    assert e.value.where == "--crs"


def test_table_ground_needs_both_columns_on_every_row(survey):
    with pytest.raises(LineTableError) as e:
        load_settings(survey / "lines.csv", **BASE, terrain="table", datum="d",
                      slices="elevation")
    assert e.value.where.endswith("lines.csv:2") and "start_elevation" in e.value.message


def test_gnss_ground_needs_tracks(survey):
    with pytest.raises(SettingsError, match="not placed from a track"):
        load_settings(survey / "slope.csv", **BASE, terrain="gnss", gnss_height=1.0,
                      datum="d", slices="elevation")


def _refused(capsys, out, *argv, match):
    code = main([str(a) for a in argv])
    err = capsys.readouterr().err
    lines = [x for x in err.splitlines() if x.strip()]
    assert code == 2 and len(lines) == 1 and "Traceback" not in err, err
    assert match in lines[0], lines[0]
    assert not out.exists(), "nothing may be written on bad input"


def test_cli_refuses_a_dem_that_misses_the_survey(survey, tmp_path, capsys):
    small = tmp_path / "small_dem.tif"
    with rasterio.open(survey / "dem.tif") as src:
        profile = {**src.profile, "width": 8}
        values = src.read(1)[:, :8]
    with rasterio.open(small, "w", **profile) as dst:
        dst.write(values, 1)
    out = tmp_path / "out"
    _refused(capsys, out, "build", survey / "lines.csv", "--crs", "EPSG:32633", "--velocity",
             "0.1", "--time-zero", "3", "--slices", "elevation", "--terrain", small, "--datum", "d",
             "--out", out,
             match="does not cover")


def test_cli_refuses_missing_heights(survey, tmp_path, capsys):
    track = survey / "tracks" / "L001.csv"
    text = track.read_text().splitlines()
    text[5] = ",".join(text[5].split(",")[:3]) + ","  # one fix without its height
    track.write_text("\n".join(text) + "\n")
    out = tmp_path / "out"
    _refused(capsys, out, "build", survey / "gnss.csv", "--crs", "EPSG:32633", "--track-crs",
             "EPSG:32633", "--velocity", "0.1", "--time-zero", "3", "--slices", "elevation",
             "--terrain", "gnss",
             "--gnss-height", "1.2", "--datum", "d", "--out", out, match="L001")


def test_cli_writes_elevation_slices_with_their_datum(survey, tmp_path, capsys):
    out = tmp_path / "out"
    code = main([str(a) for a in ("build", survey / "slope.csv", "--crs", "EPSG:32633",
                                  "--velocity", "0.1", "--time-zero", "3", "--terrain", "table",
                                  "--datum", "NAVD88 (site)", "--elevations", "100.4:99:0.2",
                                  "--out", out, "--quiet")])
    assert code == 0, capsys.readouterr().err
    files = sorted((out / "slices").glob("*.tif"))
    assert files[0].name == "slice_000_100.400-100.200m.tif"
    with rasterio.open(files[-1]) as src:
        tags = src.tags()
    assert tags["VERTICAL_DATUM"] == "NAVD88 (site)"
    assert float(tags["ELEVATION_TOP"]) == pytest.approx(99.2)


def test_an_elevation_build_reopens_from_its_slices(survey, tmp_path, capsys):
    from slicer.pipeline.results import open_build
    out = tmp_path / "out"
    assert main([str(a) for a in ("build", survey / "slope.csv", "--crs", "EPSG:32633",
                                  "--velocity", "0.1", "--time-zero", "3", "--terrain", "table",
                                  "--datum", "site", "--elevations", "100.4:99:0.2", "--out",
                                  out, "--quiet")]) == 0
    cube = open_build(out)  # from the GeoTIFFs alone (their tags)
    assert cube.dims[0] == "elevation" and cube.attrs["vertical_datum"] == "site"
    np.testing.assert_allclose(cube["elevation_top"].values, 100.4 - 0.2 * np.arange(7),
                               atol=1e-9)
    (out / "viewer.html").unlink()
    assert main(["view", str(out)]) == 0  # the viewer page written again from the build
    page = (out / "viewer.html").read_text(encoding="utf-8")
    assert "100.4-100.2 m" in page  # each slice labelled by its elevations in metres


def test_a_survey_file_names_its_dem_beside_it(survey):
    # a TOML survey file's paths are relative to its folder, the DEM's too; the words stay words
    (survey / "sub").mkdir()
    shutil.move(survey / "dem.tif", survey / "sub" / "dem.tif")
    toml = survey / "sub" / "survey.toml"
    toml.write_text('lines = "../lines.csv"\ncrs = "EPSG:32633"\nvelocity = 0.1\n'
                    'time_zero = 3.0\nslices = "elevation"\nterrain = "dem.tif"\n'
                    'datum = "site"\n', encoding="utf-8")
    settings = load_settings(toml)
    assert settings.terrain == str(survey / "sub" / "dem.tif")
    toml.write_text(toml.read_text().replace('"dem.tif"', '"table"'), encoding="utf-8")
    with pytest.raises(LineTableError, match="start_elevation"):  # lines.csv has no elevations
        load_settings(toml)
    # a flag replaces the file's choice of slices (and what only elevation slices use)
    depth = load_settings(toml, depths="0:1:0.1")
    assert depth.slices_axis == "depth" and depth.terrain is None and depth.datum is None


def test_tracks_in_metres_without_their_crs_are_one_line_even_with_the_default_cell(
        survey, tmp_path, capsys):
    # the table names x,y tracks and no --track-crs is given (the default is lon/lat): with no
    # --cell either, the default cell was worked out from the unplaced lines (NaN) and a
    # traceback ended the build
    out = tmp_path / "out"
    _refused(capsys, out, "build", survey / "gnss.csv", "--crs", "EPSG:32633",
             "--sample-interval", "0.1", "--time-zero", "3.0", "--velocity", "0.1",
             "--out", out, match="track CRS")
