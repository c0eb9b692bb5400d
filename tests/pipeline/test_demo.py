"""Tests of slicer.pipeline.demo: the survey file the demo writes, and run_demo's folders,
settings and refusals.

The full demo (29 lines and a build, about 6 s) runs once in
tests/test_cli.py::test_demo_command through the command line; here run_demo is run on a
three-line stand-in for the demo scenario with the build stood in for, so that what run_demo
itself does (the folders, survey.toml, the settings it hands to the build) is checked cheaply.
Source named beside the checks: TOML v1.0.0 (toml.io), read back with the Python standard
library's ``tomllib``.
"""

from __future__ import annotations

import tomllib

import pytest

import slicer
import slicer.pipeline.build as build_module
import slicer.synthetic.surveys as surveys
from slicer.core.errors import OutputError
from slicer.pipeline.demo import DEMO_FORMATS, DEMO_OPTIONS, run_demo, write_survey_toml
from slicer.synthetic import Ground, PointTarget, Radar, grid_lines


def test_survey_toml_reads_back_with_tomllib(tmp_path):
    values = {"crs": "EPSG:32633", "sample_interval": 0.1, "samples": 512, "level": True,
              "overwrite": False, "title": 'the "north" field\\C:\\data', "cell": 1e-3}
    path = write_survey_toml(tmp_path / "s.toml", lines="lines.csv", out="build", **values)
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    assert data == {"lines": "lines.csv", "out": "build", **values}
    assert {type(data[k]) for k in ("level", "overwrite")} == {bool}
    assert type(data["samples"]) is int and type(data["sample_interval"]) is float
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.toml"]  # no temporary left


def test_demo_options_are_valid_build_settings(tmp_path):
    (tmp_path / "lines.csv").write_text("file,start_x,start_y,end_x,end_y\n"
                                        "L000.sgy,512000,4650000,512020,4650000\n")
    path = write_survey_toml(tmp_path / "survey.toml", lines="lines.csv", **DEMO_OPTIONS)
    settings = slicer.load_settings(path)
    for key, value in DEMO_OPTIONS.items():
        assert getattr(settings, key) == value, key
    assert "out" not in tomllib.loads(path.read_text())  # the build's --out decides


def test_non_empty_folder_is_refused_before_anything_is_written(tmp_path):
    out = tmp_path / "d"
    out.mkdir()
    (out / "mine.txt").write_text("keep")
    with pytest.raises(OutputError, match="--overwrite") as info:
        run_demo(out, progress=False)
    assert info.value.where == str(out)
    assert sorted(p.name for p in out.iterdir()) == ["mine.txt"]


def _small_demo():
    """A stand-in for the demo scenario: one stone under three lines (same radar and CRS)."""
    e, n = 512000.0, 4650000.0
    ground = Ground(velocity=0.1, targets=(PointTarget(e + 1.05, n + 0.55, 0.65),))
    radar = Radar(frequency_mhz=400.0, sample_interval_ns=0.1, samples=512, time_zero_ns=3.0,
                  seed=5)
    lines = grid_lines(west=e, south=n, length=2.0, width=1.0, line_spacing=0.5,
                       trace_spacing=0.05, direction="x")
    return ground, radar, lines, "EPSG:32633"


@pytest.mark.parametrize("fmt", ["segy", "netcdf"])
def test_run_demo_writes_the_survey_and_hands_it_to_the_build(tmp_path, monkeypatch, fmt):
    # the build itself is stood in for (the real one runs in tests/test_cli.py); what it is
    # given and what run_demo returns are checked
    calls = []

    def fake_build(settings, *, progress, command):
        calls.append((settings, progress, command))
        return "the build's result"

    monkeypatch.setattr(surveys, "demo_survey", _small_demo)
    monkeypatch.setattr(build_module, "build", fake_build)
    out = tmp_path / "d"
    assert run_demo(out, format=fmt, progress=False) == "the build's result"
    suffix = {"segy": ".sgy", "netcdf": ".nc"}[fmt]
    survey = out / "survey"
    names = [f"L00{k}{suffix}" for k in range(3)]
    assert sorted(p.name for p in survey.glob(f"*{suffix}")) == names
    # survey.toml repeats the build: the demo options, every output format and the survey's
    # own line table
    assert DEMO_FORMATS == "tif,zarr,nc"
    assert tomllib.loads((survey / "survey.toml").read_text()) == {
        "lines": "lines.csv", **DEMO_OPTIONS, "formats": DEMO_FORMATS}
    [(settings, progress, command)] = calls
    assert [e.file for e in settings.lines] == [survey / name for name in names]
    assert settings.out == out / "build" and not settings.overwrite
    for key, value in {**DEMO_OPTIONS, "formats": DEMO_FORMATS}.items():
        assert getattr(settings, key) == value, key
    assert progress is False and command == ["slicer", "demo", "--out", str(out)]
    # again: refused without overwrite (nothing rebuilt), rewritten with it
    with pytest.raises(OutputError, match="--overwrite"):
        run_demo(out, format=fmt, progress=False)
    assert len(calls) == 1
    run_demo(out, format=fmt, overwrite=True, progress=False)
    assert len(calls) == 2 and calls[1][0].overwrite
