"""Tests of slicer.pipeline.bounds and slicer.pipeline.position_checks: every size of a build
bounded from the headers, and every absurd one refused in one line naming its cause, before any
line is read or anything written.

The command-line tests replace the build's line reading (``reduce_survey``) with a function
that fails the test, so a refusal that passes them came from the pre-checks.
"""

from __future__ import annotations

import collections
import math
import re
import shutil
import warnings

import numpy as np
import pytest
import segyio
from hypothesis import given, settings
from hypothesis import strategies as st

import slicer
from slicer.cli import main
from slicer.geometry.positioning import prepare_survey
from slicer.geometry.survey import survey_info
from slicer.pipeline import bounds
from slicer.pipeline.bounds import MAX_CELLS_PER_TRACE, MAX_UPSAMPLE, check_bounds
from slicer.pipeline.position_checks import FAR_STEPS, far_from_line, trace_positions

GOOD = ["--crs", "EPSG:32633", "--sample-interval", "0.1", "--time-zero", "3.0",
        "--velocity", "0.1", "--cell", "0.1", "--depths", "0:2.4:0.1"]
#: The small survey (tests/conftest.py): six lines 4 m long, 0.5 m apart, traces every 0.05 m.
STEP, SPACING = 0.05, 0.5


@pytest.fixture
def survey(small_survey, tmp_path):
    """A private copy of the small survey (tests damage it)."""
    folder = tmp_path / "survey"
    shutil.copytree(small_survey.folder, folder)
    return folder


@pytest.fixture
def no_work(monkeypatch):
    """Fail the test if the build gets as far as reading and processing its lines."""
    def read(*args, **kwargs):
        raise AssertionError("a line was read before the refusal")
    monkeypatch.setattr("slicer.pipeline.cube_build.reduce_survey", read)


def refused(capsys, out, *argv, match):
    """Run the command line; assert exit 2, one line naming ``match``, nothing written."""
    code = main([str(a) for a in argv])
    err = capsys.readouterr().err
    assert code == 2, err
    lines = [x for x in err.splitlines() if x.strip()]
    assert len(lines) == 1 and lines[0].startswith("slicer: error:"), err
    assert match in lines[0], lines[0]
    assert not re.search(r"\d{13}", lines[0]), "no number of 13 or more digits in a message"
    assert not out.exists(), "nothing may be written on bad input"
    return lines[0]


def flip_bit(path, trace, field, bit):
    """Flip one bit of a trace-header field of a SEG-Y file, in place."""
    with segyio.open(path, "r+", ignore_geometry=True) as f:
        value = f.header[trace][field]
        f.header[trace] = {field: value ^ (1 << bit)}
        return value, f.header[trace][field]


def files_table(folder):
    names = sorted(p.name for p in folder.glob("*.sgy"))
    (folder / "files.csv").write_text("file\n" + "\n".join(names) + "\n")
    return folder / "files.csv"


# --- far_from_line -----------------------------------------------------------------------------


def straight(n=81, step=STEP, angle=0.3, x0=512000.0, y0=4650000.0):
    d = step * np.arange(n)
    return x0 + d * math.cos(angle), y0 + d * math.sin(angle)


def test_a_clean_line_has_no_far_position():
    x, y = straight()
    index, _, step = far_from_line(x, y)
    assert index.size == 0 and step == pytest.approx(STEP)


@pytest.mark.parametrize("k", [0, 1, 40, 79, 80])
def test_one_wild_position_is_found_wherever_it_lies(k):
    # the ends matter most: a line's first and last positions set its start and end
    x, y = straight()
    x[k] += 41943.04  # bit 22 of a CDP X in centimetres (2**22 cm)
    index, distance, _ = far_from_line(x, y)
    assert index.tolist() == [k]
    assert distance[0] == pytest.approx(41943.04, rel=1e-3)


