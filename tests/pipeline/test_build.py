"""Tests of slicer.pipeline.build, end to end: the documented command line on the demo survey
against its synthetic truth."""

import json
import shutil
from decimal import Decimal

import numpy as np
import pytest
import rasterio

import slicer
from slicer.cli import main
from slicer.pipeline.line_tasks import default_windows, nice_number

CONTRACT = ["build", "lines.csv", "--crs", "EPSG:32633", "--sample-interval", "0.1",
            "--time-zero", "3.0", "--velocity", "0.1", "--cell", "0.1", "--depths",
            "0:2.4:0.1", "--out", "out"]


@pytest.fixture(scope="module")
def contract_build(demo_files, tmp_path_factory):
    work = tmp_path_factory.mktemp("contract")
    shutil.copytree(demo_files.folder, work, dirs_exist_ok=True)
    cwd = __import__("os").getcwd()
    __import__("os").chdir(work)
    try:
        code = main([*CONTRACT, "--formats", "tif,zarr,nc", "-q"])  # the cube files too
    finally:
        __import__("os").chdir(cwd)
    assert code == 0
    return work


def isolated_points(truth):
    return [t for t in truth["targets"] if t["kind"] == "point" and t["depth"] > 0.7]


def test_contract_line_places_targets_where_the_truth_put_them(contract_build):
    truth = json.loads((contract_build / "truth.json").read_text())
    cube = slicer.read_cube_netcdf(contract_build / "out" / "cube.nc")
    assert cube.dims == ("depth", "y", "x") and cube.sizes["depth"] == 24
    cell = cube.attrs["cell_size"]
    # A quarter wavelength, lambda / 4 = v / (4 f) = 0.1 / 1.6 = 0.0625 m (common practice:
    # quarter-wavelength vertical resolution; Jol (ed.) 2009, Ground Penetrating Radar Theory
    # and Applications).
    quarter_wavelength = 0.1 / (4 * 0.4)
    points = isolated_points(truth)
    assert len(points) >= 3
    for t in points:
        near = cube.sel(x=slice(t["x"] - 1.0, t["x"] + 1.0), y=slice(t["y"] + 1.0, t["y"] - 1.0))
        depth_profile = near.max(["x", "y"])
        k = int(depth_profile.argmax("depth"))
        assert abs(float(cube["depth"][k]) - t["depth"]) <= quarter_wavelength, t
        plane = near.isel(depth=k)
        j, i = np.unravel_index(int(np.nanargmax(plane.values)), plane.shape)
        assert abs(float(plane["x"][i]) - t["x"]) <= cell + 1e-9, t
        assert abs(float(plane["y"][j]) - t["y"]) <= cell + 1e-9, t


def test_geotiffs_agree_with_cube_and_carry_depths(contract_build):
    out = contract_build / "out"
    cube = slicer.read_cube_netcdf(out / "cube.nc")
    files = sorted((out / "slices").glob("*.tif"))
    assert len(files) == 24 and [f.name for f in files] == sorted(f.name for f in files)
    with rasterio.open(files[7]) as src:
        tags = src.tags()
        assert float(tags["DEPTH_TOP"]) == pytest.approx(0.7)
        assert float(tags["DEPTH_BOTTOM"]) == pytest.approx(0.8)
        assert float(tags["VELOCITY_M_PER_NS"]) == pytest.approx(0.1)
        assert "time zero 3.0 ns" in tags["PROCESSING"]
        assert src.crs.to_epsg() == 32633
        data = src.read(1)
        np.testing.assert_array_equal(data, cube.isel(depth=7).values)
        # the centre of pixel (0, 0) is the cube's first x and y
        x0, y0 = src.xy(0, 0)
        assert x0 == pytest.approx(float(cube["x"][0])) and y0 == pytest.approx(
            float(cube["y"][0]))


def test_record_lists_every_input_and_setting(contract_build):
    record = json.loads((contract_build / "out" / "record.json").read_text())
    files = {p["file"].split("/")[-1] for p in record["inputs"]}
    assert "lines.csv" in files and len(files) == 30
    assert all(len(p["sha256"]) == 64 for p in record["inputs"])
    assert record["settings"]["velocity"] == 0.1 and record["settings"]["cell"] == 0.1
    assert record["command"][:3] == ["slicer", "build", "lines.csv"]
    # 24 slices, 12 to a page: two overview pages (slicer.outputs.figures.PER_PAGE)
    assert set(record["outputs"]) >= {"cube.nc", "overview-01.png", "overview-02.png"}
    assert (contract_build / "out" / "overview-02.png").stat().st_size > 10_000


