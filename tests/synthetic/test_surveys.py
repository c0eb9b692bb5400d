"""Tests of slicer.synthetic.surveys: the synthetic survey generator."""

from __future__ import annotations

import csv
import json
import math
import struct

import numpy as np
import pyproj
import pytest
import segyio
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.signal import hilbert

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import OutputError, SettingsError, SlicerWarning
from slicer.synthetic import (
    Ground,
    Layer,
    LineTarget,
    PlannedLine,
    PlateTarget,
    PointTarget,
    Radar,
    demo_survey,
    grid_lines,
    simulate_line,
    write_survey,
)

#: A radar with nothing but the reflections, so peaks can be located exactly.
CLEAN = Radar(direct_amplitude=0.0, ringing_amplitude=0.0, wow_amplitude=0.0, noise=0.0)


def _peak_time(trace: np.ndarray, twt: np.ndarray, after_ns: float = 0.0) -> float:
    envelope = np.abs(hilbert(trace))
    envelope[twt < after_ns] = 0.0
    return float(twt[np.argmax(envelope)])


# --- one line ----------------------------------------------------------------------------------

def test_line_data_model():
    line = PlannedLine("A1", 100.0, 200.0, 110.0, 200.0, 201)
    da = simulate_line(Ground(targets=(PointTarget(105.0, 200.0, 1.0),)), Radar(), line)
    assert da.name == "amplitude" and da.dims == ("trace", "twt") and da.dtype == np.float32
    assert da.shape == (201, 512)
    assert da["twt"].dtype == np.float64 and da["twt"][0] == 0.0
    np.testing.assert_allclose(np.diff(da["twt"]), 0.1)
    for name, unit in (("twt", "ns"), ("x", "m"), ("y", "m"), ("distance", "m")):
        assert da[name].attrs["units"] == unit
    assert da["x"].dtype == np.float64 and da["x"].dims == ("trace",)
    assert da["distance"][0] == 0.0 and da["distance"][-1] == pytest.approx(10.0)
    assert da.attrs["line"] == "A1" and da.attrs["sample_interval_ns"] == 0.1
    assert da.attrs["time_zero_ns"] == 0.0 and da.attrs["units"] == "1"
    assert isinstance(da.attrs["history"], str) and da.attrs["history"]


@pytest.mark.parametrize("wavelet", ["ricker", "gaussian-cosine"])
def test_reflection_peaks_at_travel_time_and_gives_back_depth(wavelet):
    depth, velocity = 1.25, 0.1
    radar = Radar(wavelet=wavelet, direct_amplitude=0.0, ringing_amplitude=0.0,
                  wow_amplitude=0.0, noise=0.0)
    line = PlannedLine("P", 0.0, 0.0, 4.0, 0.0, 81)  # 0.05 m traces, apex on trace 40
    da = simulate_line(Ground(velocity=velocity, targets=(PointTarget(2.0, 0.0, depth),)),
                       radar, line)
    twt = da["twt"].values
    t_apex = _peak_time(da.values[40], twt)
    # Yilmaz (2001), Seismic Data Analysis, ch. 4: apex at 2 z0 / v after time zero
    assert abs(t_apex - (radar.time_zero_ns + 2 * depth / velocity)) <= radar.sample_interval_ns
    # ASTM D6432-19, section 5: depth from time d = v t / 2, within half a sample's depth
    assert velocity * (t_apex - radar.time_zero_ns) / 2 == pytest.approx(
        depth, abs=velocity * radar.sample_interval_ns / 2)
    # Yilmaz (2001) worked value: 1 m off the apex, z0 = 1.25 m -> (2/v) sqrt(z0^2 + 1)
    expected = radar.time_zero_ns + 2 / velocity * math.hypot(depth, 1.0)
    assert abs(_peak_time(da.values[20], twt) - expected) <= radar.sample_interval_ns


