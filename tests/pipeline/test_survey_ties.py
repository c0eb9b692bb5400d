"""Tests of slicer.pipeline.survey_ties: ties in a build, measured over the survey, reported,
applied on request.

The survey is invented synthetic ground truth: two orthogonal line sets over layers and point
targets, every line recorded with a known time-zero offset and gain, all processed with the
same fixed time zero (3 ns), so the lines disagree at their crossings by the known amounts.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest

import slicer
from slicer.cli import main
from slicer.io.segy import write_segy_line
from slicer.synthetic import Ground, Layer, PointTarget, Radar, grid_lines, simulate_line

W, S = 512000.0, 4650000.0
SETTINGS = dict(crs="EPSG:32633", sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.1,
                depths="0:1.6:0.1", dewow=3.75)


def _survey(folder, offsets, gains):
    ground = Ground(velocity=0.1, attenuation_db_per_m=2.0,
                    targets=(PointTarget(W + 1.0, S + 1.0, 0.6),
                             PointTarget(W + 2.5, S + 3.0, 0.9, amplitude=1.5)),
                    layers=(Layer(1.0, 0.5), Layer(1.6, 0.4)))
    radar = Radar(samples=450, seed=3)
    plans = (grid_lines(west=W - 0.2, south=S + 0.013, length=4.4, width=4.0, line_spacing=1.0,
                        trace_spacing=0.05, direction="x", prefix="E")
             + grid_lines(west=W + 0.025, south=S - 0.2, length=4.4, width=4.0,
                          line_spacing=1.0, trace_spacing=0.05, direction="y", prefix="N"))
    folder.mkdir(parents=True, exist_ok=True)
    rows = ["file,start_x,start_y,end_x,end_y"]
    for plan, offset, gain in zip(plans, offsets, gains, strict=True):
        raw = simulate_line(ground, dataclasses.replace(radar, time_zero_ns=3.0 + offset), plan)
        write_segy_line(raw * np.float32(gain), folder / f"{plan.name}.sgy")
        rows.append(f"{plan.name}.sgy,{plan.start_x},{plan.start_y},{plan.end_x},{plan.end_y}")
    (folder / "lines.csv").write_text("\n".join(rows) + "\n")
    return folder / "lines.csv", len(plans)


@pytest.fixture(scope="module")
def network(tmp_path_factory):
    rng = np.random.default_rng(5)
    offsets = rng.uniform(-0.6, 0.6, 10)  # ns, as in tests/test_ties.py
    gains = np.exp(rng.uniform(math.log(0.6), math.log(1.6), 10))
    table, n = _survey(tmp_path_factory.mktemp("ties") / "s", offsets, gains)
    ideal, _ = _survey(tmp_path_factory.mktemp("ideal") / "s", np.zeros(n), np.ones(n))
    return table, ideal, offsets, gains


def test_report_recovers_the_known_offsets(network):
    table, _, offsets, gains = network
    result = slicer.build_cube(slicer.load_settings(table, ties="report", **SETTINGS),
                               progress=False)
    ties = result.record["ties"]
    assert ties["mode"] == "report" and not ties["applied"]
    assert ties["ties_used"] >= 20  # of the 5 x 5 crossings
    got = np.array([c["time_zero_ns"] for c in ties["corrections"]])
    # the solution fixes differences only (mean zero): compare with the offsets about their mean
    np.testing.assert_allclose(got, offsets - offsets.mean(), atol=0.1)  # one sample
    gain = np.array([c["gain"] for c in ties["corrections"]])
    want = np.exp(-(np.log(gains) - np.log(gains).mean()))
    np.testing.assert_allclose(gain, want, rtol=0.15)
    assert ties["misfit_after_ns"] < ties["misfit_before_ns"] / 5


def test_apply_brings_the_cube_towards_the_ideal_survey(network):
    table, ideal, _, _ = network
    off = slicer.build_cube(slicer.load_settings(table, **SETTINGS), progress=False)
    applied = slicer.build_cube(slicer.load_settings(table, ties="apply", **SETTINGS),
                                progress=False)
    truth = slicer.build_cube(slicer.load_settings(ideal, **SETTINGS), progress=False).cube
    assert applied.record["ties"]["applied"]
    assert "tie correction" in applied.record["lines"][0]["history"]

    def misfit(cube):  # relative to the ideal cube, per slice scale
        a, b = cube.values, truth.values
        ok = np.isfinite(a) & np.isfinite(b)
        return float(np.sqrt(np.mean((a[ok] - b[ok]) ** 2)) / np.sqrt(np.mean(b[ok] ** 2)))

    assert off.record["ties"] is None
    # the gains solved are relative (geometric mean 1), so compare shapes: scale each cube to
    # the ideal one's total first
    scale = lambda c: c * (np.nansum(truth.values) / np.nansum(c.values))  # noqa: E731
    assert misfit(scale(applied.cube)) < 0.25 * misfit(scale(off.cube))  # 0.035 vs 0.287 here


def test_ties_on_one_direction_warn_and_change_nothing(small_survey):
    settings = slicer.load_settings(small_survey.line_table, ties="apply", sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, depths="0:1:0.5")
    with pytest.warns(slicer.SlicerWarning, match="no crossings"):
        result = slicer.build_cube(settings, progress=False)
    assert result.record["ties"]["crossings"] == 0 and not result.record["ties"]["applied"]


def test_cli_prints_the_misfit(network, tmp_path, capsys):
    table, _, _, _ = network
    code = main(["build", str(table), "--crs", "EPSG:32633", "--sample-interval", "0.1",
                 "--time-zero", "3.0", "--velocity", "0.1", "--cell", "0.1",
                 "--depths", "0:1.6:0.1", "--dewow", "3.75", "--ties", "apply",
                 "--out", str(tmp_path / "o")])
    out = capsys.readouterr().out
    assert code == 0 and "ties at" in out and "ns corrected" in out
    record = json.loads((tmp_path / "o" / "record.json").read_text())
    assert record["ties"]["misfit_after_ns"] < record["ties"]["misfit_before_ns"]


def test_bad_ties_value_is_one_line(small_survey, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["build", str(small_survey.line_table), "--ties", "maybe", "--out", "x"])
    err = capsys.readouterr().err
    assert stop.value.code == 2 and err.count("\n") == 1 and "--ties" in err
    with pytest.raises(slicer.SettingsError, match="--ties"):
        slicer.load_settings(small_survey.line_table, ties="maybe")