def test_a_short_run_of_wild_positions_is_found():
    x, y = straight()
    y[30:33] -= 5000.0
    assert far_from_line(x, y)[0].tolist() == [30, 31, 32]


def test_curves_gaps_and_gnss_noise_are_not_far():
    # a half circle of 5 m radius: a curved walk
    t = np.linspace(0, math.pi, 300)
    assert far_from_line(5 * np.cos(t), 5 * np.sin(t))[0].size == 0
    # the walk resumed 30 m further on (a gap, not a wild position)
    x, y = straight()
    x[41:] += 30.0
    assert far_from_line(x, y)[0].size == 0
    # GNSS noise of 2 cm (one sigma) on 5 cm steps
    x, y = straight()
    rng = np.random.default_rng(1)
    assert far_from_line(x + rng.normal(0, 0.02, x.size),
                         y + rng.normal(0, 0.02, y.size))[0].size == 0


def test_too_few_positions_are_not_judged():
    x, y = straight(n=4)
    x[1] += 1e6
    index, _, step = far_from_line(x, y)
    assert index.size == 0 and math.isnan(step)


@settings(max_examples=80, deadline=None)
@given(n=st.integers(8, 300), step=st.floats(0.005, 2.0), angle=st.floats(0, 2 * math.pi),
       noise=st.floats(0, 0.2), where=st.floats(0, 1), away=st.floats(3, 1e6),
       turn=st.floats(0, 2 * math.pi))
def test_far_positions_property(n, step, angle, noise, where, away, turn):
    # noise up to a fifth of a step; a position moved by more than three times the far
    # limit (FAR_STEPS steps) is the only one found, and one moved by a tenth of it is not
    x, y = straight(n=n, step=step, angle=angle)
    rng = np.random.default_rng(n)
    x = x + rng.uniform(-noise, noise, n) * step
    y = y + rng.uniform(-noise, noise, n) * step
    k = min(int(where * n), n - 1)
    far_x, far_y = x.copy(), y.copy()
    far_x[k] += away * FAR_STEPS * step * math.cos(turn)
    far_y[k] += away * FAR_STEPS * step * math.sin(turn)
    assert far_from_line(far_x, far_y)[0].tolist() == [k]
    near_x, near_y = x.copy(), y.copy()
    near_x[k] += 0.1 * FAR_STEPS * step * math.cos(turn)
    near_y[k] += 0.1 * FAR_STEPS * step * math.sin(turn)
    assert far_from_line(near_x, near_y)[0].size == 0


# --- damaged coordinates, refused before any line is read --------------------------------------


@pytest.mark.parametrize("name, trace, field, bit, moved", [
    ("L002.sgy", 40, segyio.TraceField.CDP_X, 22, "4.194e+04 m"),   # 2**22 cm
    ("L004.sgy", 0, segyio.TraceField.CDP_Y, 24, "1.678e+05 m"),    # 2**24 cm, first trace
])
def test_flipped_header_bit_names_file_and_trace(survey, capsys, no_work, name, trace, field,
                                                 bit, moved):
    before, after = flip_bit(survey / name, trace, field, bit)
    assert abs(after - before) == 1 << bit
    line = refused(capsys, survey / "out", "build", files_table(survey), "--positions",
                   "headers", *GOOD, "--out", survey / "out", match=f"{name}: trace {trace} lies")
    assert moved in line and "trace-header coordinate" in line


def test_wild_gnss_fix_names_track_row(survey, capsys, no_work):
    rows = "".join(f"{i},{512000.0 + 0.05 * i:.3f},4650000.000\n" for i in range(81))
    text = "trace,x,y\n" + rows.replace("40,512002.000,", "40,552002.000,")
    (survey / "L000.gnss.csv").write_text(text)
    (survey / "t.csv").write_text("file,track\nL000.sgy,L000.gnss.csv\n")
    # the header is row 1 and trace 0 row 2, so trace 40 is row 42
    refused(capsys, survey / "out", "build", survey / "t.csv", "--positions", "track",
            "--track-crs", "EPSG:32633", *GOOD, "--out", survey / "out",
            match="L000.gnss.csv: row 42 lies 4e+04 m")


