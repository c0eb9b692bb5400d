"""Tests of slicer.pipeline.repeat: ``slicer build --repeat RECORD`` and its library API."""

import json
import os
import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest
import rasterio
import zarr

from slicer.cli import main
from slicer.core.errors import OutputError, SettingsError, SlicerError
from slicer.pipeline.repeat import (
    BuildRecord,
    InputChangedError,
    RecordError,
    merge_options,
    settings_from_record,
)

SURVEY = """lines = "lines.csv"
crs = "EPSG:32633"
sample_interval = 0.1
time_zero = 3.0
velocity_model = "v.toml"
cell = 0.1
depths = "0.1:1.6:0.3"
formats = "tif,zarr,nc"
"""

MODEL = 'kind = "constant"\nvelocity = {velocity}\nvelocity_std = 0.004\n'


@pytest.fixture(scope="module")
def built(small_survey, tmp_path_factory):
    """A work folder: survey/ (lines, survey.toml, v.toml) and out/ built from it."""
    work = tmp_path_factory.mktemp("repeat")
    shutil.copytree(small_survey.folder, work / "survey")
    (work / "survey" / "v.toml").write_text(MODEL.format(velocity=0.1))
    (work / "survey" / "survey.toml").write_text(SURVEY)
    assert main(["build", str(work / "survey" / "survey.toml"), "--out", str(work / "out"),
                 "-q"]) == 0
    return work


@pytest.fixture(scope="module")
def repeated(built):
    """The build of ``built`` repeated with the defaults: into out-repeat-1."""
    assert main(["build", "--repeat", str(built / "out" / "record.json"), "-q"]) == 0
    return built / "out-repeat-1"


def record(folder: Path) -> dict:
    return json.loads((folder / "record.json").read_text())


def test_repeat_gives_identical_slices_and_cube(built, repeated):
    first, again = record(built / "out"), record(repeated)
    slices = sorted(o for o in first["outputs"] if o.startswith("slices/"))
    assert slices and slices == sorted(o for o in again["outputs"] if o.startswith("slices/"))
    for name in slices:  # pixels read by rasterio (GDAL), not by slicer
        with rasterio.open(built / "out" / name) as ra, rasterio.open(repeated / name) as rb:
            a, b = ra.read(), rb.read()
            assert ra.transform == rb.transform and ra.crs == rb.crs
        assert a.dtype == b.dtype == np.float32 and np.isfinite(a).any()
        assert a.tobytes() == b.tobytes()  # bit for bit, NaN payloads included
    with h5py.File(built / "out" / "cube.nc") as fa, h5py.File(repeated / "cube.nc") as fb:
        names = [k for k in fa if isinstance(fa[k], h5py.Dataset)]
        assert "depth" in names and sorted(names) == sorted(k for k in fb)
        for k in names:  # every variable of the CF NetCDF cube, read by h5py
            assert fa[k][()].tobytes() == fb[k][()].tobytes(), k
    za, zb = zarr.open_group(built / "out" / "cube.zarr", mode="r"), zarr.open_group(
        repeated / "cube.zarr", mode="r")
    arrays = sorted(za.array_keys())
    assert arrays and arrays == sorted(zb.array_keys())
    for k in arrays:  # the Zarr cube, read by zarr
        assert np.asarray(za[k][...]).tobytes() == np.asarray(zb[k][...]).tobytes(), k


def test_the_repeat_records_which_record_it_repeated(built, repeated):
    first, again = record(built / "out"), record(repeated)
    of = again["repeat_of"]
    assert of["build_id"] == first["build_id"] and of["overrides"] == {}
    assert (repeated / of["record"]).resolve() == (built / "out" / "record.json").resolve()
    # hashlib's SHA-256 of the repeated record file (FIPS 180-4)
    import hashlib
    assert of["sha256"] == hashlib.sha256((built / "out" / "record.json").read_bytes()).hexdigest()
    assert again["settings"] == first["settings"]  # out is "." in both: the record's folder
    assert again["inputs"] == [{**i, "file": i["file"]} for i in first["inputs"]]
    assert again["command"][:3] == ["slicer", "build", "--repeat"]
    assert (built / "out").is_dir() and first["build_id"] != again["build_id"]


