"""Tests of slicer.core.commit: an output folder written aside and switched in whole, what it
keeps, what it refuses, and how an interrupted commit is finished at the next build.

A "build" here is a few files written into the stage; crashes are real: a forked child is
stopped with ``os._exit`` at a chosen point of the commit (no cleanup runs), and the parent
checks what is on disk.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import warnings
from pathlib import Path

import pytest

import slicer.core.commit as commit
from slicer.core.commit import OutputFolder, recover
from slicer.core.errors import OutputError, SlicerWarning

NAMES = ("slices/slice_*.tif", "cube.nc")


def files_of(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def make_build(out: Path, tag: str, slices: int, *, overwrite: bool = True,
               inputs=()) -> dict[str, bytes]:
    """Write and commit a build of ``slices`` slice files and a cube; its files' contents."""
    with OutputFolder(out, overwrite=overwrite, names=NAMES, inputs=inputs) as folder:
        stage = folder.path
        outputs = write_stage(stage, tag, slices)
        folder.commit(outputs, {"slicer": "test", "tag": tag})
    return {k: v for k, v in files_of(out).items() if k in {*outputs, "record.json"}}


def write_stage(stage: Path, tag: str, slices: int) -> list[str]:
    (stage / "slices").mkdir()
    outputs = []
    for i in range(slices):
        (stage / "slices" / f"slice_{i:03d}.tif").write_text(f"{tag} slice {i}")
        outputs.append(f"slices/slice_{i:03d}.tif")
    (stage / "cube.nc").write_text(f"{tag} cube")
    return [*outputs, "cube.nc"]


def add_user_files(out: Path) -> dict[str, bytes]:
    (out / "notes").mkdir()
    (out / "notes" / "field.txt").write_text("rain at 11:00")
    (out / "slices" / "slice_notmine.tif").write_text("my own raster")
    (out / "plan.dxf").write_text("excavation plan")
    return {"notes/field.txt": b"rain at 11:00", "slices/slice_notmine.tif": b"my own raster",
            "plan.dxf": b"excavation plan"}


def leftovers(out: Path) -> list[str]:
    return sorted(p.name for p in out.parent.iterdir() if ".slicer-" in p.name)


def test_a_new_folder_appears_whole_and_the_stage_is_beside_it(tmp_path):
    out = tmp_path / "deep" / "out"
    with OutputFolder(out, names=NAMES) as folder:
        assert folder.path.parent == out.parent and folder.path.is_dir()
        assert not out.exists()  # nothing in place until the commit
        outputs = write_stage(folder.path, "A", 2)
        files = folder.commit(outputs, {"slicer": "test"})
    assert files == [out / o for o in outputs] + [out / "record.json"]
    record = json.loads((out / "record.json").read_text())
    assert record["outputs"] == outputs and record["build_id"] == folder.build_id
    assert leftovers(out) == []


def test_overwrite_replaces_only_what_the_earlier_build_wrote(tmp_path):
    out = tmp_path / "out"
    make_build(out, "A", 3, overwrite=False)
    mine = add_user_files(out)
    new = make_build(out, "B", 2)
    assert files_of(out) == {**new, **mine}  # slice_002 of A is gone, the user's files stay
    assert new["slices/slice_000.tif"] == b"B slice 0"
    assert leftovers(out) == []


def test_a_folder_with_files_needs_overwrite(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "mine.txt").write_text("x")
    with pytest.raises(OutputError, match="not empty.*--overwrite"):
        OutputFolder(out, names=NAMES)
    make_build(out, "A", 1)
    assert (out / "mine.txt").read_text() == "x"


@pytest.mark.parametrize("taken", ["cube.nc", "slices"])
def test_an_output_name_taken_by_a_file_slicer_did_not_write_is_refused(tmp_path, taken):
    out = tmp_path / "out"
    out.mkdir()
    (out / taken).write_text("the user's")
    with pytest.raises(OutputError, match="not written by slicer") as info:
        OutputFolder(out, overwrite=True, names=NAMES)
    assert info.value.where == str(out / taken)
    assert files_of(out) == {taken: b"the user's"} and leftovers(out) == []


def test_a_slice_name_taken_is_refused_at_the_commit_and_nothing_changes(tmp_path):
    out = tmp_path / "out"
    before = make_build(out, "A", 1)
    folder = OutputFolder(out, overwrite=True, names=NAMES)
    (out / "slices" / "slice_001.tif").write_text("made meanwhile by the user")
    with pytest.raises(OutputError, match="not written by slicer"), folder:
        folder.commit(write_stage(folder.path, "B", 2), {"slicer": "test"})
    assert files_of(out) == {**before, "slices/slice_001.tif": b"made meanwhile by the user"}
    assert leftovers(out) == []


