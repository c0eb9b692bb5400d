"""Tests of slicer.pipeline.options: every build option's type and limits, checked in one place
whether the value comes from a TOML survey file, a flag or a keyword, and refused in one line
naming the key (cases from an attack run on earlier versions, where each was misread or ended
in a traceback)."""

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from slicer.cli import main
from slicer.core.errors import LineTableError, SettingsError, SlicerWarning
from slicer.pipeline.options import OPTIONS, check_option
from slicer.pipeline.settings import OPTION_KEYS, load_settings

TABLE = "file,start_x,start_y,end_x,end_y\nL0.sgy,0,0,0,10\nL1.sgy,0.5,10,0.5,0\n"


@pytest.fixture
def folder(tmp_path):
    (tmp_path / "lines.csv").write_text(TABLE)
    return tmp_path


def _toml(folder, text):
    path = folder / "survey.toml"
    path.write_text('lines = "lines.csv"\n' + text)
    return path


def test_the_table_covers_every_option():
    assert set(OPTIONS) == set(OPTION_KEYS)
    for o in OPTIONS.values():
        if o.kind == "number" and o.low is not None:
            assert o.low < o.high, o.name


@pytest.mark.parametrize("text, key, match", [
    # a quoted "false" is a non-empty string, which Python takes as true
    ('overwrite = "false"\n', "overwrite", "expected true or false"),
    ('level = "no"\n', "level", "expected true or false"),
    # TOML true is not a sample interval of 1 ns
    ("sample_interval = true\n", "sample_interval", "expected a number of ns"),
    ('cell = "0.1"\n', "cell", "got the text '0.1'"),
    ("out = 5\n", "out", "expected a file or folder name"),
    ("scheduler = 4\n", "scheduler", "expected text"),
    ('background = "mode"\n', "background", "must be one of scaled, median, mean"),
    ("sample_interval = 1e300\n", "sample_interval", "outside 0.001 <= value <= 20 ns"),
    ("dewow = 1e300\n", "dewow", "outside 0 < value <= 100000 ns"),
    ("antenna_along = 1e300\n", "antenna_along", "outside -50 <= value <= 50 m"),
    ("trace_spacing = 1e-7\n", "trace_spacing", "outside 0.001 <= value"),
    ("cell = nan\n", "cell", "outside"),
    ("velocity = inf\n", "velocity", "finite"),
    ('formats = "tif,png"\n', "formats", "unknown output format 'png'"),
    ("formats = []\n", "formats", "no output format given"),
    ("formats = 3\n", "formats", "expected a comma list of tif, zarr, nc"),
])
def test_toml_values_of_the_wrong_type_or_range_are_refused_by_key(folder, text, key, match):
    with pytest.raises(SettingsError, match=match) as caught:
        load_settings(_toml(folder, text))
    assert caught.value.where.endswith(f"survey.toml: {key}")
    assert "\n" not in str(caught.value)


def test_well_typed_toml_values_are_taken(folder):
    s = load_settings(_toml(folder, "overwrite = false\nlevel = true\ncell = 1\n"
                                    'dewow = "off"\ntime_zero = 3\n'))
    assert s.overwrite is False and s.level is True
    assert s.cell == 1.0 and isinstance(s.cell, float)
    assert s.dewow == "off" and s.time_zero == 3.0
    # formats: a TOML list or a comma list, in a fixed order, each once (TOML v1.0.0 arrays)
    assert load_settings(_toml(folder, 'formats = ["nc", "tif", "nc"]\n')).formats == "tif,nc"
    assert load_settings(_toml(folder, 'formats = " ZARR, tif"\n')).formats == "tif,zarr"
    assert load_settings(_toml(folder, "")).formats == "tif"  # the default: the slices


def test_target_radii_are_taken_from_the_file_and_refused_by_key(folder):
    # slicer velocity's known pipe radii: one number, or texts R[+-S][@route] (TOML arrays)
    s = load_settings(_toml(folder, 'target_radius = ["0.05@0.75,-1,0.75,10", "0.075+-0.01"]\n'))
    assert s.target_radius == ("0.05@0.75,-1,0.75,10", "0.075+-0.01")
    assert load_settings(_toml(folder, "target_radius = 0.05\n")).target_radius == ("0.05",)
    for bad, match in (("true", "expected R"), ('"0.05@1,2,3"', "pairs X,Y"),
                       ('"-0.05"', "radius"), ('["0.05", 7e400]', "finite|expected R")):
        with pytest.raises(SettingsError, match=match) as caught:
            load_settings(_toml(folder, f"target_radius = {bad}\n"))
        assert caught.value.where.endswith("survey.toml: target_radius")


