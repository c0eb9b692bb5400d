"""Builds stopped for real: killed (SIGKILL) at each phase, or meeting a full disk.

Each build runs the command line in a child process (``python -c``) whose only change is a
hook: the first call of one chosen function (before or after it runs) writes a marker file and
waits. The test waits for the marker (bounded), then kills the child, or fills the disk and
lets it go on. Then it checks what the kill or the full disk left: the output folder holds one
build whole (the earlier one, or the new one once it was switched in), and the next build
clears every leftover and puts the user's files back.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest
import rasterio

from slicer.cli import main
from slicer.outputs.cube import read_cube_netcdf
from slicer.outputs.zarr_store import open_cube_zarr

ARGS = ["--crs", "EPSG:32633", "--sample-interval", "0.1", "--time-zero", "3.0", "--cell",
        "0.1", "--depths", "0:2:0.25", "--formats", "tif,zarr,nc", "-q"]
#: Phases whose build writes only the default outputs (the slices, from a working Zarr store
#: that must never be left behind); the last --formats given counts.
TIF_ONLY = ["--formats", "tif"]
EARLIER, NEW = ["--velocity", "0.1"], ["--velocity", "0.12", "--overwrite"]
USER = {"slices/slice_notmine.tif": b"my own raster", "notes/field.txt": b"rain at 11:00"}

#: Wait at most this long for a child to reach its hook (it imports the whole stack first).
REACH_S = 180

CHILD = r"""
import functools, importlib, os, signal, sys, time
# A Ctrl-C as a shell delivers it: default handling, not blocked. A child inherits an ignored
# or blocked SIGINT from the process that starts it (POSIX exec keeps both), and in two of
# four full runs of the suite on 2026-12-03 these children ignored the Ctrl-C and finished
# (exit 0); not reproduced alone, under load, or with the state logged.
signal.signal(signal.SIGINT, signal.default_int_handler)
signal.pthread_sigmask(signal.SIG_UNBLOCK, [signal.SIGINT])
marker, go, where, when = sys.argv[1:5]
module, _, name = where.partition(":")
owner = importlib.import_module(module)
*path, attr = name.split(".")
for part in path:
    owner = getattr(owner, part)
original = getattr(owner, attr)
calls = []

def pause():
    with open(marker, "w"):
        pass
    give_up = time.monotonic() + 600  # a test that died never leaves this process behind
    while not os.path.exists(go):  # until the test kills this process or lets it go on
        if time.monotonic() > give_up:
            os._exit(99)
        time.sleep(0.02)

@functools.wraps(original)
def hooked(*args, **kwargs):
    calls.append(1)
    if when == "before" and len(calls) == 1:
        pause()
    result = original(*args, **kwargs)
    if when == "after" and len(calls) == 1:
        pause()
    return result

setattr(owner, attr, hooked)
from slicer.cli import main
sys.exit(main(sys.argv[5:]))
"""


class Child:
    """A build in a child process, held at a hook."""

    def __init__(self, folder: Path, hook: str, when: str, argv: list[str]):
        self.marker, self.go = folder / "reached", folder / "go"
        self.process = subprocess.Popen(
            [sys.executable, "-c", CHILD, str(self.marker), str(self.go), hook, when, *argv],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)

    def wait_for_hook(self) -> None:
        deadline = time.monotonic() + REACH_S
        while not self.marker.exists():
            if self.process.poll() is not None:
                pytest.fail(f"the build ended before its hook: {self.process.communicate()}")
            if time.monotonic() > deadline:
                self.process.kill()
                pytest.fail("the build did not reach its hook")
            time.sleep(0.05)

    def kill(self) -> None:
        self.process.send_signal(signal.SIGKILL)
        self.process.communicate(timeout=60)

    def resume(self) -> tuple[int, str]:
        self.go.touch()
        _, err = self.process.communicate(timeout=REACH_S)
        return self.process.returncode, err


def checksums(folder: Path) -> dict[str, str]:
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def whole_build(out: Path) -> dict:
    """Check that ``out`` holds one build whole; its record.

    The record lists exactly slicer's files present, and the outputs agree: the NetCDF cube
    equals the Zarr cube and every slice GeoTIFF its slice of the cube.
    """
    record = json.loads((out / "record.json").read_text())
    listed = {"record.json"}
    for entry in record["outputs"]:
        path = out / entry
        listed |= ({q.relative_to(out).as_posix() for q in path.rglob("*") if q.is_file()}
                   if path.is_dir() else {entry})
    assert set(checksums(out)) - set(USER) == listed
    cube = read_cube_netcdf(out / "cube.nc")
    np.testing.assert_array_equal(open_cube_zarr(out / "cube.zarr").values, cube.values)
    slices = sorted(e for e in record["outputs"] if e.startswith("slices/"))
    assert len(slices) == cube.shape[0]
    for i, entry in enumerate(slices):
        with rasterio.open(out / entry) as src:
            np.testing.assert_array_equal(src.read(1), cube.values[i])
    return record


def leftovers(out: Path) -> list[str]:
    """Folders of an interrupted build beside ``out``, and temporary files in it."""
    beside = [p.name for p in out.parent.iterdir() if p.name.startswith(f"{out.name}.")]
    inside = [p.relative_to(out).as_posix() for p in out.rglob(".*")
              if p.name not in (".zattrs", ".zgroup", ".zarray", ".zmetadata")]
    return sorted(beside + inside)


@pytest.fixture(scope="module")
def earlier(small_survey, tmp_path_factory):
    """A finished build with the user's own files added: the folder and its checksums."""
    out = tmp_path_factory.mktemp("earlier") / "out"
    assert main(["build", str(small_survey.line_table), *ARGS, *EARLIER, "--out", str(out)]) == 0
    for rel, data in USER.items():
        (out / rel).parent.mkdir(exist_ok=True)
        (out / rel).write_bytes(data)
    return out, checksums(out)