def test_a_record_that_is_not_slicers_is_not_replaced(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "record.json").write_text('{"my": "notes"}')
    with pytest.raises(OutputError, match="not the record of a slicer build"):
        OutputFolder(out, overwrite=True, names=NAMES)


def test_inputs_where_outputs_go_are_refused_and_others_kept(tmp_path):
    out = tmp_path / "out"
    make_build(out, "A", 2, overwrite=False)
    (out / "lines").mkdir()
    line = out / "lines" / "L000.sgy"
    line.write_text("radar")
    named_like_output = out / "cube.nc"
    for given in (named_like_output, out / "slices" / "slice_001.tif"):
        with pytest.raises(OutputError, match="is an input of this build") as info:
            OutputFolder(out, overwrite=True, names=NAMES, inputs=[given])
        assert info.value.where == str(given)
    # a line file named like an output, in a folder slicer never wrote to
    fresh = tmp_path / "fresh"
    fresh.mkdir()
    (fresh / "cube.nc").write_text("a radar line")
    with pytest.raises(OutputError, match="is an input"):
        OutputFolder(fresh, overwrite=True, names=NAMES, inputs=[fresh / "cube.nc"])
    assert (fresh / "cube.nc").read_text() == "a radar line"
    make_build(out, "B", 1, inputs=[line])  # an input elsewhere in the folder is kept
    assert line.read_text() == "radar"


def test_a_failed_build_leaves_the_folder_as_it_was(tmp_path):
    out = tmp_path / "out"
    before = make_build(out, "A", 2, overwrite=False)
    with pytest.raises(RuntimeError), OutputFolder(out, overwrite=True, names=NAMES) as folder:
        write_stage(folder.path, "B", 1)
        raise RuntimeError("a line could not be read")
    assert files_of(out) == before and leftovers(out) == []
    # the folders it made for itself go too
    deep = tmp_path / "new" / "deeper" / "out"
    with pytest.raises(RuntimeError), OutputFolder(deep, names=NAMES):
        raise RuntimeError("stopped")
    assert not (tmp_path / "new").exists()


def test_errors_name_the_output_folder_not_the_stage(tmp_path):
    out = tmp_path / "out"
    with pytest.raises(OutputError) as info, OutputFolder(out, names=NAMES) as folder:
        raise OutputError("cannot write GeoTIFF (disk full)",
                          where=str(folder.path / "slices" / "slice_000.tif"))
    assert info.value.where == str(out / "slices" / "slice_000.tif")
    assert str(info.value).startswith(str(out / "slices"))
    with pytest.raises(OSError) as oserr, OutputFolder(out, names=NAMES) as folder:
        raise OSError(28, "No space left on device", str(folder.path / "record.json"))
    assert oserr.value.filename == str(out / "record.json")


@pytest.mark.parametrize("umask", [0o022, 0o002])
def test_the_folder_gets_the_users_normal_mode(tmp_path, umask):
    old = os.umask(umask)
    try:
        make_build(tmp_path / "out", "A", 1, overwrite=False)
    finally:
        os.umask(old)
    assert (tmp_path / "out").stat().st_mode & 0o777 == 0o777 & ~umask
    assert (tmp_path / "out" / "record.json").stat().st_mode & 0o777 == 0o666 & ~umask


def test_a_replaced_folder_keeps_its_mode(tmp_path):
    out = tmp_path / "out"
    make_build(out, "A", 1, overwrite=False)
    out.chmod(0o750)
    make_build(out, "B", 1)
    assert out.stat().st_mode & 0o777 == 0o750


def test_a_read_only_folder_is_refused_and_left_as_it_was(tmp_path):
    # POSIX: a folder without write permission may not be changed; the build, which would
    # replace it whole, refuses instead (it had moved the user's file aside, exit 0)
    out = tmp_path / "out"
    out.mkdir()
    (out / "mine.txt").write_text("mine")
    out.chmod(0o555)
    try:
        with pytest.raises(OutputError, match="is read-only"):
            make_build(out, "A", 1)
        assert files_of(out) == {"mine.txt": b"mine"} and leftovers(out) == []
        assert out.stat().st_mode & 0o777 == 0o555
    finally:
        out.chmod(0o755)