def _numbers(value):
    if isinstance(value, dict):
        for v in value.values():
            yield from _numbers(v)
    elif isinstance(value, list):
        for v in value:
            yield from _numbers(v)
    elif isinstance(value, Decimal):
        yield value


def test_record_numbers_carry_no_binary_noise(contract_build):
    text = (contract_build / "out" / "record.json").read_text()
    # each number exactly as written (Python's decimal module), strict JSON (RFC 8259: no NaN)
    record = json.loads(text, parse_float=Decimal, parse_constant=pytest.fail)
    assert "0.30000000000000004" not in text and "0.9999999999999999" not in text
    numbers = list(_numbers(record))
    assert len(numbers) > 50  # slice bounds, grid, per-line time zero...
    for n in numbers:  # 12 significant digits at most (slicer.pipeline.record.SIGNIFICANT)
        assert n == 0 or len(n.normalize().as_tuple().digits) <= 12, n
    # the 24 slices of 0:2.4:0.1, as decimal arithmetic counts them
    assert record["slices"]["top"] == [Decimal(k) / 10 for k in range(24)]
    # paths relative to the record's folder; the libraries below each format
    assert record["settings"]["source"] == "../lines.csv"
    assert {"gdal", "proj", "hdf5", "zarr", "numcodecs", "rioxarray"} <= set(
        record["environment"])


def test_time_slices_without_velocity(small_survey, tmp_path):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1, time_zero=3.0,
                                    times="0:40:5", crs="EPSG:32633", out=tmp_path / "t")
    result = slicer.build(settings, progress=False)
    assert result.cube.dims == ("twt", "y", "x") and result.cube.sizes["twt"] == 8
    # the 1.25 m target at 0.1 m/ns lies at t = 2 d / v = 25 ns (ASTM D6432-19, section 5)
    profile = result.cube.sel(x=512002.95, y=4650001.55, method="nearest")
    assert float(result.cube["twt"][int(profile.argmax("twt"))]) == pytest.approx(27.5)
    with rasterio.open(result.files[0]) as src:
        assert float(src.tags()["TWT_TOP"]) == 0.0


def test_auto_time_zero_finds_the_synthetic_time_zero(small_survey):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    velocity=0.1, depths="0:2:0.1")
    result = slicer.build_cube(settings, progress=False)
    picked = [line["time_zero_ns"] for line in result.record["lines"]]
    assert np.allclose(picked, 3.0, atol=0.05)  # the synthetic direct wave peaks at 3.0 ns


def test_defaults_choose_cell_and_windows(small_survey):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1)
    result = slicer.build_cube(settings, progress=False)
    assert result.cube.attrs["cell_size"] == 0.1  # a quarter of 0.5 m spacing, made round
    assert result.record["slices"]["top"][0] == 0.0
    assert len(result.record["slices"]["top"]) == 24  # 2.41 m of record in 0.1 m steps


def test_nice_number_and_default_windows():
    assert [nice_number(v) for v in (0.125, 0.3, 7, 1)] == [0.1, 0.2, 5, 1]
    w = default_windows(48.1, 0.1)
    assert w.axis == "depth" and w.bottom[-1] <= 2.405 + 1e-9
    assert default_windows(48.1, None).axis == "twt"


def test_windows_partly_below_the_record_are_dropped_with_a_warning(small_survey):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, depths="2.0:3.0:0.1")
    with pytest.warns(slicer.SlicerWarning, match="below the end of the record"):
        result = slicer.build_cube(settings, progress=False)
    assert result.cube.sizes["depth"] == 4  # 2.0-2.4 m of the 2.41 m record


def test_streamed_build_equals_in_memory_cube(small_survey, tmp_path):
    import xarray as xr
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, depths="0:2.4:0.1", cell=0.05,
                                    out=tmp_path / "o", formats="nc,zarr")
    memory = slicer.build_cube(settings, progress=False).cube
    streamed = slicer.build(settings, progress=False)
    np.testing.assert_allclose(streamed.cube.values, memory.values, rtol=1e-6, equal_nan=True)
    zarr = xr.open_zarr(tmp_path / "o" / "cube.zarr", consolidated=False)["envelope"].values
    netcdf = slicer.read_cube_netcdf(tmp_path / "o" / "cube.nc").values
    np.testing.assert_array_equal(zarr, netcdf)  # the two cube stores agree exactly
    np.testing.assert_allclose(netcdf, memory.values, rtol=1e-6, equal_nan=True)


