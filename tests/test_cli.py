"""Tests of slicer.cli, the command line: the contract, bad input (one line, exit 2, nothing
written), safety."""

import json
import os
import shutil
import subprocess
import sys

import numpy as np
import pytest
import rasterio

from slicer.cli import main
from slicer.io.linefile import write_line_netcdf
from slicer.io.reading import read_line

GOOD = ["--crs", "EPSG:32633", "--sample-interval", "0.1", "--time-zero", "3.0",
        "--velocity", "0.1", "--cell", "0.1", "--depths", "0:2.4:0.1"]


@pytest.fixture
def survey(small_survey, tmp_path):
    """A private copy of the small survey (tests may damage it)."""
    folder = tmp_path / "survey"
    shutil.copytree(small_survey.folder, folder)
    return folder


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def assert_refused(capsys, out, *argv, match):
    code, _, err = run(capsys, *argv)
    assert code == 2, err
    lines = [x for x in err.splitlines() if x.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("slicer: error:") and "Traceback" not in err
    assert match in lines[0], lines[0]
    assert not out.exists(), "nothing may be written on bad input"
    return lines[0]


def test_contract_line(survey, capsys, monkeypatch):
    monkeypatch.chdir(survey)
    code, stdout, err = run(capsys, "build", "lines.csv", *GOOD, "--out", "out")
    assert code == 0, err
    assert len(list((survey / "out" / "slices").glob("*.tif"))) == 24
    assert "24 depth slices" in stdout
    assert "Traceback" not in err


def test_quiet_prints_nothing(survey, capsys):
    code, stdout, err = run(capsys, "build", survey / "lines.csv", *GOOD, "--out",
                            survey / "o", "-q")
    assert code == 0 and stdout == "" and err == ""


def test_help_everywhere():
    for argv in (["--help"], ["build", "--help"], ["demo", "--help"]):
        proc = subprocess.run([sys.executable, "-m", "slicer.cli", *argv],
                              capture_output=True, text=True)
        assert proc.returncode == 0 and "usage: slicer" in proc.stdout


def test_usage_error_is_one_line(capsys):
    with pytest.raises(SystemExit) as info:
        main(["build"])
    err = capsys.readouterr().err.strip().splitlines()
    assert info.value.code == 2 and len(err) == 1 and "required" in err[0]


def without_interval():
    argv = list(GOOD)
    i = argv.index("--sample-interval")
    del argv[i:i + 2]
    return argv


def _table(survey, text):
    p = survey / "bad.csv"
    p.write_text(text)
    return p


HEADER = "file,start_x,start_y,end_x,end_y\n"


@pytest.mark.parametrize("case, match", [
    ("missing_file", "L000.sgy"),
    ("empty_file", "L000.sgy"),
    ("truncated_file", "L000.sgy"),
    ("garbage_file", "L000.sgy"),
    ("non_numeric", "bad.csv:2: column start_x"),
    ("missing_column", "missing column(s) end_y"),
    ("empty_field", "bad.csv:3: column end_x is empty"),
    ("empty_table", "no lines"),
    ("zero_length", "bad.csv:2: line has zero length"),
])
def test_bad_files_and_tables(survey, capsys, case, match):
    first = survey / "L000.sgy"
    table = survey / "lines.csv"
    if case == "missing_file":
        first.unlink()
    elif case == "empty_file":
        first.write_bytes(b"")
    elif case == "truncated_file":
        os.truncate(first, first.stat().st_size - 100)
    elif case == "garbage_file":
        first.write_bytes(np.random.default_rng(0).bytes(5000))
    elif case == "non_numeric":
        table = _table(survey, HEADER + "L000.sgy,east,0,4,0\n")
    elif case == "missing_column":
        table = _table(survey, "file,start_x,start_y,end_x\nL000.sgy,0,0,4\n")
    elif case == "empty_field":
        table = _table(survey, HEADER + "L000.sgy,0,0,4,0\nL001.sgy,0,0.5,,0.5\n")
    elif case == "empty_table":
        table = _table(survey, HEADER)
    elif case == "zero_length":
        table = _table(survey, HEADER + "L000.sgy,1,1,1,1\n")
    assert_refused(capsys, survey / "out", "build", table, *GOOD, "--out", survey / "out",
                   match=match)


@pytest.mark.parametrize("change, match", [
    (("--velocity", "0.5"), "--velocity"),
    (("--velocity", "0"), "--velocity"),
    (("--velocity", "-0.1"), "--velocity"),
    (("--cell", "0"), "--cell"),
    (("--cell", "-0.1"), "--cell"),
    (("--depths", "1:1:0.1"), "--depths"),
    (("--depths", "2:1:0.1"), "--depths"),
    (("--depths", "0:1:0"), "--depths"),
    (("--depths", "5:8:0.1"), "--depths: every slice reaches below the end of the record"),
    (("--depths", "zero:1:0.1"), "--depths"),
    (("--crs", "EPSG:999999"), "--crs: unknown CRS"),
    (("--crs", "EPSG:4326"), "--crs"),
    (("--sample-interval", "-1"), "--sample-interval"),
    (("--time-zero", "80"), "--time-zero"),
])
def test_bad_options(survey, capsys, change, match):
    argv = list(GOOD)
    i = argv.index(change[0])
    argv[i + 1] = change[1]
    assert_refused(capsys, survey / "out", "build", survey / "lines.csv", *argv, "--out",
                   survey / "out", match=match)


@pytest.mark.parametrize("value", ["0.5", "1", "-3"])
def test_impossible_permittivity(survey, capsys, value):
    argv = [a for a in GOOD]
    i = argv.index("--velocity")
    argv[i:i + 2] = ["--permittivity", value]
    assert_refused(capsys, survey / "out", "build", survey / "lines.csv", *argv, "--out",
                   survey / "out", match="--permittivity")


def test_output_path_that_is_a_file(survey, capsys):
    target = survey / "taken"
    target.write_text("precious")
    code, _, err = run(capsys, "build", survey / "lines.csv", *GOOD, "--out", target)
    assert code == 2 and "is a file" in err and len(err.strip().splitlines()) == 1
    assert target.read_text() == "precious"


def test_non_empty_output_refused_then_overwritten(survey, capsys):
    out = survey / "out"
    out.mkdir()
    (out / "mine.txt").write_text("keep")
    code, _, err = run(capsys, "build", survey / "lines.csv", *GOOD, "--out", out, "-q")
    assert code == 2 and "--overwrite" in err
    assert sorted(p.name for p in out.iterdir()) == ["mine.txt"]
    code, _, err = run(capsys, "build", survey / "lines.csv", *GOOD, "--out", out, "-q",
                       "--overwrite")
    assert code == 0, err
    assert (out / "mine.txt").read_text() == "keep"  # only slicer's own outputs are replaced
    # a second build with fewer slices leaves no stale slices of the first
    argv = list(GOOD)
    argv[argv.index("--depths") + 1] = "0:1:0.5"
    code, _, err = run(capsys, "build", survey / "lines.csv", *argv, "--out", out, "-q",
                       "--overwrite")
    assert code == 0 and len(list((out / "slices").glob("*.tif"))) == 2


def _netcdf_survey(survey, tmp_path, *, interval=None, samples=None):
    """Copy two SEG-Y lines to NetCDF, changing the second's interval or sample count."""
    rows = [HEADER.strip()]
    for k, name in enumerate(("L000", "L001")):
        line = read_line(survey / f"{name}.sgy", sample_interval_ns=0.1)
        if k == 1 and samples is not None:
            line = line.isel(twt=slice(0, samples))
        if k == 1 and interval is not None:
            line = line.assign_coords(twt=line["twt"] * interval / 0.1)
            line.attrs["sample_interval_ns"] = interval
        write_line_netcdf(line, tmp_path / f"{name}.nc", overwrite=True)
        rows.append(f"{name}.nc,512000,{4650000 + 0.5 * k},512004,{4650000 + 0.5 * k}")
    (tmp_path / "nc.csv").write_text("\n".join(rows) + "\n")
    return tmp_path / "nc.csv"


def test_lines_that_disagree(survey, tmp_path, capsys):
    argv = without_interval()
    table = _netcdf_survey(survey, tmp_path, samples=400)
    assert_refused(capsys, tmp_path / "out", "build", table, *argv, "--out", tmp_path / "out",
                   match="L001.nc: 400 samples per trace")
    table = _netcdf_survey(survey, tmp_path, interval=0.2)
    assert_refused(capsys, tmp_path / "out", "build", table, *argv, "--out", tmp_path / "out",
                   match="L001.nc: sample interval 0.2 ns")


def test_no_sample_interval_anywhere(survey, tmp_path, capsys):
    # SEG-Y written by plain segyio holds no radar interval: the user must give one
    import segyio
    spec = segyio.spec()
    spec.format, spec.samples, spec.tracecount = 5, np.arange(512), 30
    with segyio.create(survey / "L000.sgy", spec) as f:
        f.trace = [np.zeros(512, np.float32)] * 30
    argv = without_interval()
    assert_refused(capsys, survey / "out", "build", survey / "lines.csv", *argv, "--out",
                   survey / "out", match="--sample-interval")


def test_nan_samples_are_tolerated_and_reported(survey, tmp_path, capsys):
    line = read_line(survey / "L000.sgy", sample_interval_ns=0.1)
    line.values[3, 100:110] = np.nan
    line.values[5, 7] = np.inf
    write_line_netcdf(line, tmp_path / "L000.nc")
    (tmp_path / "one.csv").write_text(HEADER + "L000.nc,512000,4650000,512004,4650000\n"
                                      + "L001.nc,512004,4650000.5,512000,4650000.5\n")
    write_line_netcdf(read_line(survey / "L001.sgy",
                                                      sample_interval_ns=0.1), tmp_path / "L001.nc")
    code, _, err = run(capsys, "build", tmp_path / "one.csv", *GOOD, "--out", tmp_path / "o",
                       "-q")
    assert code == 0
    assert "warning" in err and "11 NaN or infinite sample(s) set to 0" in err
    with rasterio.open(sorted((tmp_path / "o" / "slices").glob("*.tif"))[5]) as src:
        assert np.isfinite(src.read(1)).any()


def test_killed_mid_way_leaves_no_half_written_file(survey, capsys, monkeypatch):
    import slicer.outputs.sink

    def killed(*args, **kwargs):
        raise KeyboardInterrupt

    out = survey / "out"
    code, _, err = run(capsys, "build", survey / "lines.csv", *GOOD, "--out", out, "-q")
    assert code == 0
    before = {p: p.read_bytes() for p in (out / "slices").glob("*.tif")}
    # a second build, stopped while it writes the NetCDF cube (after every slice is gridded)
    monkeypatch.setattr(slicer.outputs.sink, "_write_netcdf", killed)
    argv = list(GOOD)
    argv[argv.index("--velocity") + 1] = "0.12"
    code, _, err = run(capsys, "build", survey / "lines.csv", *argv, "--out", out, "-q",
                       "--overwrite", "--formats", "tif,nc")
    assert code == 130 and "interrupted" in err
    after = {p: p.read_bytes() for p in (out / "slices").glob("*.tif")}
    assert after == before  # the earlier build's files are whole and unchanged
    leftovers = [p for p in out.rglob("*") if ".tmp" in p.name]
    assert leftovers == []


def test_survey_toml_with_flag_override(survey, capsys):
    (survey / "survey.toml").write_text(
        'lines = "lines.csv"\ncrs = "EPSG:32633"\nsample_interval = 0.1\ntime_zero = 3.0\n'
        'velocity = 0.1\ncell = 0.1\ndepths = "0:2.4:0.1"\nout = "from-toml"\n')
    code, _, err = run(capsys, "build", survey / "survey.toml", "-q", "--depths", "0:1:0.25")
    assert code == 0, err
    assert len(list((survey / "from-toml" / "slices").glob("*.tif"))) == 4


def test_demo_command(tmp_path, capsys):
    code, stdout, err = run(capsys, "demo", "--out", tmp_path / "d", "-q")
    assert code == 0, err
    assert (tmp_path / "d" / "survey" / "survey.toml").exists()
    assert len(list((tmp_path / "d" / "build" / "slices").glob("*.tif"))) == 24
    # the demo shows every output format
    assert (tmp_path / "d" / "build" / "cube.zarr").is_dir()
    assert (tmp_path / "d" / "build" / "cube.nc").is_file()
    code, _, err = run(capsys, "demo", "--out", tmp_path / "d", "-q")
    assert code == 2 and "--overwrite" in err
    code, _, err = run(capsys, "demo", "--out", tmp_path / "d", "-q", "--overwrite")
    assert code == 0, err


@pytest.mark.parametrize("extra, match", [
    (["--formats", "tif,png"], "--formats: unknown output format 'png'"),
    (["--formats", ","], "--formats: no output format given"),
    (["--memory-limit", "1MB"], "--memory-limit: this build needs about"),
    (["--memory-limit", "plenty"], "--memory-limit"),
    (["--scheduler", "gpu"], "--scheduler"),
])
def test_engine_options_refused(survey, capsys, extra, match):
    assert_refused(capsys, survey / "out", "build", survey / "lines.csv", *GOOD, *extra,
                   "--out", survey / "out", match=match)


def test_build_on_a_local_cluster(survey, capsys):
    code, _, err = run(capsys, "build", survey / "lines.csv", *GOOD, "--scheduler", "local:2",
                       "--out", survey / "o", "-q")
    assert code == 0, err
    assert len(list((survey / "o" / "slices").glob("*.tif"))) == 24


def test_plan_command_gives_the_worked_numbers(capsys):
    import json
    # Worked example for 400 MHz in dry sand (er = 4) at z = 2 m, from
    # ../shared/reference/check-values.md: lambda 0.3747 m (v / f), resolution 0.0937 m
    # (lambda / 4, common practice; Jol (ed.) 2009), Fresnel radius 0.619 m (Sheriff & Geldart
    # 1995), footprint 1.248 m (Annan 1996 in Martinez & Byrnes 2001), dt 0.417 ns (Annan 2009)
    code, out, _ = run(capsys, "plan", "--frequency", "400", "--permittivity", "4",
                       "--target-depth", "2", "--json")
    assert code == 0
    values = {q["quantity"]: q["value"] for q in json.loads(out)["quantities"]}
    assert values["wavelength in the ground"] == pytest.approx(0.3747, abs=1e-4)
    assert values["vertical resolution"] == pytest.approx(0.0937, abs=1e-4)
    assert values["first Fresnel zone radius at target depth"] == pytest.approx(0.619, abs=1e-3)
    assert values["antenna footprint long axis at target depth"] == pytest.approx(1.248,
                                                                                   abs=1e-3)
    assert values["largest sample interval"] == pytest.approx(0.417, abs=1e-3)


@pytest.mark.parametrize("argv, where", [
    (["--frequency", "-1", "--permittivity", "4", "--target-depth", "2"], "--frequency"),
    (["--frequency", "400", "--permittivity", "0.5", "--target-depth", "2"], "--permittivity"),
    (["--frequency", "400", "--velocity", "0.4", "--target-depth", "2"], "--velocity"),
    (["--frequency", "400", "--permittivity", "4", "--target-depth", "-2"], "--target-depth"),
])
def test_plan_bad_input(capsys, argv, where):
    code, _, err = run(capsys, "plan", *argv)
    assert code == 2 and err.startswith(f"slicer: error: {where}") and len(
        err.strip().splitlines()) == 1


def test_velocity_contract_line_finds_the_demo_velocity(demo_files, capsys, monkeypatch):
    import json
    monkeypatch.chdir(demo_files.folder)
    code, out, err = run(capsys, "velocity", "lines.csv", "--sample-interval", "0.1",
                         "--time-zero", "3.0", "--json")
    assert code == 0, err
    result = json.loads(out)
    # the synthetic ground's velocity is 0.1 m/ns; the issue asks for 3 %
    assert result["velocity"] == pytest.approx(0.1, rel=0.03)
    assert result["velocity_std"] > 0 and len(result["fits"]) >= 5
    assert {"velocity", "velocity_std", "x", "y", "time", "depth"} <= set(result["fits"][0])


def test_velocity_writes_a_model_the_build_accepts(small_survey, tmp_path, capsys):
    code, out, err = run(capsys, "velocity", small_survey.line_table, "--sample-interval",
                         "0.1", "--time-zero", "3.0", "--out", tmp_path / "v", "-q")
    assert code == 0, err
    assert "survey velocity" in out
    # without --antenna-height the result says it is not corrected for ground coupling
    assert "--antenna-height not given" in err and err.count("\n") == 1
    assert list((tmp_path / "v" / "figures").glob("*.png"))
    code, _, err = run(capsys, "build", small_survey.line_table, "--sample-interval", "0.1",
                       "--time-zero", "3.0", "--velocity-model", tmp_path / "v" / "velocity.toml",
                       "--depths", "0:2:0.1", "--out", tmp_path / "b", "-q")
    assert code == 0, err


def test_velocity_takes_the_antenna_height(small_survey, capsys):
    import json
    code, out, err = run(capsys, "velocity", small_survey.line_table, "--sample-interval",
                         "0.1", "--time-zero", "3.0", "--antenna-height", "0.0", "--json", "-q")
    assert code == 0, err
    assert json.loads(out)["antenna_height"] == 0.0  # the correction ran (see test_coupling)
    assert "--antenna-height not given" not in err
    code, _, err = run(capsys, "velocity", small_survey.line_table, "--antenna-height", "-0.1")
    assert code == 2 and "--antenna-height" in err


@pytest.mark.parametrize("text, match", [
    ('kind = "layered"\n[[layer]]\ntop_depth = 0.0\nvelocity = 0.1\nvelocity_std = 0.0\n'
     '[[layer]]\ntop_depth = 2.0\nvelocity = 0.1\nvelocity_std = 0.0\n'
     '[[layer]]\ntop_depth = 1.0\nvelocity = 0.1\nvelocity_std = 0.0\n', "model.toml:layer"),
    ('kind = "constant"\nvelocity = 0.5\nvelocity_std = 0.0\n', "model.toml"),
    ('kind = "layered"\n[[layer]]\nbase_time = 25.0\nrms_velocity = 0.1\nvelocity_std = 0\n'
     '[[layer]]\nbase_time = 50.0\nrms_velocity = 0.05\nvelocity_std = 0\n', "layer[1]"),
])
def test_bad_velocity_model_files(survey, capsys, text, match):
    # layers out of order, a velocity faster than light, and an RMS table where Dix (1955)
    # has no real root: one line naming the file and layer, exit 2, nothing written
    model = survey / "model.toml"
    model.write_text(text)
    argv = list(GOOD)
    i = argv.index("--velocity")
    argv[i:i + 2] = ["--velocity-model", str(model)]
    assert_refused(capsys, survey / "out", "build", survey / "lines.csv", *argv, "--out",
                   survey / "out", match=match)


def test_zigzag_auto_without_opposite_lines_is_refused_in_one_line(survey, capsys):
    # every line tabled west to east: no neighbour walked the other way to compare with
    table = survey / "lines.csv"
    rows = table.read_text().splitlines()
    fixed = [rows[0]]
    for row in rows[1:]:
        f, x0, y0, x1, y1 = row.split(",")
        if float(x0) > float(x1):
            x0, y0, x1, y1 = x1, y1, x0, y0
        fixed.append(",".join((f, x0, y0, x1, y1)))
    table.write_text("\n".join(fixed) + "\n")
    line = assert_refused(capsys, survey / "out", "build", table, *GOOD, "--zigzag-shift",
                          "auto", "--out", survey / "out", match="--zigzag-shift")
    assert "walked the other way" in line


def test_new_processing_options_reach_the_record(survey, capsys):
    code, stdout, err = run(capsys, "build", survey / "lines.csv", *GOOD, "--out",
                            survey / "o", "--zigzag-shift", "0.02", "--attribute", "signed",
                            "--antenna-separation", "0.1", "--background", "median:0-8")
    assert code == 0, err
    record = json.loads((survey / "o" / "record.json").read_text())
    s = record["settings"]
    assert (s["zigzag_shift"], s["attribute"], s["antenna_separation"], s["background"]) == (
        0.02, "signed", 0.1, "median:0-8")
    assert record["zigzag"] == {"estimated": False, "shift_m": 0.02}
    assert "zigzag shift 0.020 m (as given)" in stdout
    assert "background removal (median trace, 0-8 ns)" in record["processing"]


def test_a_first_build_stopped_says_nothing_was_written(survey, capsys, monkeypatch):
    import slicer.outputs.sink

    def killed(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(slicer.outputs.sink, "_write_netcdf", killed)
    out = survey / "first"
    code, _, err = run(capsys, "build", survey / "lines.csv", *GOOD, "--out", out, "-q",
                       "--formats", "tif,nc")
    assert code == 130 and err.strip() == "slicer: interrupted; nothing was written"
    assert not out.exists()