def test_a_replaced_folder_keeps_its_group_and_files_take_it(tmp_path):
    # POSIX chown(2) / Linux set-group-ID folders: files made in a folder with the bit take
    # its group. A shared project folder (group "nogroup" here, mode 2770) must keep its group
    # and bit, and the build's files take that group, as if written into it directly.
    import grp
    out = tmp_path / "out"
    out.mkdir()
    try:
        gid = grp.getgrnam("nogroup").gr_gid
        os.chown(out, -1, gid)
    except (KeyError, PermissionError):
        pytest.skip("no group 'nogroup' that this user may give a folder")
    out.chmod(0o2770)
    make_build(out, "A", 2, overwrite=False)
    make_build(out, "B", 1)
    assert out.stat().st_gid == gid and out.stat().st_mode & 0o7777 == 0o2770
    for path in [out, *out.rglob("*")]:
        assert path.stat().st_gid == gid, path


def test_the_current_folder_and_mount_points_are_refused(tmp_path, monkeypatch):
    out = tmp_path / "out"
    make_build(out, "A", 1, overwrite=False)
    monkeypatch.chdir(out)
    with pytest.raises(OutputError, match="holds the current folder"):
        OutputFolder(".", overwrite=True, names=NAMES)
    monkeypatch.chdir(tmp_path)
    with pytest.raises(OutputError, match="mount point"):
        OutputFolder("/", overwrite=True, names=NAMES)


def test_a_record_never_reaches_outside_its_folder(tmp_path):
    out = tmp_path / "out"
    make_build(out, "A", 1, overwrite=False)
    outside = tmp_path / "precious.txt"
    outside.write_text("keep")
    (tmp_path / "elsewhere").mkdir()
    (tmp_path / "elsewhere" / "slice_000.tif").write_text("keep too")
    record = json.loads((out / "record.json").read_text())
    record["outputs"] += ["../precious.txt", str(outside), "link/slice_000.tif"]
    (out / "record.json").write_text(json.dumps(record))
    (out / "link").symlink_to(tmp_path / "elsewhere")
    make_build(out, "B", 1)
    assert outside.read_text() == "keep"
    assert (tmp_path / "elsewhere" / "slice_000.tif").read_text() == "keep too"
    assert (out / "link").is_symlink()


# --- crashes in the commit, and the next build's recovery ---------------------------------------

def crash_at(monkeypatch, name: str, *, after: bool = False, times: int = 1):
    """Make ``commit.<name>`` end the process (no cleanup) before (or after) its n-th call."""
    original = getattr(commit, name)
    calls = []

    def stop(*args, **kwargs):
        calls.append(1)
        if len(calls) == times and not after:
            os._exit(0)
        result = original(*args, **kwargs)
        if len(calls) == times and after:
            os._exit(0)
        return result

    monkeypatch.setattr(commit, name, stop)


def in_child(func) -> None:
    """Run ``func`` in a forked child, which ends by ``os._exit`` (a crash: no cleanup)."""
    pid = os.fork()
    if pid == 0:  # pragma: no cover - the child
        try:
            func()
        finally:
            os._exit(3)  # reached only if the crash point was not
    _, status = os.waitpid(pid, 0)
    assert os.waitstatus_to_exitcode(status) == 0, "the crash point was not reached"


def slicer_part(out: Path) -> dict[str, bytes]:
    record = json.loads((out / "record.json").read_text())
    return {k: v for k, v in files_of(out).items() if k in {*record["outputs"], "record.json"}}