def test_default_build_writes_slices_only_and_returns_their_cube(small_survey, tmp_path):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, velocity_std=0.005,
                                    depths="0:2.4:0.1", cell=0.05, out=tmp_path / "o")
    assert settings.formats == "tif"
    result = slicer.build(settings, progress=False)
    out = tmp_path / "o"
    tifs = sorted((out / "slices").glob("*.tif"))
    assert len(tifs) == 24
    # the working Zarr store is gone: only the slices, the overview, the viewer, the
    # radargrams and the record
    pictures = sorted(p.relative_to(out).as_posix() for p in (out / "radargrams").glob("*"))
    assert len(pictures) == 6  # one per line
    on_disk = {p.relative_to(out).as_posix() for p in out.rglob("*")}
    pages = ["overview-01.png", "overview-02.png"]  # 24 slices, 12 to a page
    assert on_disk == {"slices", *pages, "record.json", "viewer.html", "radargrams",
                       *pictures, *(f"slices/{p.name}" for p in tifs)}
    assert not list(tmp_path.glob("o.slicer-*"))  # nor a build folder beside it
    record = json.loads((out / "record.json").read_text())
    assert record["settings"]["formats"] == "tif"
    assert sorted(record["outputs"]) == sorted(
        [*pages, "viewer.html", *pictures, *(f"slices/{p.name}" for p in tifs)])
    # The returned cube, read lazily from the committed files, is the in-memory build's,
    # with its windows, depth error and CRS; each slice as rasterio (GDAL) reads its file.
    cube = result.cube
    assert cube.chunks is not None
    memory = slicer.build_cube(settings, progress=False).cube
    np.testing.assert_allclose(cube.values, memory.values, rtol=1e-6, equal_nan=True)
    for name in ("depth", "depth_top", "depth_bottom", "depth_error", "x", "y"):
        np.testing.assert_array_equal(cube[name].values, memory[name].values)
    assert cube.rio.crs == memory.rio.crs and cube.attrs == memory.attrs
    with rasterio.open(tifs[5]) as src:
        np.testing.assert_array_equal(src.read(1), cube.isel(depth=5).values)
    assert int(np.isnan(cube.isel(depth=0).values).sum()) == record["grid"]["empty_cells"]


def test_layered_model_file_equal_layers_match_constant_velocity(small_survey, tmp_path):
    # Two layers of the same interval velocity are one medium: depth conversion through the
    # resampled depth axis must agree with the constant-velocity time windows.
    model = tmp_path / "model.toml"
    model.write_text('kind = "layered"\n[[layer]]\ntop_depth = 0.0\nvelocity = 0.1\n'
                     'velocity_std = 0.004\n[[layer]]\ntop_depth = 1.0\nvelocity = 0.1\n'
                     'velocity_std = 0.004\n')
    common = dict(sample_interval=0.1, time_zero=3.0, depths="0:2.4:0.1", cell=0.1)
    constant = slicer.build_cube(slicer.load_settings(small_survey.line_table, velocity=0.1,
                                                      **common), progress=False).cube
    layered = slicer.build_cube(slicer.load_settings(small_survey.line_table,
                                                     velocity_model=model, **common),
                                progress=False).cube
    both = np.isfinite(constant.values) & np.isfinite(layered.values)
    assert both.mean() > 0.9
    scale = np.nanmax(constant.values)
    assert np.nanmax(np.abs(layered.values - constant.values)) < 0.02 * scale
    # layer errors add in quadrature below 1 m: sigma_d = sqrt(sum (sigma_i dt_i / 2)^2)
    err = layered["depth_error"].values
    d = layered["depth"].values
    expected = np.where(d <= 1.0, d * 0.004 / 0.1,
                        np.hypot(1.0 * 0.004 / 0.1, (d - 1.0) * 0.004 / 0.1))
    np.testing.assert_allclose(err, expected, rtol=1e-6)