def test_line_table_typo_is_blamed_on_the_line_not_the_cell(survey, capsys, no_work):
    table = (survey / "lines.csv").read_text().splitlines()
    assert table[4].startswith("L003.sgy,512004.0,")
    table[4] = table[4].replace("512004.0", "5120040.0", 1)  # one digit too many
    (survey / "typo.csv").write_text("\n".join(table) + "\n")
    line = refused(capsys, survey / "out", "build", survey / "typo.csv", *GOOD, "--out",
                   survey / "out", match="typo.csv:5: line L003.sgy lies")
    assert "--cell" not in line


@pytest.mark.parametrize("factor", [0.2, 5.0])
def test_a_line_stretched_by_a_typo_is_named_in_a_warning(factor):
    # a row whose end is wrong by a digit but still near the survey spreads (or squeezes) its
    # traces: 0.05 m apart on the other lines, 0.05 x factor on this one (geometry)
    from types import SimpleNamespace

    from slicer.pipeline.position_checks import warn_odd_spacing
    lines = [SimpleNamespace(where=f"lines.csv:{k + 2}") for k in range(4)]
    positions = [(512000.0 + 0.05 * np.arange(81), np.full(81, 4650000.0 + 0.5 * k))
                 for k in range(4)]
    positions[2] = (512000.0 + 0.05 * factor * np.arange(81), positions[2][1])
    with pytest.warns(slicer.SlicerWarning, match=rf"0\.05 m apart on most lines but not on "
                      rf"lines\.csv:4 \({0.05 * factor:.3g} m\)"):
        warn_odd_spacing(SimpleNamespace(lines=lines), positions)
    positions[2] = (512000.0 + 0.1 * np.arange(81), positions[2][1])  # twice: walking pace
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        warn_odd_spacing(SimpleNamespace(lines=lines), positions)


def test_absurd_coordinate_gives_a_short_message(survey, capsys, no_work):
    table = (survey / "lines.csv").read_text().splitlines()
    table[2] = "L001.sgy,512004.0,4650000.5,1e300,4650000.5"
    (survey / "huge.csv").write_text("\n".join(table) + "\n")
    refused(capsys, survey / "out", "build", survey / "huge.csv", *GOOD, "--out",
            survey / "out", match="huge.csv:3: line L001.sgy lies 5e+299 m")


def test_degrees_given_with_a_projected_crs(survey, capsys, no_work):
    (survey / "deg.csv").write_text(
        "file,start_x,start_y,end_x,end_y\n"
        "L000.sgy,13.40000,52.50000,13.40006,52.50000\n"
        "L001.sgy,13.40006,52.500005,13.40000,52.500005\n")
    refused(capsys, survey / "out", "build", survey / "deg.csv", *GOOD, "--out",
            survey / "out", match="deg.csv:2: trace positions look like longitude/latitude "
                                  "degrees (x 13.4 to 13.40006, y 52.5 to 52.500005), but the "
                                  "survey CRS EPSG:32633 is in metres")


@pytest.mark.parametrize(("rows", "match"), [
    # x and y swapped: UTM zone 33's inverse puts the survey at 50.0 E, 3.8 N (pyproj), far
    # outside the zone's 12-18 E (EPSG's area of use)
    (["L000.sgy,4650000.0,512000.0,4650000.0,512004.0",
      "L001.sgy,4650000.5,512004.0,4650000.5,512000.0"], "put the survey at 50.0 E, 3.8 N"),
    # centimetres as metres: no place of the projection has them (its inverse fails)
    (["L000.sgy,51200000.0,465000000.0,51200400.0,465000000.0",
      "L001.sgy,51200400.0,465000050.0,51200000.0,465000050.0"], "are no place in it"),
])
def test_positions_the_crs_has_no_place_for(survey, capsys, no_work, rows, match):
    (survey / "odd.csv").write_text("file,start_x,start_y,end_x,end_y\n" + "\n".join(rows)
                                    + "\n")
    line = refused(capsys, survey / "out", "build", survey / "odd.csv", *GOOD, "--out",
                   survey / "out", match=match)
    assert line.startswith(f"slicer: error: {survey / 'odd.csv'}:2: trace positions (x ")
    assert "x and y swapped" in line


