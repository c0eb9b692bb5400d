"""Tests of slicer.core.atomic: whole-file writes through a temporary, and the rules for an
output folder."""

import pytest

from slicer.core.atomic import atomic_path, atomic_write_text, prepare_output_dir
from slicer.core.errors import OutputError


def test_atomic_write_replaces_whole_file(tmp_path):
    p = tmp_path / "a.txt"
    atomic_write_text(p, "one")
    atomic_write_text(p, "two")
    assert p.read_text() == "two"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["a.txt"]


def test_failed_write_leaves_old_file_and_no_temp(tmp_path):
    p = tmp_path / "a.txt"
    p.write_text("keep")
    with pytest.raises(RuntimeError), atomic_path(p) as tmp:
        tmp.write_text("half")
        raise RuntimeError("killed mid-way")
    assert p.read_text() == "keep"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["a.txt"]


def test_temp_keeps_suffix(tmp_path):
    with atomic_path(tmp_path / "x.tif") as tmp:
        assert tmp.suffix == ".tif" and tmp.parent == tmp_path
        tmp.write_bytes(b"1")


def test_output_dir_rules(tmp_path):
    new = prepare_output_dir(tmp_path / "new" / "deeper")
    assert new.is_dir()
    (new / "old.tif").write_text("x")
    with pytest.raises(OutputError, match="not empty.*--overwrite"):
        prepare_output_dir(new)
    assert prepare_output_dir(new, overwrite=True) == new
    f = tmp_path / "file"
    f.write_text("x")
    with pytest.raises(OutputError, match="is a file"):
        prepare_output_dir(f)
    with pytest.raises(OutputError, match="parent"):
        prepare_output_dir(f / "sub")
    checked = prepare_output_dir(tmp_path / "later", create=False)
    assert not checked.exists()