#: Where each child is killed, and which build the folder must hold after the kill.
PHASES = {
    "start-up": ("slicer.pipeline.cube_build:reduce_and_plan", "before", "earlier"),
    "reading": ("slicer.pipeline.line_tasks:reduce_line", "before", "earlier"),
    "tiles": ("slicer.outputs.sink:CubeSink.write", "after", "earlier"),
    "netcdf": ("slicer.outputs.sink:write_netcdf_from_store", "before", "earlier"),
    "slices": ("slicer.outputs.sink:CubeSink._write_whole_slices", "before", "earlier"),
    "switch": ("slicer.core.commit:exchange", "before", "earlier"),
    "switched": ("slicer.core.commit:exchange", "after", "new"),
}


@pytest.fixture(scope="module")
def killed(small_survey, earlier, tmp_path_factory):
    """Every phase's build, started at once on its own copy of the earlier build, killed."""
    children = {}
    for phase, (hook, when, _) in PHASES.items():
        folder = tmp_path_factory.mktemp(phase)
        out = folder / "out"
        shutil.copytree(earlier[0], out, symlinks=True)
        argv = ["build", str(small_survey.line_table), *ARGS, *NEW, "--out", str(out)]
        if phase == "slices":
            argv += TIF_ONLY
        children[phase] = (Child(folder, hook, when, argv), out)
    try:
        for child, _ in children.values():
            child.wait_for_hook()
    finally:
        for child, _ in children.values():
            child.kill()
    return {phase: out for phase, (_, out) in children.items()}


@pytest.mark.parametrize("phase", list(PHASES))
def test_a_killed_build_leaves_one_build_whole_and_the_next_clears_up(killed, earlier, phase,
                                                                        small_survey, capsys):
    out = killed[phase]
    expected = PHASES[phase][2]
    record = whole_build(out)
    if expected == "earlier":
        assert checksums(out) == earlier[1]  # untouched, the user's files included
    else:
        assert record["settings"]["velocity"] == 0.12  # the new build, switched in whole
    assert leftovers(out), "the kill should have left the build's folder beside the output"
    code = main(["build", str(small_survey.line_table), *ARGS, *NEW, "--out", str(out)])
    assert code == 0, capsys.readouterr().err
    assert whole_build(out)["settings"]["velocity"] == 0.12
    assert leftovers(out) == []
    assert {k: (out / k).read_bytes() for k in USER} == USER


@pytest.fixture(scope="module")
def interrupted(small_survey, earlier, tmp_path_factory):
    """Builds stopped by a Ctrl-C (SIGINT) at three phases: exit code, stderr, folder."""
    children = {}
    for phase in ("reading", "tiles", "netcdf", "slices"):
        hook, when, _ = PHASES[phase]
        folder = tmp_path_factory.mktemp(f"ctrl-c-{phase}")
        shutil.copytree(earlier[0], folder / "out", symlinks=True)
        argv = ["build", str(small_survey.line_table), *ARGS, *NEW, "--out", str(folder / "out")]
        if phase == "slices":
            argv += TIF_ONLY
        children[phase] = (Child(folder, hook, when, argv), folder / "out")
    results = {}
    try:
        for phase, (child, out) in children.items():
            child.wait_for_hook()
            child.process.send_signal(signal.SIGINT)
            results[phase] = (*child.resume(), out)  # a task held at its hook may finish
    finally:
        for child, _ in children.values():
            if child.process.poll() is None:
                child.kill()
    return results