def test_a_survey_outside_its_zone_but_on_its_grid_is_built(small_survey, tmp_path):
    # National grids reach beyond their zone (mainland Norway in UTM 33 from 4.5 E): the
    # small survey moved to 5.0 E, 60.0 N (pyproj puts it at x -56351, y 6693618 in zone 33)
    from slicer.pipeline.position_checks import check_in_crs_area
    settings = slicer.load_settings(small_survey.line_table, crs="EPSG:32633",
                                    sample_interval=0.1)
    check_in_crs_area(np.array([-56351.3, -56347.3]), np.array([6693618.4, 6693621.0]),
                      settings)  # no error


# --- sizes refused before any line is read -------------------------------------------------------


@pytest.mark.parametrize("value", ["0:1:1e-9", "0:1e300:0.1"])
def test_too_many_slices(survey, capsys, no_work, value):
    argv = list(GOOD)
    argv[argv.index("--depths") + 1] = value
    refused(capsys, survey / "out", "build", survey / "lines.csv", *argv, "--out",
            survey / "out", match="--depths")


def test_cell_finer_than_the_traces_can_inform(survey, capsys, no_work):
    argv = list(GOOD)
    argv[argv.index("--cell") + 1] = "0.001"
    # a trace's share: 0.05 m x 0.5 m = 0.025 m2, 25000 cells of 1 mm; the least cell is
    # sqrt(0.025 / 2500) = 0.0032 m
    line = refused(capsys, survey / "out", "build", survey / "lines.csv", *argv, "--out",
                   survey / "out", match="--cell: a 0.001 m cell puts 2.5e+04 cells")
    assert "at least 0.0032 m" in line


def test_least_cell_is_accepted(small_survey):
    least = math.sqrt(STEP * SPACING / MAX_CELLS_PER_TRACE)
    plan = _plan(small_survey, cell=round(least * 1.01, 6))
    assert plan.grid.cell == pytest.approx(least, rel=0.02)
    with pytest.raises(slicer.SettingsError, match="--cell"):
        _plan(small_survey, cell=round(least * 0.99, 6))


def test_grid_larger_than_the_memory_limit(survey, capsys, no_work):
    argv = list(GOOD)
    argv[argv.index("--cell") + 1] = "0.005"  # 1000 cells a trace: informative, but 400 000
    refused(capsys, survey / "out", "build", survey / "lines.csv", *argv, "--memory-limit",
            "1MB", "--out", survey / "out",
            match="--cell: a 0.005 m cell gives 800 x 500 cells over the survey's 4 x 2.5 m, "
                  "more than the 125000 the memory limit")


def test_default_cell_over_the_memory_limit_blames_the_limit(survey, capsys, no_work):
    argv = [a for a in GOOD]
    del argv[argv.index("--cell"):argv.index("--cell") + 2]
    # the default cell is 0.1 m (a round number near 0.5 / 4): 40 x 25 cells, more than the
    # 4 kB / 8 = 500 cells allowed
    refused(capsys, survey / "out", "build", survey / "lines.csv", *argv, "--memory-limit",
            "4kB", "--out", survey / "out", match="--memory-limit: the default 0.1 m cell")


def test_radius_that_leaves_every_cell_empty(survey, capsys, no_work):
    # lines lie on whole metres and half metres, 0.05 m from the nearest cell centre
    refused(capsys, survey / "out", "build", survey / "lines.csv", *GOOD, "--radius", "0.01",
            "--out", survey / "out", match="--radius: no trace lies within 0.01 m")


