"""The max_gap option (issue 12, item 1): from a flag, a TOML key or a keyword to the gridding.

The survey is the session's small synthetic one (six lines 0.5 m apart, tests/conftest.py) with
its two middle lines left out of the line table, so the gap is known: 1.5 m between the lines
at 0.5 m and 2.0 m north.
"""

import numpy as np
import pytest

import slicer
from slicer.cli import _settings_from_args, make_parser
from slicer.core.errors import SettingsError
from slicer.pipeline.cube_build import build_cube

FAST = dict(sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.1, depths="0.4:0.6:0.2",
            dewow="off", migrate="off", scheduler="threads")


@pytest.fixture(scope="module")
def gap_table(small_survey, tmp_path_factory):
    rows = small_survey.line_table.read_text().splitlines()
    kept = [rows[0]] + [f"{small_survey.folder / r.split(',')[0]},{r.split(',', 1)[1]}"
                        for r in rows[1:] if r.split(",")[0] not in ("L002.sgy", "L003.sgy")]
    path = tmp_path_factory.mktemp("gap") / "lines.csv"
    path.write_text("\n".join(kept) + "\n")
    return path


def test_the_flag_reaches_the_settings(gap_table):
    args = make_parser().parse_args(["build", str(gap_table), "--max-gap", "1.6"])
    settings = slicer.load_settings(args.survey, **_settings_from_args(args))
    assert settings.max_gap == 1.6
    assert settings.to_record()["max_gap"] == 1.6


def test_the_toml_key_and_its_limits(gap_table, tmp_path):
    toml = tmp_path / "survey.toml"
    toml.write_text(f'lines = "{gap_table.as_posix()}"\nmax_gap = 2\n')
    assert slicer.load_settings(toml).max_gap == 2.0
    with pytest.raises(SettingsError, match="--max-gap: -1 m is outside 0 <= value"):
        slicer.load_settings(gap_table, max_gap=-1)
    with pytest.raises(SettingsError, match="got the text"):
        slicer.load_settings(gap_table, max_gap="2")


@pytest.mark.parametrize("max_gap, bridged", [(None, False), (1.6, True)])
def test_the_build_bridges_the_gap_only_when_allowed(gap_table, max_gap, bridged):
    # default max_gap 2.5 x 0.5 m = 1.25 m < 1.5 m: the middle of the gap, 0.75 m from both
    # lines (more than the radius of 0.375 m), stays NaN; with 1.6 m it is interpolated.
    settings = slicer.load_settings(gap_table, max_gap=max_gap, **FAST)
    result = build_cube(settings, progress=False)
    assert result.record["grid"]["max_gap_m"] == pytest.approx(max_gap or 1.25)
    cube = result.cube.isel(depth=0)
    north = cube["y"].values - 4650000.0
    middle = cube.values[np.abs(north - 1.25) < 0.1]
    assert middle.size > 0
    if bridged:
        assert np.isfinite(middle).all()
    else:
        assert np.isnan(middle).all()
    surveyed = cube.values[north < 0.45]
    assert np.isfinite(surveyed).all()
