"""The reader bugs the attack suite found, each pinned by one small input.

Each input once let a non-slicer exception escape (or a traceback reach stderr); each must now
give a one-line SlicerError naming the file (and row or key).
"""

from __future__ import annotations

import pytest
from attack_kit import (
    CHANNELS,
    CONTROL_POINTS,
    LINE_TABLE,
    MARKS,
    SURVEY_TABLE,
    TRACK_XY,
    VELOCITY_CONSTANT,
    attack,
    names_survey,
    write_survey_folder,
)

import slicer

CSV_READERS = {
    "lines.csv": (LINE_TABLE, slicer.read_line_table, slicer.LineTableError),
    "track.csv": (TRACK_XY, slicer.read_track, slicer.InputFileError),
    "marks.csv": (MARKS, slicer.read_marks, slicer.InputFileError),
    "control.csv": (CONTROL_POINTS, slicer.read_control_points, slicer.InputFileError),
    "channels.csv": (CHANNELS, slicer.read_channel_table, slicer.InputFileError),
}


def _raises(error, call, path, case, match):
    result = attack(call, path, case)
    assert isinstance(result, error), f"{case}: {result!r}"
    assert match in str(result), f"{case}: {result}"


@pytest.mark.parametrize("name", CSV_READERS)
def test_a_field_beyond_the_csv_module_limit(name, tmp_path):
    """csv.Error 'field larger than field limit (131072)' escaped every CSV reader."""
    text, reader, error = CSV_READERS[name]
    path = tmp_path / name
    lines = text.splitlines()
    path.write_text("\n".join([*lines[:2], "x" * 200_000, *lines[2:]]) + "\n")
    _raises(error, lambda: reader(path), path, name, f"{name}:3: not a readable CSV")


@pytest.mark.parametrize("column", ["file", "track", "marks", "channels"])
def test_a_nul_in_a_file_name_of_the_line_table(column, tmp_path):
    """ValueError 'embedded null byte' escaped from resolving or opening the named file."""
    row = {"file": "L0.sgy", "start_x": "0", "start_y": "0", "end_x": "1", "end_y": "0",
           column: "x\x00.csv"}
    path = tmp_path / "lines.csv"
    path.write_text(",".join(row) + "\n" + ",".join(row.values()) + "\n")
    _raises(slicer.LineTableError, lambda: slicer.read_line_table(path), path, column,
            f"lines.csv:2: column {column}: ")


@pytest.mark.parametrize("key", ["lines", "control_points", "velocity_model"])
def test_a_nul_in_a_file_named_by_a_survey_file(key, tmp_path):
    """ValueError 'embedded null byte' escaped from reading the named table or model."""
    folder = write_survey_folder(tmp_path / "survey")
    text = SURVEY_TABLE if key == "lines" else SURVEY_TABLE.replace("velocity = 0.1\n", "")
    value = '"a\\u0000b.csv"'
    text = (text.replace('lines = "lines.csv"', f"lines = {value}") if key == "lines"
            else text + f"{key} = {value}\n")
    path = folder / "survey.toml"
    path.write_text(text)
    result = attack(lambda: slicer.load_settings(path), path, key, names=names_survey(path))
    assert isinstance(result, slicer.SlicerError), result


@pytest.mark.parametrize("text, match", [
    (VELOCITY_CONSTANT.replace("0.005", "9" * 400), "velocity_std is too large a number"),
    (VELOCITY_CONSTANT.replace('"constant"', "[]"), "kind must be one of"),
    (VELOCITY_CONSTANT.replace('"constant"', "[1, 2]"), "kind must be one of"),
    (VELOCITY_CONSTANT.replace("0.005", "9" * 5000), "not valid TOML"),
])
def test_velocity_model_values_no_float_or_key_can_take(text, match, tmp_path):
    """OverflowError (an integer beyond any float), TypeError (kind = [...], unhashable) and
    ValueError (tomllib refusing an integer of more than 4300 digits) escaped."""
    path = tmp_path / "velocity.toml"
    path.write_text(text)
    _raises(slicer.LineTableError, lambda: slicer.read_velocity_model(path), path, match, match)


def test_a_survey_file_with_an_integer_of_5000_digits(tmp_path):
    folder = write_survey_folder(tmp_path / "survey")
    path = folder / "survey.toml"
    path.write_text(SURVEY_TABLE.replace("cell = 0.25", "cell = " + "9" * 5000))
    _raises(slicer.LineTableError, lambda: slicer.load_settings(path), path, "5000 digits",
            "survey.toml: not valid TOML")