CRASHES = {
    # the stage is complete and recorded, nothing switched yet
    "before the switch": dict(name="exchange"),
    # exchanged: OUT is new, the stage's name holds the earlier folder and the user's files
    "after the exchange": dict(name="exchange", after=True),
    # the earlier folder renamed aside, nothing put back yet
    "before putting back": dict(name="_put_back"),
    # the user's files put back, the earlier build not yet deleted
    "before deleting the earlier build": dict(name="_remove_owned"),
}


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs fork")
@pytest.mark.parametrize("point", list(CRASHES))
def test_a_crash_in_the_commit_leaves_one_build_whole(tmp_path, monkeypatch, point):
    out = tmp_path / "out"
    old = make_build(out, "A", 3, overwrite=False)
    mine = add_user_files(out)

    def second_build():
        crash_at(monkeypatch, **CRASHES[point])
        make_build(out, "B", 2)

    in_child(second_build)
    now = slicer_part(out)
    assert now == old or {k: v for k, v in now.items() if k != "record.json"} == {
        **{f"slices/slice_{i:03d}.tif": f"B slice {i}".encode() for i in range(2)},
        "cube.nc": b"B cube"}
    assert leftovers(out)  # the interrupted build's folders are beside it
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        recover(out)
    assert [str(w.message) for w in caught] == []
    assert leftovers(out) == []
    assert files_of(out) == {**slicer_part(out), **mine}  # the user's files all back
    new = make_build(out, "C", 1)  # and the next build goes on as usual
    assert files_of(out) == {**new, **mine}


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs fork")
def test_a_crash_between_the_two_renames_is_finished_forward(tmp_path, monkeypatch):
    # where the system cannot exchange two folders: OUT -> old, stage -> OUT
    out = tmp_path / "out"
    make_build(out, "A", 2, overwrite=False)
    mine = add_user_files(out)

    def second_build():
        monkeypatch.setattr(commit, "exchange", lambda a, b: False)
        real_rename = os.rename

        def rename(src, dst):
            real_rename(src, dst)
            if Path(dst).name.startswith("out.slicer-old-"):
                os._exit(0)

        monkeypatch.setattr(commit.os, "rename", rename)
        make_build(out, "B", 2)

    in_child(second_build)
    assert not out.exists() and len(leftovers(out)) == 2  # both whole, beside it
    recover(out)
    assert leftovers(out) == []
    part = slicer_part(out)
    assert part["cube.nc"] == b"B cube"
    assert files_of(out) == {**part, **mine}


def test_names_taken_while_the_earlier_folder_was_aside_are_kept_with_a_warning(tmp_path):
    out, other = tmp_path / "out", tmp_path / "other"
    make_build(out, "A", 1, overwrite=False)
    make_build(other, "B", 1, overwrite=False)
    aside = commit.sibling(out.resolve(), "old", "0123456789ab")
    out.rename(aside)  # as an interrupted commit leaves it, with the new build in place
    other.rename(out)
    (aside / "plan.dxf").write_text("old plan")
    (out / "plan.dxf").write_text("new plan")
    with pytest.warns(SlicerWarning, match="could not be put back.*plan.dxf"):
        recover(out)
    assert (aside / "plan.dxf").read_text() == "old plan"  # nothing lost
    assert sorted(p.name for p in aside.iterdir()) == ["plan.dxf"]


def test_recovery_leaves_a_running_builds_stage_alone(tmp_path):
    out = tmp_path / "out"
    with OutputFolder(out, names=NAMES) as folder:
        write_stage(folder.path, "A", 1)
        code = f"from slicer.core.commit import recover; recover({str(out)!r})"
        subprocess.run([sys.executable, "-c", code], check=True, timeout=120)
        assert folder.path.is_dir() and (folder.path / "cube.nc").exists()
        folder.commit(["cube.nc"], {"slicer": "test"})
    assert (out / "cube.nc").read_text() == "A cube"


def test_a_stage_left_by_a_killed_build_is_removed(tmp_path):
    out = tmp_path / "out"
    make_build(out, "A", 1, overwrite=False)
    stale = commit.sibling(out.resolve(), "new", "00000000abcd")
    stale.mkdir()
    write_stage(stale, "X", 2)
    legacy = [out / ".cube.k2j4_x9a.tmp.nc",
              out / "slices" / ".slice_000_0.000-0.100m.a1b2c3d4.tmp.tif"]
    for p in legacy:
        p.write_text("a temporary file of an older slicer")
    (out / ".cube.zarr.q8w7e6r5.tmp").mkdir()
    recover(out)
    assert leftovers(out) == [] and not any(p.exists() for p in legacy)
    assert not (out / ".cube.zarr.q8w7e6r5.tmp").exists()
    assert (out / "cube.nc").read_text() == "A cube"


def test_a_ctrl_c_during_the_switch_waits_for_it(tmp_path, monkeypatch):
    out = tmp_path / "out"
    make_build(out, "A", 2, overwrite=False)
    mine = add_user_files(out)
    real = commit.exchange

    def interrupted(a, b):
        os.kill(os.getpid(), signal.SIGINT)  # as a Ctrl-C would, in the middle of the renames
        return real(a, b)

    monkeypatch.setattr(commit, "exchange", interrupted)
    with pytest.raises(KeyboardInterrupt):
        make_build(out, "B", 1)
    part = slicer_part(out)
    assert part["cube.nc"] == b"B cube" and len(part) == 3  # the new build, whole
    assert files_of(out) == {**part, **mine}  # the user's files already back
    recover(out)  # the earlier build, not yet deleted when the Ctrl-C was raised
    assert leftovers(out) == []