def test_record_paths_are_relative_to_the_record_folder(built):
    rec = record(built / "out")
    assert rec["folder"] == os.path.realpath(built / "out")
    assert rec["settings"]["source"] == "../survey/survey.toml"
    assert rec["settings"]["velocity_model"] == "../survey/v.toml"
    names = set()
    for entry in rec["inputs"]:
        assert not Path(entry["file"]).is_absolute()
        assert (built / "out" / entry["file"]).is_file()
        names.add(Path(entry["file"]).name)
    assert {"survey.toml", "v.toml", "lines.csv", "L000.sgy"} <= names


def test_a_flag_overrides_the_recorded_setting(built, tmp_path):
    out = tmp_path / "other"
    assert main(["build", "--repeat", str(built / "out"), "--cell", "0.2", "--permittivity",
                 "9", "--formats", "tif", "--out", str(out), "-q"]) == 0
    rec = record(out)
    assert rec["settings"]["cell"] == 0.2 and rec["grid"]["cell"] == 0.2
    assert rec["settings"]["formats"] == "tif" and not {"cube.nc", "cube.zarr"} & set(
        rec["outputs"]) and not (out / "cube.zarr").exists()
    # one of a group of alternatives replaces the recorded one (as a flag does a survey file's)
    assert rec["settings"]["permittivity"] == 9 and rec["settings"]["velocity_model"] is None
    assert rec["repeat_of"]["overrides"] == {"cell": 0.2, "permittivity": 9.0,
                                             "formats": "tif"}
    # v = c / sqrt(er), c = 0.299792458 m/ns (CODATA): 0.0999308193 m/ns at er = 9
    assert rec["settings"]["velocity_used"] == pytest.approx(0.299792458 / 3, rel=1e-11)