def test_layer_and_plate_times():
    ground = Ground(targets=(PlateTarget(1.0, -1.0, 2.0, 1.0, 0.6),), layers=(Layer(1.8, 0.5),))
    da = simulate_line(ground, CLEAN, PlannedLine("Q", 0.0, 0.0, 3.0, 0.0, 61))
    twt = da["twt"].values
    # ASTM D6432-19, section 5: a flat reflector at d arrives at 2 d / v after time zero
    assert abs(_peak_time(da.values[30], twt) - (3.0 + 12.0)) <= 0.1  # the plate, 0.6 m
    assert abs(_peak_time(da.values[0], twt, after_ns=30.0) - (3.0 + 36.0)) <= 0.1  # layer


def test_direct_wave_at_time_zero_in_raw_record():
    # DEVELOPERS.md glossary: time zero is the direct wave's main peak
    radar = Radar(time_zero_ns=4.5, noise=0.0)
    da = simulate_line(Ground(), radar, PlannedLine("D", 0.0, 0.0, 1.0, 0.0, 11))
    np.testing.assert_allclose(da["twt"].values[da.argmax("twt").values], 4.5)


def test_deterministic_with_seed():
    ground = Ground(targets=(PointTarget(1.0, 0.0, 0.5),))
    line = PlannedLine("S", 0.0, 0.0, 2.0, 0.0, 41)
    a = simulate_line(ground, Radar(seed=7, noise=0.01), line)
    b = simulate_line(ground, Radar(seed=7, noise=0.01), line)
    c = simulate_line(ground, Radar(seed=8, noise=0.01), line)
    other = simulate_line(ground, Radar(seed=7, noise=0.01),
                          PlannedLine("T", 0.0, 0.0, 2.0, 0.0, 41))
    xr.testing.assert_identical(a, b)
    assert np.any(a.values != c.values)
    assert np.any(a.values != other.values)  # each line draws its own wow and noise


@settings(max_examples=25, deadline=None)
@given(x=st.floats(-2.0, 2.0), depth=st.floats(0.01, 3.0), radius=st.floats(0.0, 0.5),
       attenuation=st.floats(0.0, 50.0))
def test_simulated_amplitude_never_nan(x, depth, radius, attenuation):
    ground = Ground(attenuation_db_per_m=attenuation,
                    targets=(PointTarget(x, 0.0, depth, radius=radius),
                             LineTarget(x, -1.0, x, 1.0, depth),
                             PlateTarget(x, 0.0, x + 0.1, 0.1, depth)),
                    layers=(Layer(depth, -0.2),))
    da = simulate_line(ground, Radar(samples=64), PlannedLine("H", -1.0, 0.0, 1.0, 0.0, 21))
    assert np.all(np.isfinite(da.values))


# --- line plans --------------------------------------------------------------------------------

@pytest.mark.parametrize("direction", ["x", "y"])
def test_zigzag_grid(direction):
    lines = grid_lines(west=500.0, south=1000.0, length=6.0, width=2.0, line_spacing=0.5,
                       trace_spacing=0.05, direction=direction)
    assert [line.name for line in lines] == ["L000", "L001", "L002", "L003", "L004"]
    along = 1 if direction == "y" else 0
    for k, line in enumerate(lines):
        x, y = line.positions()
        assert line.n_traces == 121
        # first and last traces exactly on the planned ends
        assert (x[0], y[0], x[-1], y[-1]) == (line.start_x, line.start_y, line.end_x,
                                              line.end_y)
        steps = np.hypot(np.diff(x), np.diff(y))
        np.testing.assert_allclose(steps, 0.05, rtol=1e-9)
        coord = (x, y)[along]
        # every other line runs backwards
        assert (np.all(np.diff(coord) < 0) if k % 2 else np.all(np.diff(coord) > 0))
        across = (x, y)[1 - along]
        np.testing.assert_allclose(across, (500.0, 1000.0)[1 - along] + 0.5 * k)
    assert {lines[0].start_x, lines[0].end_x} == ({500.0} if direction == "y" else {500.0, 506.0})