def test_a_bad_target_radius_on_the_command_line_is_one_line(folder, capsys):
    code = main(["velocity", str(folder / "lines.csv"), "--target-radius", "0.05@0.75"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "--target-radius" in err and "pairs" in err


def test_keywords_are_checked_like_the_file(folder):
    with pytest.raises(SettingsError, match="expected true or false") as caught:
        load_settings(folder / "lines.csv", overwrite="yes")
    assert caught.value.where == "--overwrite"
    with pytest.raises(SettingsError, match="got the text"):
        load_settings(folder / "lines.csv", radius="2")


def test_inline_lines_must_be_tables(folder):
    path = folder / "survey.toml"
    path.write_text("line = [1, 2]\n")
    with pytest.raises(LineTableError, match=r"line\[0\]: expected a table"):
        load_settings(path)


def test_a_misspelt_inline_line_key_is_refused(folder):
    path = folder / "survey.toml"
    path.write_text('[[line]]\nfile = "a.sgy"\nstart_x = 0\nstart_y = 0\nend_x = 5\n'
                    'end_y = 0\npostions = "headers"\n')
    with pytest.raises(LineTableError, match="unknown key 'postions' .did you mean 'positions'"):
        load_settings(path)


def test_a_misspelt_column_is_refused_and_others_are_named(tmp_path):
    table = tmp_path / "lines.csv"
    table.write_text("file,start_x,start_y,end_x,end_y,postions\nL0.sgy,0,0,0,10,headers\n")
    with pytest.raises(LineTableError, match="did you mean 'positions'"):
        load_settings(table)
    table.write_text("file,start_x,start_y,end_x,end_y,note\nL0.sgy,0,0,0,10,by the oak\n")
    with pytest.warns(SlicerWarning, match="column.s. note ignored"):
        assert len(load_settings(table).lines) == 1


def test_a_column_named_twice_is_refused(tmp_path):
    table = tmp_path / "lines.csv"
    # the second start_x would silently win in a csv.DictReader
    table.write_text("file,start_x,start_y,end_x,end_y,start_x\nL0.sgy,0,0,0,10,511000\n")
    with pytest.raises(LineTableError, match="start_x named twice"):
        load_settings(table)


def test_velocity_uncertainty_must_be_below_the_velocity(folder):
    with pytest.raises(SettingsError, match="not below the velocity") as caught:
        load_settings(folder / "lines.csv", velocity=0.1, velocity_std=0.12)
    assert caught.value.where == "--velocity-std"
    assert load_settings(folder / "lines.csv", velocity=0.1,
                         velocity_std=0.01).velocity_std == 0.01


@pytest.mark.parametrize("argv, flag", [
    (["--sample-interval", "1e300"], "--sample-interval"),
    (["--dewow", "1e300"], "--dewow"),
    (["--antenna-across=-1e300"], "--antenna-across"),
    (["--velocity", "0.1", "--velocity-std", "0.5"], "--velocity-std"),
    (["--cell", "nan"], "--cell"),
])
def test_the_command_line_names_the_flag(folder, capsys, argv, flag):
    code = main(["build", str(folder / "lines.csv"), "--out", str(folder / "o"), *argv])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and flag in err
    assert not (folder / "o").exists()


def test_flags_are_whole_words(folder, capsys):
    """argparse would take --over for --overwrite (prefix matching), and --out for --outx."""
    with pytest.raises(SystemExit) as caught:
        main(["build", str(folder / "lines.csv"), "--out", str(folder / "o"), "--over"])
    assert caught.value.code == 2
    assert "unrecognized arguments: --over" in capsys.readouterr().err


def test_help_states_the_limits(capsys):
    with pytest.raises(SystemExit):
        main(["build", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "[0.001 <= value <= 20 ns]" in text  # --sample-interval
    assert "[0.001 <= value <= 1000 m]" in text  # --cell


@given(name=st.sampled_from(sorted(OPTIONS)),
       value=st.one_of(st.none(), st.booleans(), st.integers(), st.text(max_size=12),
                       st.floats(allow_nan=True, allow_infinity=True),
                       st.lists(st.integers(), max_size=2),
                       st.dictionaries(st.text(max_size=3), st.integers(), max_size=2)))
def test_any_value_is_taken_normalised_or_refused_in_one_line(name, value):
    o = OPTIONS[name]
    try:
        out = check_option(name, value)
    except SettingsError as exc:
        assert exc.where == o.flag and "\n" not in exc.message
        return
    if value is None:
        assert out is None
    elif o.kind == "number":
        assert isinstance(out, float) and math.isfinite(out)
        if o.low is not None:
            assert o.low <= out <= o.high
    elif o.kind == "flag":
        assert out is value
    elif o.kind == "choice":
        assert out in o.words
    elif o.kind == "formats":
        parts = out.split(",")
        assert parts and set(parts) <= set(o.words) and parts == sorted(parts, key=o.words.index)


def test_a_gain_the_record_cannot_carry_is_refused_in_one_line(small_survey, tmp_path, capsys):
    """512 samples at 0.1 ns after a 3 ns time zero: exp:10 dB/ns reaches ~470 dB."""
    code = main(["build", str(small_survey.line_table), "--out", str(tmp_path / "o"),
                 "--sample-interval", "0.1", "--time-zero", "3", "--velocity", "0.1",
                 "--gain", "exp:10", "-q"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "--gain" in err and "dB" in err
    assert not (tmp_path / "o").exists()
