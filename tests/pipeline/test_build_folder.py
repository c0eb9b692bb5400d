"""Tests of a build's output folder, end to end through the command line: --overwrite replaces
only the earlier build's own files, inputs are never written over, and every file and folder
gets the user's normal permissions (slicer.core.commit, slicer.core.atomic)."""

from __future__ import annotations

import json
import os
import stat
from pathlib import Path

import pytest

from slicer.cli import main
from slicer.io.linefile import write_line_netcdf
from slicer.io.reading import read_line

ARGS = ["--crs", "EPSG:32633", "--sample-interval", "0.1", "--time-zero", "3.0",
        "--velocity", "0.1", "--cell", "0.1", "-q"]


def build(capsys, table, out, *extra) -> tuple[int, str]:
    code = main(["build", str(table), *ARGS, "--out", str(out), *map(str, extra)])
    return code, capsys.readouterr().err


def tree(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def beside(out: Path) -> list[str]:
    return sorted(p.name for p in out.parent.iterdir() if p.name.startswith(f"{out.name}."))


def test_overwrite_keeps_the_users_files_and_replaces_the_earlier_builds(small_survey,
                                                                          tmp_path, capsys):
    out = tmp_path / "out"
    code, err = build(capsys, small_survey.line_table, out, "--depths", "0:2:0.25",
                      "--formats", "tif,zarr,nc")
    assert code == 0, err
    first = json.loads((out / "record.json").read_text())
    assert len([o for o in first["outputs"] if o.startswith("slices/")]) == 8
    assert {"cube.zarr", "cube.nc"} <= set(first["outputs"])
    mine = {"slices/slice_notmine.tif": b"a raster of my own", "notes/dig.txt": b"trench 2",
            "plan.dxf": b"site plan"}
    for rel, data in mine.items():
        (out / rel).parent.mkdir(exist_ok=True)
        (out / rel).write_bytes(data)
    code, err = build(capsys, small_survey.line_table, out, "--depths", "0:1:0.5",
                      "--overwrite")
    assert code == 0, err
    record = json.loads((out / "record.json").read_text())
    assert record["build_id"] != first["build_id"]
    on_disk = tree(out)
    for rel, data in mine.items():
        assert on_disk.pop(rel) == data
    # what is left is exactly the new build (by default slices, overview, record): the 8
    # slices, the Zarr and NetCDF cubes of the first went, 2 new slices came
    assert set(on_disk) == {*record["outputs"], "record.json"}
    assert not (out / "cube.zarr").exists() and not (out / "cube.nc").exists()
    assert sorted(p.name for p in (out / "slices").iterdir()) == [
        "slice_000_0.000-0.500m.tif", "slice_001_0.500-1.000m.tif", "slice_notmine.tif"]
    assert beside(out) == []


def _line_named_like_an_output(small_survey, out: Path) -> Path:
    """A line table whose second line is a NetCDF line file ``out/cube.nc``."""
    out.mkdir(exist_ok=True)
    write_line_netcdf(read_line(small_survey.folder / "L001.sgy",
                                                 sample_interval_ns=0.1), out / "cube.nc")
    table = out.parent / "lines.csv"
    table.write_text("file,start_x,start_y,end_x,end_y\n"
                     f"{small_survey.folder / 'L000.sgy'},512000,4650000,512004,4650000\n"
                     f"{out / 'cube.nc'},512004,4650000.5,512000,4650000.5\n")
    return table


@pytest.mark.parametrize("earlier_build", [False, True])
def test_an_input_named_like_an_output_is_refused_before_anything_is_written(
        small_survey, tmp_path, capsys, earlier_build):
    out = tmp_path / "out"
    if earlier_build:
        code, err = build(capsys, small_survey.line_table, out, "--depths", "0:1:0.5")
        assert code == 0, err
    table = _line_named_like_an_output(small_survey, out)
    before = tree(out)
    code, err = build(capsys, table, out, "--depths", "0:1:0.5", "--overwrite",
                      "--formats", "tif,nc")
    assert code == 2
    assert err.splitlines() == [f"slicer: error: {out / 'cube.nc'}: is an input of this build "
                                "and lies where its outputs go; move it out of the output "
                                "folder or choose another --out"]
    assert tree(out) == before and beside(out) == []
    # moved aside, the same line builds (the refusal was for its place, not its content)
    (out / "cube.nc").rename(tmp_path / "L001.nc")
    table.write_text(table.read_text().replace(str(out / "cube.nc"), str(tmp_path / "L001.nc")))
    code, err = build(capsys, table, out, "--depths", "0:1:0.5", "--overwrite")
    assert code == 0, err


def test_an_output_not_asked_for_leaves_a_file_of_that_name_alone(small_survey, tmp_path,
                                                                  capsys):
    # without --formats nc the build writes no cube.nc, so a line file of that name in the
    # output folder is neither refused nor touched
    out = tmp_path / "out"
    table = _line_named_like_an_output(small_survey, out)
    line = (out / "cube.nc").read_bytes()
    code, err = build(capsys, table, out, "--depths", "0:1:0.5", "--overwrite")
    assert code == 0, err
    assert (out / "cube.nc").read_bytes() == line
    assert "cube.nc" not in json.loads((out / "record.json").read_text())["outputs"]


def modes(folder: Path) -> set[tuple[str, int]]:
    """The (kind, permission bits) of ``folder`` and everything in it."""
    found = {("dir", stat.S_IMODE(folder.stat().st_mode))}
    for p in folder.rglob("*"):
        found.add(("dir" if p.is_dir() else "file", stat.S_IMODE(p.stat().st_mode)))
    return found


@pytest.mark.parametrize("umask", [0o022, 0o002])
def test_outputs_get_the_users_normal_permissions(small_survey, tmp_path, capsys, umask):
    # (worker processes' outputs: tests/pipeline/test_worker_outputs.py)
    old = os.umask(umask)
    try:
        out = tmp_path / "new" / "out"
        code, err = build(capsys, small_survey.line_table, out, "--depths", "0:1:0.5",
                          "--formats", "tif,zarr,nc")
        assert code == 0, err
        code, err = build(capsys, small_survey.line_table, out, "--depths", "0:1:0.25",
                          "--overwrite", "--formats", "tif,zarr,nc")
        assert code == 0, err
    finally:
        os.umask(old)
    assert modes(out) == {("dir", 0o777 & ~umask), ("file", 0o666 & ~umask)}
    assert stat.S_IMODE((tmp_path / "new").stat().st_mode) == 0o777 & ~umask


def test_a_working_store_left_in_the_build_folder_is_not_switched_in(small_survey, tmp_path,
                                                                      capsys, monkeypatch):
    # the sink deletes its Zarr working store when cube.zarr is not asked for; should that
    # fail, the commit still switches in only the listed outputs and the record (the NetCDF
    # cube asked for: it is written from a store on disk, where GeoTIFFs alone of a small
    # cube are written from memory)
    from slicer.outputs.zarr_store import CubeStore
    kept = []
    monkeypatch.setattr(CubeStore, "discard", lambda self: kept.append(self.path))
    out = tmp_path / "out"
    code, err = build(capsys, small_survey.line_table, out, "--depths", "0:1:0.5",
                      "--formats", "tif,nc")
    assert code == 0, err
    assert kept and kept[0].name.startswith(".cube.zarr")  # it was left in the stage
    record = json.loads((out / "record.json").read_text())
    assert set(tree(out)) == {*record["outputs"], "record.json"}
    assert sorted(p.name for p in out.iterdir()) == ["cube.nc", "overview.png", "radargrams",
                                                     "record.json", "slices", "viewer.html"]
    assert beside(out) == []