def test_grid_without_zigzag_and_uneven_length():
    with pytest.warns(SlicerWarning, match="trace spacing"):
        lines = grid_lines(west=0.0, south=0.0, length=1.03, width=1.0, line_spacing=1.0,
                           trace_spacing=0.1, direction="x", zigzag=False)
    assert [(line.start_x, line.end_x) for line in lines] == [(0.0, 1.03), (0.0, 1.03)]
    with pytest.raises(SettingsError, match="direction"):
        grid_lines(west=0.0, south=0.0, length=1.0, width=1.0, line_spacing=1.0,
                   trace_spacing=0.1, direction="z")
    with pytest.raises(SettingsError, match="line_spacing"):
        grid_lines(west=0.0, south=0.0, length=1.0, width=1.0, line_spacing=0.0,
                   trace_spacing=0.1)


# --- bad input ---------------------------------------------------------------------------------

@pytest.mark.parametrize("make, where", [
    (lambda: PointTarget(0.0, 0.0, 0.0), "PointTarget.depth"),
    (lambda: PointTarget(0.0, float("nan"), 1.0), "PointTarget.y"),
    (lambda: PointTarget(0.0, 0.0, 1.0, radius=-0.1), "PointTarget.radius"),
    (lambda: LineTarget(0.0, 0.0, 1.0, 1.0, -1.0), "LineTarget.depth"),
    (lambda: PlateTarget(1.0, 0.0, 0.0, 1.0, 1.0), "PlateTarget"),
    (lambda: Layer(1.0, float("inf")), "Layer.amplitude"),
    (lambda: Ground(velocity=0.31), "Ground.velocity"),  # faster than light in vacuum
    (lambda: Ground(targets=(Layer(1.0, 1.0),)), "Ground.targets[0]"),
    (lambda: Radar(wavelet="square"), "Radar.wavelet"),
    (lambda: Radar(samples=1), "Radar.samples"),
    (lambda: Radar(samples=10.5), "Radar.samples"),
    (lambda: Radar(time_zero_ns=60.0), "Radar.time_zero_ns"),
    (lambda: Radar(noise=-1.0), "Radar.noise"),
    (lambda: PlannedLine("a/b", 0.0, 0.0, 1.0, 0.0, 10), "PlannedLine"),
    (lambda: PlannedLine("a", 0.0, 0.0, 0.0, 0.0, 10), "PlannedLine"),
    (lambda: PlannedLine("a", 0.0, 0.0, 1.0, 0.0, 1), "n_traces"),
])
def test_bad_settings_name_the_field(make, where):
    with pytest.raises(SettingsError) as info:
        make()
    assert where in str(info.value)


def test_velocity_limit_is_the_speed_of_light():
    # Davis & Annan (1989): v = c / sqrt(er) with er >= 1, so v <= c
    assert Ground(velocity=C_M_PER_NS).velocity == C_M_PER_NS


def test_coarse_sampling_warns():
    # Annan (2009), in Jol (ed.) 2009, ch. 1 [memory]: dt <= 1 / (6 f) = 0.417 ns at 400 MHz
    with pytest.warns(SlicerWarning, match="coarse"):
        Radar(sample_interval_ns=0.5, samples=128)


# --- survey files ------------------------------------------------------------------------------

def _small_survey():
    ground = Ground(targets=(PointTarget(512001.0, 4650001.0, 0.5),
                             LineTarget(512000.0, 4650000.5, 512002.0, 4650000.5, 0.8)),
                    layers=(Layer(1.0, 0.2),))
    radar = Radar(samples=256, seed=3)
    lines = grid_lines(west=512000.0, south=4650000.0, length=2.0, width=1.0, line_spacing=0.5,
                       trace_spacing=0.05)
    return ground, radar, lines


