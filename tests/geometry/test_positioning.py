"""Tests of slicer.geometry.positioning: survey geometry in builds (marks, GNSS tracks, local
grids, channels, blocks).

Every survey here is invented synthetic ground truth (slicer.synthetic); a build must put each
point target on its true cell or the next one (within one cell), the issue's acceptance rule.
"""

from __future__ import annotations

import dataclasses
import json
import math
import types

import numpy as np
import pyproj
import pytest
import xarray as xr

import slicer
from slicer.cli import main
from slicer.geometry.positioning import positioned, read_marks
from slicer.io.linetable import LineEntry
from slicer.io.segy import write_segy_line
from slicer.synthetic import Ground, PlannedLine, PointTarget, Radar, simulate_line

W, S = 512000.0, 4650000.0
CRS = "EPSG:32633"
# the checks read the NetCDF cube, which a build writes only when asked
COMMON = ["--crs", CRS, "--sample-interval", "0.1", "--time-zero", "3.0", "--velocity", "0.1",
          "--cell", "0.1", "--depths", "0:1.6:0.1", "--formats", "nc", "-q"]
RADAR = Radar(samples=400, seed=11)


def _targets(*xyz):
    return tuple(PointTarget(x, y, z) for x, y, z in xyz)


def _east_lines(ys, *, length=4.0, west=W, n=81, prefix="E"):
    """West-east lines (zigzag) at northings ``ys``."""
    out = []
    for k, y in enumerate(ys):
        a, b = (west, y), (west + length, y)
        if k % 2:
            a, b = b, a
        out.append(PlannedLine(f"{prefix}{k:03d}", *a, *b, n))
    return out


def _write(folder, ground, plans, *, radar=RADAR):
    folder.mkdir(parents=True, exist_ok=True)
    for plan in plans:
        write_segy_line(simulate_line(ground, radar, plan), folder / f"{plan.name}.sgy")
    return folder


def _peak_error(cube: xr.DataArray, x: float, y: float, depth: float) -> int:
    """Cells (largest of x and y) between the cell holding the truth and the brightest cell
    within 0.6 m of it, in the slice holding its depth."""
    k = int(np.argmin(np.abs(cube["depth"].values - depth)))
    plane = cube.isel(depth=k).sel(x=slice(x - 0.6, x + 0.6), y=slice(y + 0.6, y - 0.6))
    j, i = np.unravel_index(int(np.nanargmax(plane.values)), plane.shape)
    ti, tj = int(np.argmin(np.abs(plane["x"].values - x))), int(np.argmin(np.abs(
        plane["y"].values - y)))
    return max(abs(i - ti), abs(j - tj))


def _check_targets(out_dir, targets):
    cube = slicer.read_cube_netcdf(out_dir / "cube.nc")
    for t in targets:
        assert _peak_error(cube, t.x, t.y, t.depth) <= 1, t


def _run(args, capsys=None):
    code = main(["build", *[str(a) for a in args]])
    err = capsys.readouterr().err if capsys is not None else ""
    return code, err


# --- distance marks --------------------------------------------------------------------------


def test_marks_positions_hand_computed(tmp_path):
    # marks (0, 0 m), (40, 1.5 m), (80, 4.0 m): trace 20 lies half way to the second mark
    # (0.75 m), trace 60 half way from it to the third (1.5 + 1.25 = 2.75 m)
    (tmp_path / "m.csv").write_text("trace,distance\n0,0\n40,1.5\n80,4.0\n")
    line = xr.DataArray(np.zeros((81, 4), np.float32), dims=("trace", "twt"),
                        coords={"trace": np.arange(81), "twt": np.arange(4) * 0.1})
    entry = LineEntry(file=tmp_path / "L.sgy", start=(W, S), end=(W + 4.4, S), where="t:2",
                      marks=tmp_path / "m.csv")
    settings = types.SimpleNamespace(positions="table", trace_spacing=None)
    placed = positioned(line, entry, settings)
    assert placed["x"].values[20] - W == pytest.approx(0.75)
    assert placed["x"].values[60] - W == pytest.approx(2.75)
    assert placed["distance"].values[80] == pytest.approx(4.0)
    np.testing.assert_allclose(placed["y"].values, S)


