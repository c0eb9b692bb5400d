"""Tests of slicer.io.tomlfile: reading TOML files, errors naming the file."""

import pytest

from slicer.core.errors import InputFileError, LineTableError
from slicer.io.tomlfile import read_toml


def test_reads_tables(tmp_path):
    p = tmp_path / "a.toml"
    p.write_text('x = 1\n[[layer]]\nv = 0.1\n')
    assert read_toml(p, what="file") == {"x": 1, "layer": [{"v": 0.1}]}


def test_errors_name_the_file(tmp_path):
    with pytest.raises(InputFileError, match=r"b\.toml: model not found"):
        read_toml(tmp_path / "b.toml", what="model", missing=InputFileError)
    bad = tmp_path / "c.toml"
    bad.write_text('x = "open\n')
    with pytest.raises(LineTableError, match=r"c\.toml: not valid TOML"):
        read_toml(bad, what="survey file")