@pytest.mark.parametrize("fmt", ["segy", "netcdf"])
def test_write_survey_files_read_back(tmp_path, fmt):
    ground, radar, lines = _small_survey()
    survey = write_survey(tmp_path / "s", ground, radar, lines, format=fmt, progress=False)
    assert survey.folder == tmp_path / "s" and survey.lines == tuple(lines)
    text = survey.line_table.read_text(encoding="utf-8")
    assert text.splitlines()[0] == "file,start_x,start_y,end_x,end_y"
    rows = list(csv.DictReader(text.splitlines()))
    suffix = ".sgy" if fmt == "segy" else ".nc"
    assert [r["file"] for r in rows] == [f"L00{k}{suffix}" for k in range(3)]
    assert sorted(r["file"] for r in rows) == [r["file"] for r in rows]
    for row, line, path in zip(rows, lines, survey.files, strict=True):
        assert path == survey.folder / row["file"] and path.is_file()
        assert [float(row[k]) for k in ("start_x", "start_y", "end_x", "end_y")] == \
            pytest.approx([line.start_x, line.start_y, line.end_x, line.end_y], abs=1e-6)
        expected = simulate_line(ground, radar, line)
        x, y = line.positions()
        if fmt == "segy":
            # read with plain segyio; SEG-Y rev 2.0 (Hagelund & Levin 2017): bytes 71-72
            # coordinate scalar (negative divides), 73-80 source X/Y, 3273-3280 extended
            # sample interval (IEEE double, microseconds)
            with segyio.open(path, ignore_geometry=True) as f:
                data = f.trace.raw[:]
                scalar = f.attributes(segyio.TraceField.SourceGroupScalar)[:]
                sx = f.attributes(segyio.TraceField.SourceX)[:] / -scalar.astype(float)
                sy = f.attributes(segyio.TraceField.SourceY)[:] / -scalar.astype(float)
                assert f.bin[segyio.BinField.Format] == 5  # IEEE float
            with open(path, "rb") as fh:
                fh.seek(3272)
                interval_us = struct.unpack(">d", fh.read(8))[0]
            assert interval_us == pytest.approx(radar.sample_interval_ns * 1e-3, rel=1e-12)
            assert np.all(scalar == -100)
            np.testing.assert_allclose(sx, x, atol=0.005)
            np.testing.assert_allclose(sy, y, atol=0.005)
        else:
            with xr.open_dataset(path, engine="h5netcdf") as ds:
                data = ds["amplitude"].values
                np.testing.assert_array_equal(ds["x"].values, x)
                np.testing.assert_array_equal(ds["y"].values, y)
                np.testing.assert_allclose(ds["twt"].values, expected["twt"].values)
        np.testing.assert_array_equal(data, expected.values)

    truth = json.loads(survey.truth_file.read_text(encoding="utf-8"))
    assert truth["crs"] == "EPSG:32633" and truth["velocity_m_per_ns"] == 0.1
    assert truth["time_zero_ns"] == 3.0 and truth["sample_interval_ns"] == 0.1
    assert [t["kind"] for t in truth["targets"]] == ["point", "line"]
    assert truth["targets"][0]["x"] == 512001.0 and truth["targets"][1]["depth"] == 0.8
    assert truth["layers"] == [{"kind": "layer", "depth": 1.0, "amplitude": 0.2}]


def test_write_survey_refuses_bad_input_before_writing(tmp_path):
    ground, radar, lines = _small_survey()
    with pytest.raises(SettingsError, match="format"):
        write_survey(tmp_path / "a", ground, radar, lines, format="zip", progress=False)
    with pytest.raises(SettingsError, match="crs"):
        write_survey(tmp_path / "a", ground, radar, lines, crs="EPSG:999999", progress=False)
    with pytest.raises(SettingsError, match="repeated line names: L000"):
        write_survey(tmp_path / "a", ground, radar, [lines[0], lines[0]], progress=False)
    assert not (tmp_path / "a").exists()
    (tmp_path / "b").mkdir()
    (tmp_path / "b" / "keep.txt").write_text("mine")
    with pytest.raises(OutputError):
        write_survey(tmp_path / "b", ground, radar, lines, progress=False)
    assert [p.name for p in (tmp_path / "b").iterdir()] == ["keep.txt"]


def test_progress_bar_can_be_silenced(tmp_path, capsys):
    ground, radar, lines = _small_survey()
    write_survey(tmp_path / "q", ground, radar, lines[:1], format="netcdf", progress=False)
    assert capsys.readouterr().err == ""


# --- the demo scenario -------------------------------------------------------------------------