def test_suggested_radius_fills_the_grid(small_survey):
    plan = _plan(small_survey, radius=0.1 / math.sqrt(2))
    assert plan.grid.size == 40 * 25


def test_trace_spacing_that_multiplies_the_traces(survey, capsys, no_work):
    # lines stretched to 400 m: 81 traces 5 m apart, resampled every 0.01 m to 40001
    text = (survey / "lines.csv").read_text().replace("512004.0", "512400.0")
    (survey / "long.csv").write_text(text)
    line = refused(capsys, survey / "out", "build", survey / "long.csv", *GOOD,
                   "--trace-spacing", "0.01", "--out", survey / "out",
                   match="--trace-spacing: 0.01 m resamples L000.sgy (400 m, 81 traces) to "
                         "40001 traces")
    assert f"more than {MAX_UPSAMPLE} times" in line


def test_trace_spacing_whose_line_exceeds_the_memory_limit(survey, capsys, no_work):
    # 4001 traces x 512 samples x 56 bytes = 115 MB for one line, over a 100 MB limit
    refused(capsys, survey / "out", "build", survey / "lines.csv", *GOOD, "--trace-spacing",
            "0.001", "--memory-limit", "100MB", "--out", survey / "out",
            match="--trace-spacing: 0.001 m resamples L000.sgy (4 m) to 4001 traces, whose "
                  "processing alone needs")


def test_outputs_larger_than_the_free_disk(survey, capsys, no_work, monkeypatch):
    usage = collections.namedtuple("usage", "total used free")
    monkeypatch.setattr(bounds.shutil, "disk_usage", lambda path: usage(10**6, 10**6 - 1000,
                                                                        1000))
    refused(capsys, survey / "out", "build", survey / "lines.csv", *GOOD, "--out",
            survey / "out", match="--out: the outputs may take up to 375.00 kiB (40 x 25 cells "
                                  "x 24 slices x 4 bytes x 4 copies), more than the 0.98 kiB free")


# --- the plan agrees with what the build does --------------------------------------------------


def _plan(survey, *, writes=False, memory_limit=1 << 30, **overrides):
    options = dict(crs="EPSG:32633", sample_interval=0.1, time_zero=3.0, velocity=0.1,
                   depths="0:2.4:0.1", cell=0.1) | overrides
    s = prepare_survey(slicer.load_settings(survey.line_table, **options))
    info = survey_info(s.lines, sample_interval_ns=s.sample_interval)
    return check_bounds(s, info, cell=s.cell, memory_limit=memory_limit, writes=writes)


def test_planned_positions_are_the_line_tasks_positions(small_survey):
    for positions in ("table", "headers"):
        s = prepare_survey(slicer.load_settings(small_survey.line_table, crs="EPSG:32633",
                                                sample_interval=0.1, positions=positions))
        for entry in s.lines[:2]:
            line = slicer.load_line(entry, s)
            x, y = trace_positions(entry, s, line.sizes["trace"])
            np.testing.assert_array_equal(x, line["x"].values)
            np.testing.assert_array_equal(y, line["y"].values)


def test_planned_resampled_traces_are_the_line_tasks(small_survey):
    plan = _plan(small_survey, trace_spacing=0.03)
    s = prepare_survey(slicer.load_settings(small_survey.line_table, crs="EPSG:32633",
                                            sample_interval=0.1, trace_spacing=0.03))
    sizes = [slicer.load_line(e, s).sizes["trace"] for e in s.lines]
    assert plan.max_line_traces == max(sizes) and plan.n_traces == sum(sizes)


def test_plan_of_the_contract_build(small_survey):
    plan = _plan(small_survey, writes=True)
    assert (plan.grid.nx, plan.grid.ny, plan.n_slices) == (40, 25, 24)
    assert plan.output_bytes == 40 * 25 * 24 * 4 * 4
    assert _plan(small_survey, writes=False).output_bytes == 0