def test_marks_column_fixes_a_mistaped_end(tmp_path, monkeypatch):
    # the crew wrote the far end 0.4 m too far; the marks every metre are right
    targets = _targets((W + 3.05, S + 1.05, 0.55), (W + 1.05, S + 2.05, 0.85))
    plans = _east_lines([S + 0.5 * k for k in range(7)])
    folder = _write(tmp_path / "s", Ground(velocity=0.1, targets=targets), plans)
    rows, marked = ["file,start_x,start_y,end_x,end_y,marks"], ["file,start_x,start_y,end_x,end_y"]
    for p in plans:
        sx, ex = (W, W + 4.4) if p.start_x < p.end_x else (W + 4.0, W - 0.4)
        name = f"{p.name}.marks.csv"
        (folder / name).write_text("trace,distance\n" + "".join(
            f"{i},{i * 0.05:g}\n" for i in range(0, 81, 20)))
        rows.append(f"{p.name}.sgy,{sx},{p.start_y},{ex},{p.end_y},{name}")
        marked.append(f"{p.name}.sgy,{sx},{p.start_y},{ex},{p.end_y}")
    (folder / "marked.csv").write_text("\n".join(rows) + "\n")
    (folder / "taped.csv").write_text("\n".join(marked) + "\n")
    monkeypatch.chdir(folder)
    assert _run(["marked.csv", *COMMON, "--out", tmp_path / "a"])[0] == 0
    _check_targets(tmp_path / "a", targets)
    assert _run(["taped.csv", *COMMON, "--out", tmp_path / "b"])[0] == 0
    cube = slicer.read_cube_netcdf(tmp_path / "b" / "cube.nc")  # without marks: misplaced
    assert _peak_error(cube, targets[0].x, targets[0].y, targets[0].depth) > 1


def test_bad_marks_file_names_file_and_row(tmp_path):
    (tmp_path / "m.csv").write_text("trace,distance\n0,0\n2.5,1.0\n")
    with pytest.raises(slicer.InputFileError, match=r"m\.csv:3: column trace"):
        read_marks(tmp_path / "m.csv")


# --- GNSS tracks -----------------------------------------------------------------------------


@pytest.fixture(scope="module")
def tracked(tmp_path_factory):
    """Zigzag west-east lines whose fixes (lon/lat) come from a receiver 0.4 m behind the
    antenna, one fix every 10 traces."""
    targets = _targets((W + 1.05, S + 1.05, 0.55), (W + 2.95, S + 2.05, 0.95))
    plans = _east_lines([S + 0.5 * k for k in range(7)])
    folder = _write(tmp_path_factory.mktemp("gnss"), Ground(velocity=0.1, targets=targets),
                    plans)
    to_lonlat = pyproj.Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    rows = ["file,track"]
    for p in plans:
        x, y = p.positions()
        back = math.copysign(0.4, p.end_x - p.start_x)  # receiver behind the antenna
        lon, lat = to_lonlat.transform(x - back, y)
        text = "trace,lon,lat\n" + "".join(f"{i},{lon[i]:.10f},{lat[i]:.10f}\n"
                                           for i in range(0, p.n_traces, 10))
        (folder / f"{p.name}.gnss.csv").write_text(text)
        rows.append(f"{p.name}.sgy,{p.name}.gnss.csv")
    (folder / "lines.csv").write_text("\n".join(rows) + "\n")
    return folder, targets, plans


def test_track_positions_with_antenna_offset(tracked, tmp_path, monkeypatch):
    folder, targets, plans = tracked
    monkeypatch.chdir(folder)
    code, _ = _run(["lines.csv", *COMMON, "--antenna-along", "0.4", "--out", tmp_path / "o"])
    assert code == 0
    _check_targets(tmp_path / "o", targets)
    record = json.loads((tmp_path / "o" / "record.json").read_text())
    assert record["settings"]["antenna_along"] == 0.4
    # every trace back where it was simulated (pyproj round trip, linear between fixes of a
    # straight, evenly walked line): within a millimetre
    settings = slicer.load_settings(folder / "lines.csv", crs=CRS, antenna_along=0.4,
                                    sample_interval=0.1)
    line = slicer.load_line(settings.lines[1], settings)
    np.testing.assert_allclose(line["x"].values, plans[1].positions()[0], atol=1e-3)


def test_track_that_does_not_cover_the_line_is_refused(tracked, tmp_path, capsys,
                                                       monkeypatch):
    folder, _, plans = tracked
    short = tmp_path / "short.csv"
    short.write_text("\n".join((folder / f"{plans[0].name}.gnss.csv").read_text()
                               .splitlines()[:7]) + "\n")  # fixes up to trace 50 of 80
    table = tmp_path / "t.csv"
    table.write_text(f"file,track\n{folder / plans[0].name}.sgy,{short}\n")
    code, err = _run([table, *COMMON, "--out", tmp_path / "o"], capsys)
    assert code == 2 and err.count("\n") == 1
    assert "short.csv: the fixes cover traces 0 to 50" in err
    assert not (tmp_path / "o").exists()