def _plan_distance(a, b) -> float:
    """Plan distance between two targets, from points sampled every 1 cm along / over them."""
    def points(t):
        if isinstance(t, PointTarget):
            return np.array([[t.x, t.y]])
        if isinstance(t, LineTarget):
            s = np.linspace(0.0, 1.0, max(2, int(math.hypot(t.x1 - t.x0, t.y1 - t.y0) / 0.01)))
            return np.column_stack([t.x0 + s * (t.x1 - t.x0), t.y0 + s * (t.y1 - t.y0)])
        gx, gy = np.meshgrid(np.arange(t.xmin, t.xmax + 0.005, 0.01),
                             np.arange(t.ymin, t.ymax + 0.005, 0.01))
        return np.column_stack([gx.ravel(), gy.ravel()])
    pa, pb = points(a), points(b)
    return float(np.min(np.hypot(pa[:, None, 0] - pb[None, :, 0], pa[:, None, 1] - pb[None, :, 1])))


def test_demo_contract():
    ground, radar, lines, crs = demo_survey()
    assert pyproj.CRS.from_user_input(crs).to_epsg() == 32633
    assert radar.sample_interval_ns == 0.1 and radar.time_zero_ns == 3.0
    assert radar.samples == 512 and radar.frequency_mhz == 400.0 and ground.velocity == 0.1
    # ASTM D6432-19, section 5: d = v t / 2; (51.2 - 3.0) ns at 0.1 m/ns -> 2.41 m
    assert ground.velocity * (radar.record_ns - radar.time_zero_ns) / 2 == pytest.approx(2.41)
    # Annan (2009), in Jol (ed.) 2009 [memory]: dt <= 1 / (6 f), trace spacing <= lambda / 4
    assert radar.sample_interval_ns <= 1 / (6 * radar.frequency_ghz)

    starts = np.array([[ln.start_x, ln.start_y, ln.end_x, ln.end_y] for ln in lines])
    xs = np.concatenate([ln.positions()[0] for ln in lines])
    ys = np.concatenate([ln.positions()[1] for ln in lines])
    west, east, south, north = xs.min(), xs.max(), ys.min(), ys.max()
    assert (west, south) == (512000.0, 4650000.0)  # grid corner on whole metres
    assert east - west == pytest.approx(20.0) and north - south == pytest.approx(14.0)
    across = np.unique(np.round(starts[:, 1], 6))
    np.testing.assert_allclose(np.diff(across), 0.5)  # line spacing
    for line in lines:
        x, y = line.positions()
        spacing = np.hypot(np.diff(x), np.diff(y))
        np.testing.assert_allclose(spacing, 0.05, rtol=1e-6)
        assert spacing.max() <= ground.velocity / (4 * radar.frequency_ghz)  # lambda / 4
    assert all(starts[k, 0] > starts[k, 2] for k in range(1, len(lines), 2))  # zigzag

    # targets: 0.3-2.2 m deep, in the middle of 0.1 m depth slices, inside the grid
    depths = [t.depth for t in ground.targets] + [layer.depth for layer in ground.layers]
    assert min(depths) >= 0.3 and max(depths) <= 2.2
    for d in depths:
        assert (d * 10) % 1 == pytest.approx(0.5, abs=1e-6)
    for t in ground.targets:
        for name in ("x", "x0", "x1", "xmin", "xmax"):
            if hasattr(t, name):
                assert west <= getattr(t, name) <= east
        for name in ("y", "y0", "y1", "ymin", "ymax"):
            if hasattr(t, name):
                assert south <= getattr(t, name) <= north
    # at least three point targets, each at a 0.1 m cell centre and >= 2 m from all others
    isolated = [t for t in ground.targets if isinstance(t, PointTarget)
                and all(_plan_distance(t, o) >= 2.0 for o in ground.targets if o is not t)]
    assert len(isolated) >= 3
    for t in isolated:
        assert ((t.x - west) * 10) % 1 == pytest.approx(0.5, abs=1e-6)
        assert ((north - t.y) * 10) % 1 == pytest.approx(0.5, abs=1e-6)
    kinds = {type(t) for t in ground.targets}
    assert kinds == {PointTarget, LineTarget, PlateTarget} and ground.layers
