"""Display options of a build and of slicer section: --colormap, --stretch, --clip."""

import numpy as np
import pytest
from PIL import Image

from slicer.cli import main
from slicer.core.errors import SettingsError
from slicer.pipeline.settings import load_settings

BASE = ["--crs", "EPSG:32633", "--velocity", "0.1", "--time-zero", "3", "--no-radargrams"]


@pytest.mark.parametrize(("options", "where"), [
    ({"colormap": "viridiss"}, "--colormap"),
    ({"stretch": "each"}, "--stretch"),
    ({"clip": "98:2"}, "--clip"),
    ({"clip": "0:101"}, "--clip"),
])
def test_bad_display_options_are_refused_before_the_build(small_survey, options, where):
    with pytest.raises(SettingsError) as e:
        load_settings(small_survey.line_table, crs="EPSG:32633", velocity=0.1, **options)
    assert e.value.where == where


def test_a_typo_in_a_colormap_is_one_line_naming_a_close_name(small_survey, tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["build", str(small_survey.line_table), *BASE, "--colormap", "greys",
                 "--out", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "--colormap" in err[0] and "Greys" in err[0]
    assert not out.exists()


def test_grey_per_slice_overview_pages(small_survey, tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["build", str(small_survey.line_table), *BASE, "--depths", "0:1.4:0.1",
                 "--colormap", "gray", "--stretch", "per-slice", "--clip", "1:99",
                 "--out", str(out)])
    printed = capsys.readouterr().out
    assert code == 0
    pages = sorted(out.glob("overview*.png"))
    # 14 slices, 12 to a page: two numbered pages, and the run says where the first is
    assert [p.name for p in pages] == ["overview-01.png", "overview-02.png"]
    assert "overview-01.png (2 pages)" in printed
    rgb = np.asarray(Image.open(pages[0]).convert("RGB")).astype(int)
    assert (rgb[..., 0] == rgb[..., 1]).all() and (rgb[..., 1] == rgb[..., 2]).all()
    assert "record.json" in {p.name for p in out.iterdir()}


def test_section_takes_the_display_options(small_survey, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["build", str(small_survey.line_table), *BASE, "--depths", "0:1:0.1",
                 "--quiet", "--out", str(out)]) == 0
    png = tmp_path / "s.png"
    code = main(["section", str(out), "--through", "512000.5,4650001", "512003.5,4650001",
                 "--colormap", "gray", "--out", str(png)])
    assert code == 0, capsys.readouterr().err
    rgb = np.asarray(Image.open(png).convert("RGB")).astype(int)
    assert (rgb[..., 0] == rgb[..., 2]).all()
    code = main(["section", str(out), "--through", "512000.5,4650001", "512003.5,4650001",
                 "--clip", "50:40", "--out", str(tmp_path / "t.png")])
    assert code == 2 and "--clip" in capsys.readouterr().err
