"""Tests of slicer.core.atomic: whole-file writes through a temporary, and the rules for an
output folder."""

import errno
import io
import os
import stat

import pytest

from slicer.core.atomic import (
    GuardedFile,
    atomic_path,
    atomic_write_text,
    check_room,
    current_umask,
    prepare_output_dir,
    temp_folder,
)
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


@pytest.mark.parametrize("umask", [0o022, 0o002, 0o077])
def test_files_and_folders_get_the_users_normal_mode(tmp_path, umask):
    # mkstemp and mkdtemp alone make 0o600 and 0o700 whatever the umask
    old = os.umask(umask)
    try:
        assert current_umask() == umask
        path = atomic_write_text(tmp_path / "a.txt", "x")
        folder = temp_folder(tmp_path, prefix=".store.")
    finally:
        os.umask(old)
    assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~umask
    assert stat.S_IMODE(folder.stat().st_mode) == 0o777 & ~umask


class _FullAfter(io.FileIO):
    """A file whose disk fills after ``room`` bytes."""

    room = 10

    def write(self, data):
        if self.tell() + len(data) > self.room:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return super().write(data)


def test_a_guarded_file_keeps_the_first_error_and_drops_later_writes(tmp_path, monkeypatch):
    import slicer.core.atomic
    monkeypatch.setattr(slicer.core.atomic, "open",
                        lambda file, mode, buffering: _FullAfter(file, mode.replace("b", "")),
                        raising=False)
    path = tmp_path / "cube.nc"
    with GuardedFile(path) as f:
        assert f.write(b"12345") == 5 and f.error is None
        assert f.write(b"678901") == 6  # the library is told every write went through
        assert f.error.errno == errno.ENOSPC
        assert f.write(b"more") == 4
        f.seek(0)
        assert f.read(5) == b"12345"
        with pytest.raises(OSError, match="No space left") as info:
            f.check()
    assert info.value.filename == str(path)
    assert path.read_bytes() == b"12345"


def test_a_guarded_file_without_errors_is_an_ordinary_file(tmp_path):
    with GuardedFile(tmp_path / "a.bin") as f:
        f.write(b"abc")
        f.check()
    with GuardedFile(tmp_path / "a.bin", "r+b") as f:
        f.seek(0, io.SEEK_END)
        f.write(b"def")
    assert (tmp_path / "a.bin").read_bytes() == b"abcdef"


def test_check_room_refuses_more_than_the_disk_holds(tmp_path):
    import shutil
    free = shutil.disk_usage(tmp_path).free
    check_room(tmp_path, 1, where=tmp_path / "out")
    with pytest.raises(OutputError, match="the disk is full") as info:
        check_room(tmp_path, free * 4, where=tmp_path / "out")
    assert info.value.where == str(tmp_path / "out")


def test_a_file_that_appears_during_the_work_is_not_replaced(tmp_path):
    # without overwrite the result is put in place by a hard link, which cannot replace a
    # file created meanwhile (POSIX link(2): EEXIST); the check before the work cannot see it
    path = tmp_path / "out.txt"
    with pytest.raises(OutputError, match="already exists") as info:
        with atomic_path(path, overwrite=False) as tmp:
            tmp.write_text("ours")
            path.write_text("theirs")  # another program, between the check and the rename
    assert info.value.where == str(path)
    assert path.read_text() == "theirs"
    assert [p.name for p in tmp_path.iterdir()] == ["out.txt"]
    with pytest.raises(OutputError, match="already exists"):
        atomic_write_text(path, "ours", overwrite=False)
    assert atomic_write_text(path, "ours").read_text() == "ours"  # the default replaces