@pytest.mark.parametrize("phase", ["reading", "tiles", "netcdf", "slices"])
def test_a_ctrl_c_ends_in_one_line_and_leaves_the_earlier_build(interrupted, earlier, phase):
    code, err, out = interrupted[phase]
    assert code == 130 and len(err.splitlines()) == 1, err
    assert err.startswith("slicer: interrupted;")
    assert checksums(out) == earlier[1] and leftovers(out) == []


# --- a full disk ----------------------------------------------------------------------------

def _fill(folder: Path, room: int) -> Path:
    """Fill the disk of ``folder`` until ``room`` bytes (about: whole pages) are left free."""
    ballast = folder / "ballast"
    with open(ballast, "wb", buffering=0) as f:
        if room:
            f.write(b"\0" * (shutil.disk_usage(folder).free - room))
        else:
            for size in (1 << 16, 1):  # blocks, then the last bytes
                with contextlib.suppress(OSError):
                    while f.write(b"\0" * size):
                        pass
    assert shutil.disk_usage(folder).free <= room
    return ballast


@pytest.fixture
def small_disk():
    """A 16 MiB tmpfs (root on Linux only), outside pytest's folders (which another session
    may clear)."""
    if not sys.platform.startswith("linux") or os.geteuid() != 0:
        pytest.skip("mounting a small disk needs root on Linux")
    mount = Path(tempfile.mkdtemp(prefix="slicer-small-disk-"))
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=16m", "tmpfs", str(mount)],
                          capture_output=True, text=True)
    if done.returncode != 0:
        mount.rmdir()
        pytest.skip(f"cannot mount a tmpfs: {done.stderr.strip()}")
    try:
        yield mount
    finally:
        if subprocess.run(["umount", str(mount)], check=False).returncode == 0:
            mount.rmdir()


#: Where the disk fills: the hook, the scheduler, and the bytes left free. With a little room
#: left, writing the NetCDF cube fails part way: h5netcdf then crashed the interpreter (SIGSEGV)
#: as it closed the failed file again at exit.
FULL = {
    "first tile": ("slicer.outputs.sink:CubeSink.write", "before", "threads", 0),
    "tiles written": ("slicer.outputs.sink:CubeSink.write", "after", "threads", 0),
    "netcdf": ("slicer.outputs.sink:write_netcdf_from_store", "before", "threads", 20_000),
    "netcdf by workers": ("slicer.pipeline.worker_outputs:WorkerSink._write_slices", "before",
                          "processes", 20_000),
    "slices from the working store": ("slicer.outputs.sink:CubeSink._write_whole_slices",
                                      "before", "threads", 20_000),
    "record": ("slicer.core.commit:atomic_write_text", "before", "threads", 0),
}


@pytest.mark.parametrize("where", list(FULL))
def test_a_full_disk_ends_in_one_line_and_keeps_the_earlier_build(small_survey, small_disk,
                                                                   tmp_path, where):
    out = small_disk / "out"
    assert main(["build", str(small_survey.line_table), *ARGS, *EARLIER, "--out", str(out)]) == 0
    before = checksums(out)
    hook, when, scheduler, room = FULL[where]
    extra = TIF_ONLY if where == "slices from the working store" else []
    child = Child(tmp_path, hook, when, ["build", str(small_survey.line_table), *ARGS, *NEW,
                                         "--scheduler", scheduler, "--out", str(out), *extra])
    try:
        child.wait_for_hook()
        ballast = _fill(small_disk, room)
        code, err = child.resume()
    finally:
        if child.process.poll() is None:  # never left waiting at its hook
            child.kill()
    assert code == 2, err  # not a crash (negative, or 139 for a segmentation fault)
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("slicer: error: "), err
    assert "No space left on device" in err or "the disk is full" in err
    assert str(out) in lines[0] and ".slicer-" not in lines[0]  # the folder the user knows
    assert checksums(out) == before
    ballast.unlink()
    assert leftovers(out) == []