def test_track_needs_the_survey_crs(tracked, tmp_path, capsys):
    folder, _, _ = tracked
    args = [folder / "lines.csv", "--sample-interval", "0.1", "--out", tmp_path / "o"]
    code, err = _run(args, capsys)
    assert code == 2 and "--crs: positions from a GNSS track need the survey CRS" in err


# --- local grid to CRS -----------------------------------------------------------------------

THETA = math.radians(30.0)
ORIGIN = (W + 2.0, S - 1.0)


def _to_crs(lx, ly):
    c, s = math.cos(THETA), math.sin(THETA)
    return ORIGIN[0] + c * lx - s * ly, ORIGIN[1] + s * lx + c * ly


@pytest.fixture(scope="module")
def local_grid(tmp_path_factory):
    """Lines set out on a local grid rotated 30 degrees from grid north, pegs at the corners."""
    local_targets = [(1.05, 1.05, 0.55), (2.95, 2.05, 0.85)]
    targets = _targets(*[(*_to_crs(x, y), z) for x, y, z in local_targets])
    local_plans = _east_lines([0.5 * k for k in range(7)], west=0.0)
    plans = [PlannedLine(p.name, *_to_crs(p.start_x, p.start_y), *_to_crs(p.end_x, p.end_y),
                         p.n_traces) for p in local_plans]
    folder = _write(tmp_path_factory.mktemp("local"), Ground(velocity=0.1, targets=targets),
                    plans)
    rows = ["file,start_x,start_y,end_x,end_y"] + [
        f"{p.name}.sgy,{p.start_x:g},{p.start_y:g},{p.end_x:g},{p.end_y:g}" for p in local_plans]
    (folder / "local.csv").write_text("\n".join(rows) + "\n")
    pegs = [("A", 0, 0), ("B", 4, 0), ("C", 4, 3), ("D", 0, 3)]
    (folder / "pegs.csv").write_text("name,local_x,local_y,x,y\n" + "".join(
        f"{n},{lx},{ly},{_to_crs(lx, ly)[0]:.4f},{_to_crs(lx, ly)[1]:.4f}\n"
        for n, lx, ly in pegs))
    return folder, targets


@pytest.mark.parametrize("fit", ["similarity", "affine"])
def test_local_grid_tied_by_control_points(local_grid, tmp_path, fit):
    folder, targets = local_grid
    code, _ = _run([folder / "local.csv", *COMMON, "--control-points", folder / "pegs.csv",
                    "--control-fit", fit, "--out", tmp_path / "o"])
    assert code == 0
    _check_targets(tmp_path / "o", targets)
    fits = json.loads((tmp_path / "o" / "record.json").read_text())["settings"]["control_fits"]
    assert fits[0]["lines_mapped"] == 7 and fits[0]["rms_m"] < 1e-4  # pegs rounded to 0.1 mm
    assert fit in fits[0]["fit"]


@pytest.mark.parametrize("pegs, fit, message", [
    ("name,local_x,local_y,x,y\nA,0,0,1,1\n", "similarity",
     "a similarity fit needs at least 2 control points, got 1"),
    ("name,local_x,local_y,x,y\nA,0,0,1,1\nB,1,1,2,2\nC,2,2,3,3\n", "affine",
     "lie on one straight line"),
    ("name,local_x,local_y,x,y\nA,0,0,0,0\nB,4,0,4,0\nC,4,3,4.5,3\nD,0,3,0,3\n", "similarity",
     "misses its surveyed position"),
])
def test_bad_control_points_one_line_exit_2(local_grid, tmp_path, capsys, pegs, fit, message):
    folder, _ = local_grid
    (tmp_path / "pegs.csv").write_text(pegs)
    code, err = _run([folder / "local.csv", *COMMON, "--control-points", tmp_path / "pegs.csv",
                      "--control-fit", fit, "--out", tmp_path / "o"], capsys)
    assert code == 2 and err.count("\n") == 1 and message in err, err
    assert "pegs.csv" in err and not (tmp_path / "o").exists()


# --- multi-channel swaths --------------------------------------------------------------------

ACROSS = {"1": -0.5, "2": 0.0, "3": 0.5}  # m, right of travel


