"""Tests of slicer.pipeline.settings: build settings from a line table or TOML survey file
plus flags, and options refused by name."""

import pytest

from slicer.core.errors import LineTableError, SettingsError
from slicer.pipeline.settings import OPTION_KEYS, load_settings

TABLE = "file,start_x,start_y,end_x,end_y\nL0.sgy,0,0,0,10\nL1.sgy,0.5,10,0.5,0\n"


@pytest.fixture
def table(tmp_path):
    p = tmp_path / "lines.csv"
    p.write_text(TABLE)
    return p


def test_csv_with_flags(table):
    s = load_settings(table, crs="EPSG:32633", velocity=0.1, depths="0:2.4:0.1", cell=0.1,
                      time_zero=3.0, sample_interval=0.1, out="o")
    assert len(s.lines) == 2 and s.resolved_velocity == 0.1
    assert len(s.requested_windows) == 24
    assert s.gain_curve == ("power", 1.0)  # the default
    rec = s.to_record()
    assert rec["velocity_used"] == 0.1 and rec["out"] == "o"


def test_toml_holds_lines_and_options_and_flags_override(tmp_path, table):
    toml = tmp_path / "survey.toml"
    toml.write_text('lines = "lines.csv"\ncrs = "EPSG:32633"\npermittivity = 9.0\n'
                    'depths = "0:1:0.1"\nout = "result"\noverwrite = true\n')
    s = load_settings(toml)
    # v = c / sqrt(9) (Davis & Annan 1989, Table 1: er 9 -> 0.0999 m/ns)
    assert s.resolved_velocity == pytest.approx(0.0999, abs=1e-4)
    assert s.out == tmp_path / "result" and s.overwrite is True
    s2 = load_settings(toml, depths="0:2:0.5", overwrite=None)
    assert len(s2.requested_windows) == 4 and s2.overwrite is True


def test_toml_inline_lines(tmp_path):
    toml = tmp_path / "survey.toml"
    toml.write_text('[[line]]\nfile = "a.nc"\nstart_x = 0\nstart_y = 0\nend_x = 5\nend_y = 0\n'
                    '[[line]]\nfile = "b.nc"\nstart_x = 5\nstart_y = 1\nend_x = 0\nend_y = 1\n')
    s = load_settings(toml)
    assert [e.file.name for e in s.lines] == ["a.nc", "b.nc"]


@pytest.mark.parametrize("text, err, match", [
    ('lines = "lines.csv"\nvelocty = 0.1\n', SettingsError, "unknown key.*velocty"),
    ('crs = "EPSG:32633"\n', LineTableError, "lines"),
    ('lines = "lines.csv"\nvelocity = 0.5\n', SettingsError, "speed of light"),
    ('lines = "lines.csv\n', LineTableError, "not valid TOML"),
    ('[[line]]\nfile = "a.nc"\nstart_x = "x"\nstart_y = 0\nend_x = 5\nend_y = 0\n',
     LineTableError, r"line\[0\]: column start_x"),
])
def test_bad_survey_files(tmp_path, table, text, err, match):
    toml = tmp_path / "survey.toml"
    toml.write_text(text)
    with pytest.raises(err, match=match):
        load_settings(toml)


@pytest.mark.parametrize("options, where", [
    ({"velocity": 0.1, "permittivity": 9}, "--velocity"),
    ({"velocity": -0.1}, "--velocity"),
    ({"permittivity": 0.5}, "--permittivity"),
    ({"cell": 0}, "--cell"),
    ({"cell": -0.5}, "--cell"),
    ({"radius": 0}, "--radius"),
    ({"crs": "EPSG:999999"}, "--crs"),
    ({"crs": "not a crs"}, "--crs"),
    ({"crs": "EPSG:4326"}, "--crs"),  # geographic: degrees, not metres
    ({"depths": "0:2:0.1"}, "--depths"),  # no velocity
    ({"velocity": 0.1, "depths": "2:1:0.1"}, "--depths"),
    ({"velocity": 0.1, "depths": "0:1:0"}, "--depths"),
    ({"times": "0:10:1", "depths": "0:1:0.1", "velocity": 0.1}, "--times"),
    ({"gain": "loud"}, "--gain"),
    ({"gain": "power:x"}, "--gain"),
    ({"dewow": "sometimes"}, "--dewow"),
    ({"dewow": -2.0}, "--dewow"),
    ({"background": "mode"}, "--background"),
    ({"time_zero": "early"}, "--time-zero"),
    ({"sample_interval": 0}, "--sample-interval"),
])
def test_bad_options_name_the_option(table, options, where):
    with pytest.raises(SettingsError) as info:
        load_settings(table, **options)
    assert str(info.value).startswith(where)


def test_every_option_key_is_documented():
    assert all(isinstance(v, str) and v for v in OPTION_KEYS.values())
    with pytest.raises(SettingsError):
        load_settings("x.csv", colour="red")


@pytest.mark.parametrize("file_line, flags, check", [
    # README: "Options override a TOML survey file", within a group of alternatives too
    ("velocity = 0.1", {"permittivity": 4.0},
     lambda s: s.velocity is None and s.resolved_velocity == pytest.approx(0.2998 / 2, abs=1e-4)),
    ("permittivity = 9.0", {"velocity": 0.12}, lambda s: s.resolved_velocity == 0.12),
    ('depths = "0:1:0.1"', {"times": "0:20:2"},
     lambda s: s.depths is None and len(s.requested_windows) == 10),
    ('times = "0:20:2"', {"depths": "0:1:0.5", "velocity": 0.1},
     lambda s: s.times is None and len(s.requested_windows) == 2),
])
def test_a_flag_replaces_the_files_choice_in_its_group(tmp_path, table, file_line, flags, check):
    toml = tmp_path / "survey.toml"
    toml.write_text(f'lines = "lines.csv"\n{file_line}\n')
    assert check(load_settings(toml, **flags))


def test_a_velocity_model_flag_replaces_the_files_velocity(tmp_path, table):
    model = tmp_path / "v.toml"
    model.write_text('kind = "constant"\nvelocity = 0.08\nvelocity_std = 0.004\n')
    toml = tmp_path / "survey.toml"
    toml.write_text('lines = "lines.csv"\nvelocity = 0.1\ndepths = "0:1:0.1"\n')
    s = load_settings(toml, velocity_model=str(model))
    assert s.velocity is None and s.resolved_velocity == 0.08


@pytest.mark.parametrize("options, flag", [
    ({"antenna_along": 0.3}, "--antenna-along"),
    ({"antenna_across": -0.2}, "--antenna-across"),
    ({"track_crs": "EPSG:4326"}, "--track-crs"),
    ({"velocity_std": 0.01}, "--velocity-std"),
    ({"thickness": 0.2}, "--thickness"),
])
def test_an_option_with_no_effect_is_refused(table, options, flag):
    with pytest.raises(SettingsError, match="has no effect") as caught:
        load_settings(table, **options)
    assert caught.value.where == flag