def test_a_changed_input_is_refused_naming_it(built, tmp_path, capsys):
    moved = tmp_path / "moved"  # survey and build moved together still find each other
    shutil.copytree(built / "survey", moved / "survey")
    shutil.copytree(built / "out", moved / "out")
    settings = settings_from_record(moved / "out" / "record.json")
    assert all(moved / "survey" in Path(e.file).parents for e in settings.lines)
    assert settings.out == moved / "out-repeat-1" and not settings.overwrite
    line = moved / "survey" / "L003.sgy"
    data = bytearray(line.read_bytes())
    data[-1] ^= 1  # one bit of one sample
    line.write_bytes(bytes(data))
    capsys.readouterr()
    assert main(["build", "--repeat", str(moved / "out" / "record.json"), "-q"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and str(line.resolve()) in err and "changed" in err
    assert not (moved / "out-repeat-1").exists()
    with pytest.raises(InputChangedError) as caught:
        settings_from_record(moved / "out")
    assert caught.value.where == str(line.resolve())


def test_a_missing_input_is_refused(built, tmp_path):
    shutil.copytree(built / "survey", tmp_path / "survey")
    shutil.copytree(built / "out", tmp_path / "out")
    (tmp_path / "survey" / "L001.sgy").unlink()
    with pytest.raises(InputChangedError, match="missing") as caught:
        settings_from_record(tmp_path / "out" / "record.json")
    assert caught.value.where.endswith("L001.sgy")


def test_an_input_an_override_replaces_is_not_checked(built, tmp_path):
    shutil.copytree(built / "survey", tmp_path / "survey")
    shutil.copytree(built / "out", tmp_path / "out")
    (tmp_path / "survey" / "v.toml").write_text(MODEL.format(velocity=0.12))
    with pytest.raises(InputChangedError):
        settings_from_record(tmp_path / "out")
    settings = settings_from_record(tmp_path / "out", velocity=0.1)  # the model is not read
    assert settings.velocity == 0.1 and settings.velocity_model is None


def test_a_build_folder_moved_alone_finds_its_survey(built, tmp_path):
    shutil.copytree(built / "out", tmp_path / "elsewhere")
    rec = BuildRecord.read(tmp_path / "elsewhere")
    assert rec.source == (built / "survey" / "survey.toml").resolve()
    settings = settings_from_record(rec, out=tmp_path / "new")
    assert settings.velocity_model == (built / "survey" / "v.toml").resolve()


def test_the_formats_are_repeated_and_an_earlier_record_repeats_every_format(built, tmp_path):
    assert settings_from_record(built / "out", out=tmp_path / "a").formats == "tif,zarr,nc"
    # a record written before outputs could be chosen: its build wrote all three
    shutil.copytree(built / "out", tmp_path / "old")
    data = record(tmp_path / "old")
    del data["settings"]["formats"]
    (tmp_path / "old" / "record.json").write_text(json.dumps(data))
    assert settings_from_record(tmp_path / "old", out=tmp_path / "b").formats == "tif,zarr,nc"
    # and a flag still chooses
    assert settings_from_record(tmp_path / "old", out=tmp_path / "c",
                                formats="zarr").formats == "zarr"


def test_the_original_build_is_kept_without_explicit_flags(built, tmp_path, capsys):
    shutil.copytree(built / "survey", tmp_path / "survey")
    shutil.copytree(built / "out", tmp_path / "out")
    record_file = tmp_path / "out" / "record.json"
    before = record_file.read_bytes()
    capsys.readouterr()
    assert main(["build", "--repeat", str(record_file), "--overwrite", "-q"]) == 2
    assert "--overwrite" in capsys.readouterr().err
    with pytest.raises(SettingsError):
        settings_from_record(record_file, overwrite=True)
    assert main(["build", "--repeat", str(record_file), "--out", str(tmp_path / "out"),
                 "-q"]) == 2
    assert "not empty" in capsys.readouterr().err or record_file.read_bytes() == before
    assert record_file.read_bytes() == before
    assert main(["build", "--repeat", str(record_file), "--out", str(tmp_path / "out"),
                 "--overwrite", "-q"]) == 0
    again = json.loads(record_file.read_text())
    assert again["repeat_of"]["build_id"] == json.loads(before)["build_id"]


@pytest.mark.parametrize("argv", [["build", "-q"], ["build", "x.toml", "--repeat", "r.json"]])
def test_a_survey_or_a_record(argv, capsys):
    with pytest.raises(SystemExit) as info:  # a usage error, as argparse reports one
        main(argv)
    err = capsys.readouterr().err.strip().splitlines()
    assert info.value.code == 2 and len(err) == 1 and "--repeat RECORD" in err[0]


def test_what_is_not_a_record_is_refused(tmp_path):
    with pytest.raises(RecordError, match="no such record"):
        BuildRecord.read(tmp_path)
    (tmp_path / "record.json").write_text('{"slicer": "0.1.0", "outputs": []}')
    with pytest.raises(RecordError, match="not the record") as caught:
        settings_from_record(tmp_path)
    assert caught.value.where == str(tmp_path / "record.json")
    assert issubclass(RecordError, SlicerError) and issubclass(OutputError, SlicerError)
    (tmp_path / "record.json").write_text("{")
    with pytest.raises(RecordError, match="cannot read"):
        BuildRecord.read(tmp_path / "record.json")


def test_merge_options_follows_the_flag_over_file_precedence():
    recorded = {"velocity": 0.1, "depths": "0:1:0.1", "cell": 0.1}
    assert merge_options(recorded, {"permittivity": 9.0, "cell": None}) == {
        "depths": "0:1:0.1", "cell": 0.1, "permittivity": 9.0}
    assert merge_options(recorded, {"times": "0:20:2"}) == {
        "velocity": 0.1, "cell": 0.1, "times": "0:20:2"}
    assert merge_options(recorded, {}) == recorded