def _swath(ground, reference: PlannedLine, *, numbered=True) -> xr.DataArray:
    """One file holding three channels scan by scan, positioned at the reference point."""
    ux = math.copysign(1.0, reference.end_x - reference.start_x)  # west-east lines
    channels = []
    for name, across in ACROSS.items():
        dy = -across * ux  # right of travel east is south
        plan = dataclasses.replace(reference, name=f"{reference.name}c{name}",
                                   start_y=reference.start_y + dy, end_y=reference.end_y + dy)
        channels.append(simulate_line(ground, RADAR, plan))
    n = reference.n_traces
    data = np.stack([c.values for c in channels], axis=1).reshape(3 * n, -1)
    x, y = reference.positions()
    coords = {"twt": channels[0]["twt"], "x": ("trace", np.repeat(x, 3)),
              "y": ("trace", np.repeat(y, 3))}
    if numbered:
        coords["channel"] = ("trace", np.tile(np.arange(1, 4), n))
    return xr.DataArray(data, dims=("trace", "twt"), coords=coords, name="amplitude",
                        attrs={"sample_interval_ns": 0.1, "line": reference.name})


@pytest.fixture(scope="module")
def swaths(tmp_path_factory):
    # on channel lines (0.25, 0.75, ... m north): across lines nothing is finer than a line
    targets = _targets((W + 1.05, S + 1.25, 0.55), (W + 2.95, S + 2.75, 0.85),
                       (W + 2.05, S + 1.75, 0.35))
    ground = Ground(velocity=0.1, targets=targets)
    refs = _east_lines([S + 0.75 + 1.5 * k for k in range(3)])
    folder = tmp_path_factory.mktemp("swath")
    for ref in refs:
        write_segy_line(_swath(ground, ref), folder / f"{ref.name}.sgy")
    write_segy_line(_swath(ground, refs[0], numbered=False), folder / "plain.sgy")
    (folder / "array.csv").write_text("channel,across,along\n" + "".join(
        f"{k},{v},0\n" for k, v in ACROSS.items()))
    rows = ["file,start_x,start_y,end_x,end_y,channels"] + [
        f"{r.name}.sgy,{r.start_x},{r.start_y},{r.end_x},{r.end_y},array.csv" for r in refs]
    (folder / "lines.csv").write_text("\n".join(rows) + "\n")
    return folder, targets, refs


@pytest.mark.parametrize("positions", ["table", "headers"])
def test_channel_table_expands_swaths(swaths, tmp_path, positions):
    folder, targets, _ = swaths
    code, _ = _run([folder / "lines.csv", *COMMON, "--positions", positions,
                    "--out", tmp_path / "o"])
    assert code == 0
    _check_targets(tmp_path / "o", targets)
    record = json.loads((tmp_path / "o" / "record.json").read_text())
    assert record["survey"]["lines"] == 9 and record["survey"]["traces"] == 9 * 81
    # every input once, with its checksum: the table, the channel table, the three swaths
    names = [p["file"].rsplit("/", 1)[-1] for p in record["inputs"]]
    assert sorted(names) == ["E000.sgy", "E001.sgy", "E002.sgy", "array.csv", "lines.csv"]
    assert all(len(p["sha256"]) == 64 for p in record["inputs"])


@pytest.mark.parametrize("table, file, message", [
    ("channel,across,along\n1,-0.5,0\n2,0,0\n3,0.5,0\n4,1.0,0\n", "E000.sgy",
     "the table lists 4 channel(s), the swath has 3 (1, 2, 3); table channel(s) 4 are not in "
     "the swath"),
    ("channel,across,along\na,-0.5,0\nb,0.5,0\n", "plain.sgy",
     "243 traces do not divide into the 2 channels"),
])
def test_channel_table_that_disagrees_is_refused(swaths, tmp_path, capsys, table, file,
                                                  message):
    folder, _, refs = swaths
    (tmp_path / "array.csv").write_text(table)
    r = refs[0]
    (tmp_path / "t.csv").write_text("file,start_x,start_y,end_x,end_y,channels\n"
                                    f"{folder / file},{r.start_x},{r.start_y},{r.end_x},"
                                    f"{r.end_y},array.csv\n")
    code, err = _run([tmp_path / "t.csv", *COMMON, "--out", tmp_path / "o"], capsys)
    assert code == 2 and err.count("\n") == 1 and message in err, err
    assert not (tmp_path / "o").exists()


# --- several blocks --------------------------------------------------------------------------