def test_depth_error_in_tags_and_cube(small_survey, tmp_path):
    # sigma_d = d sigma_v / v for one velocity (first-order error propagation of d = v t / 2)
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, velocity_std=0.005,
                                    depths="0:1:0.5", out=tmp_path / "o", formats="tif,nc")
    result = slicer.build(settings, progress=False)
    np.testing.assert_allclose(result.cube["depth_error"].values, [0.25 * 0.05, 0.75 * 0.05])
    with rasterio.open(sorted((tmp_path / "o" / "slices").glob("*.tif"))[1]) as src:
        assert float(src.tags()["DEPTH_ERROR_M"]) == pytest.approx(0.0375)
    nc = slicer.read_cube_netcdf(tmp_path / "o" / "cube.nc")
    np.testing.assert_allclose(nc["depth_error"].values, [0.0125, 0.0375])


@pytest.fixture(scope="module")
def crossed_survey(tmp_path_factory):
    """Two orthogonal line sets over three point targets, SEG-Y with header coordinates."""
    from slicer.synthetic import Ground, PointTarget, Radar, grid_lines, write_survey
    targets = (PointTarget(512001.05, 4650001.05, 0.55), PointTarget(512003.05, 4650002.55, 0.95),
               PointTarget(512001.55, 4650003.55, 1.25, amplitude=1.5))
    lines = (grid_lines(west=512000.0, south=4650000.0, length=4.0, width=4.0, line_spacing=1.0,
                        trace_spacing=0.05, direction="x", prefix="E")
             + grid_lines(west=512000.0, south=4650000.0, length=4.0, width=4.0,
                          line_spacing=1.0, trace_spacing=0.05, direction="y", prefix="N"))
    folder = tmp_path_factory.mktemp("crossed") / "survey"
    return write_survey(folder, Ground(velocity=0.1, targets=targets), Radar(seed=3), lines,
                        format="segy", crs="EPSG:32633", progress=False)


def test_orthogonal_sets_positioned_from_headers(crossed_survey, tmp_path, monkeypatch):
    # a line table with only file names: every position comes from the SEG-Y trace headers
    names = [p.name for p in sorted(crossed_survey.folder.glob("*.sgy"))]
    table = crossed_survey.folder / "files.csv"
    table.write_text("file\n" + "\n".join(names) + "\n")
    monkeypatch.chdir(crossed_survey.folder)
    code = main(["build", "files.csv", "--positions", "headers", "--crs", "EPSG:32633",
                 "--sample-interval", "0.1", "--time-zero", "3.0", "--velocity", "0.1",
                 "--cell", "0.1", "--depths", "0:2.4:0.1", "--out", str(tmp_path / "o"),
                 "--formats", "nc", "-q"])
    assert code == 0
    cube = slicer.read_cube_netcdf(tmp_path / "o" / "cube.nc")
    for t in json.loads(crossed_survey.truth_file.read_text())["targets"]:
        k = int(np.argmin(np.abs(cube["depth"].values - t["depth"])))
        plane = cube.isel(depth=k).sel(x=slice(t["x"] - 0.6, t["x"] + 0.6),
                                       y=slice(t["y"] + 0.6, t["y"] - 0.6))
        j, i = np.unravel_index(int(np.nanargmax(plane.values)), plane.shape)
        assert abs(float(plane["x"][i]) - t["x"]) <= 0.1 + 1e-9, t
        assert abs(float(plane["y"][j]) - t["y"]) <= 0.1 + 1e-9, t


