"""An earlier build opened from its folder alone, and the map commands on it."""

from __future__ import annotations

import numpy as np
import pytest

from slicer.cli import main
from slicer.core.errors import InputFileError
from slicer.pipeline.build import build
from slicer.pipeline.cube_build import build_cube
from slicer.pipeline.results import open_build
from slicer.pipeline.settings import load_settings

OPTIONS = dict(crs="EPSG:32633", sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.1,
               depths="0.3:1.5:0.1")


@pytest.fixture(scope="module")
def built(small_survey, tmp_path_factory):
    out = tmp_path_factory.mktemp("results") / "out"
    settings = load_settings(small_survey.line_table, **OPTIONS, out=out)
    build(settings, progress=False)  # default formats: the slice GeoTIFFs only
    return out, build_cube(load_settings(small_survey.line_table, **OPTIONS),
                           progress=False).cube


def test_a_build_of_geotiffs_alone_opens_as_its_cube(built):
    out, reference = built
    assert not (out / "cube.zarr").exists() and not (out / "cube.nc").exists()
    cube = open_build(out)
    assert cube.dims == reference.dims and cube.shape == reference.shape
    np.testing.assert_array_equal(cube.values, reference.values)  # float32 GeoTIFFs, exact
    np.testing.assert_allclose(cube["depth_top"].values, reference["depth_top"].values)
    np.testing.assert_allclose(cube["x"].values, reference["x"].values)
    assert cube.rio.crs.to_epsg() == 32633


def test_a_folder_without_a_build_is_refused(tmp_path):
    with pytest.raises(InputFileError, match="no slicer build"):
        open_build(tmp_path)


def test_outline_and_section_commands(built, tmp_path, capsys):
    import matplotlib.image
    import pyogrio
    out, cube = built
    assert main(["outline", str(out), "--out", str(tmp_path / "o.gpkg")]) == 0
    assert {n for n, _ in pyogrio.list_layers(tmp_path / "o.gpkg")} == {"outlines", "bodies"}
    x0, x1 = float(cube["x"][2]), float(cube["x"][-3])
    y = float(cube["y"][cube.sizes["y"] // 2])
    assert main(["section", str(out), "--through", f"{x0},{y}", f"{x1},{y}",
                 "--out", str(tmp_path / "s.png")]) == 0
    assert matplotlib.image.imread(tmp_path / "s.png").shape[1] > 500
    said = capsys.readouterr().out
    assert "outlines in" in said and "section of" in said


@pytest.mark.parametrize("argv, match", [
    (["section", "{out}", "--through", "1,2", "x", "--out", "{tmp}/s.png"], "--through"),
    (["section", "{out}", "--through", "0,0", "1,1", "--out", "{tmp}/s.png"],
     "--through: the path misses"),
    (["section", "{out}", "--through", "0,0", "--out", "{tmp}/s.png"],
     "--through: a path needs two or more (x, y) points, got 1 point"),
    (["section", "{out}", "--through", "0,0", "1,1", "--spacing", "0", "--out", "{tmp}/s.png"],
     "--spacing:"),
    (["outline", "{tmp}/nothing", "--out", "{tmp}/o.gpkg"], "no slicer build"),
    # a name matplotlib cannot draw in, and a GeoPackage under a shapefile's name (GIS open a
    # file by its suffix): refused before any work, naming the file
    (["section", "{out}", "--through", "0,0", "1,1", "--out", "{tmp}/s.txt"], "s.txt: cannot"),
    (["outline", "{out}", "--out", "{tmp}/o.shp"], "o.shp: a GeoPackage's name must end"),
])
def test_bad_map_commands_say_one_line(built, tmp_path, capsys, argv, match):
    out, _ = built
    code = main([a.format(out=out, tmp=tmp_path) for a in argv])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and match in err[0]
    assert list(tmp_path.iterdir()) == []  # nothing written


def test_an_existing_file_is_replaced_only_with_overwrite(built, tmp_path, capsys):
    out, _ = built
    mine = tmp_path / "mine.gpkg"
    mine.write_text("a file of the user's")
    assert main(["outline", str(out), "--out", str(mine)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--overwrite" in err[0] and str(mine) in err[0]
    assert mine.read_text() == "a file of the user's"  # untouched
    assert main(["outline", str(out), "--out", str(mine), "--overwrite"]) == 0
    assert mine.read_bytes()[:16] == b"SQLite format 3\x00"  # now a GeoPackage


def test_outline_echo_rule_options(built, tmp_path, capsys):
    import pyogrio
    out, _ = built
    area = {}
    for name, extra in (("default", []), ("off", ["--fraction", "0", "--floor", "0"])):
        assert main(["outline", str(out), "--out", str(tmp_path / f"{name}.gpkg"), *extra]) == 0
        _, _, _, fields = pyogrio.raw.read(tmp_path / f"{name}.gpkg", layer="outlines",
                                           columns=["area_m2"])
        area[name] = float(np.sum(fields[0]))
    # the echo rule and the floor only ever remove cells (slicer.outputs.outline_rule), and
    # hole filling keeps that order: the outlined area can only shrink, and here it does
    assert 0 < area["default"] < area["off"]
    capsys.readouterr()
    assert main(["outline", str(out), "--out", str(tmp_path / "bad.gpkg"),
                 "--fraction", "1.5"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "fraction" in err[0]
    assert not (tmp_path / "bad.gpkg").exists()