def test_blocks_in_crs_and_local_grid_make_one_cube(local_grid, tmp_path):
    # block "rotated" is the local-grid survey tied by pegs; block "west" lies beside it in the
    # CRS, overlapping it. One grid covers both; every target of both is placed.
    folder, rotated_targets = local_grid
    west_targets = _targets((W - 2.95, S + 1.05, 0.45))
    plans = _east_lines([S + 0.5 * k for k in range(7)], west=W - 4.0, prefix="W")
    _write(folder / "west", Ground(velocity=0.1, targets=west_targets), plans)
    (folder / "west" / "west.csv").write_text("file,start_x,start_y,end_x,end_y\n" + "".join(
        f"{p.name}.sgy,{p.start_x},{p.start_y},{p.end_x},{p.end_y}\n" for p in plans))
    survey = folder / "survey.toml"
    survey.write_text(f'crs = "{CRS}"\nsample_interval = 0.1\ntime_zero = 3.0\n'
                      'velocity = 0.1\ncell = 0.1\ndepths = "0:1.6:0.1"\n'
                      '[[block]]\nname = "west"\nlines = "west/west.csv"\n'
                      '[[block]]\nname = "rotated"\nlines = "local.csv"\n'
                      'control_points = "pegs.csv"\n')
    code, _ = _run([survey, "-q", "--formats", "nc", "--out", tmp_path / "o"])
    assert code == 0
    _check_targets(tmp_path / "o", west_targets + rotated_targets)
    cube = slicer.read_cube_netcdf(tmp_path / "o" / "cube.nc")
    assert float(cube["x"].min()) < W - 3.9 and float(cube["x"].max()) > _to_crs(4, 0)[0] - 0.2
    record = json.loads((tmp_path / "o" / "record.json").read_text())
    assert record["survey"]["lines"] == 14
    assert [f["block"] for f in record["settings"]["control_fits"]] == ["rotated"]


def test_lines_may_list_several_tables(small_survey, tmp_path):
    table = small_survey.line_table.read_text().splitlines()
    (tmp_path / "a.csv").write_text("\n".join(table[:4]) + "\n")
    (tmp_path / "b.csv").write_text("\n".join([table[0], *table[4:]]) + "\n")
    for name in ("a.csv", "b.csv"):  # point the tables at the survey's files
        text = (tmp_path / name).read_text().splitlines()
        (tmp_path / name).write_text("\n".join(
            [text[0], *[f"{small_survey.folder / r.split(',')[0]},{r.split(',', 1)[1]}"
                        for r in text[1:]]]) + "\n")
    (tmp_path / "s.toml").write_text('lines = ["a.csv", "b.csv"]\n')
    settings = slicer.load_settings(tmp_path / "s.toml")
    assert [e.file.name for e in settings.lines] == [r.split(",")[0] for r in table[1:]]


def test_overlapping_blocks_are_combined_not_overwritten():
    # two blocks of traces over one strip, one reading 1.0 and the other 3.0: where both are
    # near, the grid holds a weighted mean strictly between them, where one is alone its value
    x = np.tile(np.arange(0.0, 4.01, 0.05), 4)
    y = np.repeat([0.0, 0.5, 1.0, 1.5], x.size // 4)
    xs, ys = np.concatenate([x, x + 1.0]), np.concatenate([y + 0.25, y + 0.25])
    values = np.concatenate([np.full(x.size, 1.0), np.full(x.size, 3.0)])[:, None]
    lines = np.concatenate([np.repeat(np.arange(4), x.size // 4),
                            np.repeat(np.arange(4, 8), x.size // 4)])
    table = xr.DataArray(values.astype(np.float32), dims=("trace", "slice"),
                         coords={"x": ("trace", xs), "y": ("trace", ys), "line": ("trace", lines),
                                 "top": ("slice", [0.0], {"axis": "depth", "units": "m"}),
                                 "bottom": ("slice", [0.1], {"axis": "depth", "units": "m"})})
    cube, _ = slicer.grid_slices(table, cell=0.1, radius=0.3, progress=False)
    plane = cube.isel(depth=0)
    assert float(plane.sel(x=0.55, y=1.0, method="nearest")) == pytest.approx(1.0, abs=1e-5)
    assert float(plane.sel(x=4.55, y=1.0, method="nearest")) == pytest.approx(3.0, abs=1e-5)
    both = float(plane.sel(x=2.55, y=1.0, method="nearest"))
    assert 1.2 < both < 2.8


def test_trace_spacing_resamples_every_line(small_survey):
    # 81 traces over 4 m (0.05 m apart) become 41 traces 0.1 m apart, first and last kept
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    trace_spacing=0.1)
    line = slicer.load_line(settings.lines[0], settings)
    assert line.sizes["trace"] == 41
    np.testing.assert_allclose(np.diff(line["distance"].values), 0.1, atol=1e-9)
    with pytest.raises(slicer.SettingsError,
                       match="--trace-spacing: -1 m is outside 0.001 <= value"):
        slicer.load_settings(small_survey.line_table, trace_spacing=-1)