def test_headers_without_coordinates_refused(small_survey, tmp_path, capsys):
    import segyio
    spec = segyio.spec()
    spec.format, spec.samples, spec.tracecount = 5, np.arange(512), 10
    path = tmp_path / "bare.sgy"
    with segyio.create(path, spec) as f:
        f.trace = [np.zeros(512, np.float32)] * 10
    (tmp_path / "t.csv").write_text("file\nbare.sgy\n")
    code = main(["build", str(tmp_path / "t.csv"), "--positions", "headers",
                 "--sample-interval", "0.1", "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err
    assert code == 2 and "bare.sgy: the file holds no trace coordinates" in err
    assert not (tmp_path / "o").exists()


def test_level_option_runs_and_is_recorded(small_survey):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, depths="0:2.4:0.1", level=True)
    result = slicer.build_cube(settings, progress=False)
    assert "line levelling" in result.record["processing"]
    assert np.isfinite(result.cube.values).any()


def _half_max_width(cube, t):
    """Width (m) along x, at half the peak, of a target's spot in the slice at its depth."""
    k = int(np.argmin(np.abs(cube["depth"].values - t.depth)))
    row = cube.isel(depth=k).sel(y=t.y, method="nearest").sel(x=slice(t.x - 1.5, t.x + 1.5))
    return float((row.values >= np.nanmax(row.values) / 2).sum() * cube.attrs["cell_size"])


def test_migration_sharpens_point_targets(small_survey):
    # Stolt (1978): a point diffractor's hyperbola collapses to a focus at its true place
    common = dict(sample_interval=0.1, time_zero=3.0, velocity=0.1, depths="0:2.4:0.1",
                  cell=0.05)
    plain = slicer.build_cube(slicer.load_settings(small_survey.line_table, migrate="off",
                                                   **common), progress=False).cube
    sharp = slicer.build_cube(slicer.load_settings(small_survey.line_table, migrate="stolt",
                                                   **common), progress=False)
    assert "stolt migration" in sharp.record["processing"]
    for t in small_survey.ground.targets:
        before, after = _half_max_width(plain, t), _half_max_width(sharp.cube, t)
        assert after < before and after <= 0.25, (t, before, after)


def test_migration_needs_a_velocity(small_survey):
    with pytest.raises(slicer.SettingsError, match="--migrate"):
        slicer.load_settings(small_survey.line_table, times="0:40:5", migrate="stolt")


def test_a_module_imported_aside_that_is_not_installed_stops_nothing(monkeypatch):
    # the build imports dask.distributed on a thread while the workers read lines; where it
    # is not installed, that thread must end quietly (an exception there would reach
    # threading.excepthook)
    import threading

    from slicer.pipeline.build import _import_aside
    raised = []
    monkeypatch.setattr(threading, "excepthook", lambda args: raised.append(args.exc_type))
    _import_aside("slicer_no_such_module")
    for thread in threading.enumerate():
        if thread.name == "slicer-import-slicer_no_such_module":
            thread.join(10)
    assert raised == []


@pytest.mark.parametrize("scheduler", ["threads", "processes"])
def test_a_line_task_warning_reaches_the_record_from_worker_processes(small_survey, tmp_path,
                                                                      scheduler):
    # A line with NaN samples is read in a line task: on worker processes its warning was
    # raised in the worker and missing from the record and the caller's warnings.
    from slicer.core.errors import SlicerWarning
    from slicer.io.linefile import write_line_netcdf
    from slicer.io.reading import read_line
    entries = small_survey.line_table.read_text().splitlines()
    rows = [entries[0]]
    for k, text in enumerate(entries[1:]):
        name = text.split(",")[0]
        line = read_line(small_survey.line_table.parent / name, sample_interval_ns=0.1)
        if k == 2:
            line.values[4, 200:207] = np.nan
        write_line_netcdf(line, tmp_path / f"L{k}.nc")
        rows.append(text.replace(name, f"L{k}.nc", 1))
    (tmp_path / "lines.csv").write_text("\n".join(rows) + "\n")
    settings = slicer.load_settings(tmp_path / "lines.csv", sample_interval=0.1, time_zero=3.0,
                                    velocity=0.1, depths="0:2.4:0.1", cell=0.1,
                                    out=tmp_path / "out", scheduler=scheduler)
    with pytest.warns(SlicerWarning, match=r"L2\.nc: 7 NaN or infinite sample\(s\) set to 0"):
        result = slicer.build(settings, progress=False)
    assert result.record["engine"].startswith(scheduler)
    assert [w for w in result.record["warnings"] if "NaN" in w] == \
        [f"{tmp_path / 'L2.nc'}: 7 NaN or infinite sample(s) set to 0"]


def test_the_built_cube_is_opened_when_first_asked_for(small_survey, tmp_path, monkeypatch):
    # the command line never asks for it; opening the slice files took 0.3 s of a build
    import slicer.pipeline.view as view_module
    opened = []
    real = view_module.open_result

    def counting(*args):
        opened.append(args)
        return real(*args)

    monkeypatch.setattr(view_module, "open_result", counting)
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1, time_zero=3.0,
                                    velocity=0.1, depths="0:2.4:0.1", cell=0.1,
                                    out=tmp_path / "out")
    result = slicer.build(settings, progress=False)
    assert opened == [] and "not opened yet" in repr(result)
    cube = result.cube
    assert len(opened) == 1 and result.cube is cube  # once, then kept
    with rasterio.open(result.files[0]) as first:
        np.testing.assert_array_equal(cube.isel({cube.dims[0]: 0}).values, first.read(1))
