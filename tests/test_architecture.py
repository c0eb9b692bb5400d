"""The package's shape: layers and cycles (import-linter), the public API, lazy start-up and
module size. These are the project's own rules (DEVELOPERS.md, "Layout"), checked by tools."""

from __future__ import annotations

import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

import slicer

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "slicer"

#: Every name of ``slicer.__all__`` before the package was split into subpackages: the public
#: API that must keep importing from ``slicer``.
PUBLIC_BEFORE_SPLIT = """
BuildResult BuildSettings C_M_PER_NS ChannelTable ConstantVelocity ControlPoint Engine Grid
GridTransform InputFileError LateralVelocity LayeredVelocity LineEntry LineTableError
OutputError SettingsError SlicerError SlicerWarning Windows analyse_velocity apply_gain
apply_ties atomic_path build build_cube check_velocity correct_time_zero cube_crs
cube_transform depth_error depth_from_time dewow dominant_frequency engine envelope
expand_channels find_crossings find_diffractions fit_affine fit_control_points fit_hyperbola
fit_similarity grid_for grid_slices hyperbola_time iter_lines level_lines line_info load_line
load_settings make_windows measure_ties migrate neighbour_weights new_cube parse_range
parse_scheduler permittivity_from_velocity pick_time_zero place_line plot_overview plot_slice
positions_from_headers positions_from_track prepare_output_dir prepare_survey process_line
read_channel_table read_control_points read_cube_netcdf read_line read_line_table read_marks
read_track read_velocity_model reduce_survey reduce_to_windows remove_background resample_even
run_demo slice_file_name solve_ties stretch_by_marks stripe_amplitude survey_info
survey_velocity time_from_depth to_depth to_depth_axis velocity_from_known_depth
velocity_from_permittivity write_cube_netcdf write_segy_line write_slice_geotiffs
write_velocity_model
""".split()

#: Libraries the quick commands must not load (each costs 0.1-1 s; stack-notes 16).
HEAVY = ("dask", "distributed", "zarr", "h5py", "h5netcdf", "matplotlib", "scipy.signal",
         "rasterio", "segyio")


def _contracts() -> list[dict]:
    config = tomllib.loads((ROOT / "pyproject.toml").read_text())
    return config["tool"]["importlinter"]["contracts"]


def test_import_linter_contracts_are_kept():
    """`lint-imports` (import-linter, PyPI) with the contracts of pyproject.toml."""
    from importlinter.cli import lint_imports

    assert lint_imports(config_filename=str(ROOT / "pyproject.toml"), no_cache=True) == 0


def test_every_subpackage_is_a_layer_of_the_flow():
    layers = next(c for c in _contracts() if c["type"] == "layers")["layers"]
    named = [name.strip() for layer in layers for name in layer.split("|")]
    on_disk = sorted(p.parent.name for p in PACKAGE.glob("*/__init__.py"))
    on_disk += sorted(p.stem for p in PACKAGE.glob("*.py") if p.stem != "__init__")
    assert sorted(named) == sorted(on_disk)
    assert len(named) == len(set(named))
    assert any(c["type"] == "acyclic_siblings" and c["ancestors"] == ["slicer"]
               for c in _contracts())


def test_a_wrong_way_import_breaks_the_layer_contract():
    """The contract is not vacuous: an import from a low layer up into a high one breaks it."""
    import grimp

    layers = next(c for c in _contracts() if c["type"] == "layers")["layers"]
    graph = grimp.build_graph("slicer", cache_dir=None)
    levels = [grimp.Layer(*(f"slicer.{n.strip()}" for n in layer.split("|")),
                          independent=True) for layer in layers]
    assert graph.find_illegal_dependencies_for_layers(layers=levels) == set()
    graph.add_import(importer="slicer.core.errors", imported="slicer.pipeline.build",
                     line_number=1, line_contents="import slicer.pipeline.build")
    assert graph.find_illegal_dependencies_for_layers(layers=levels) != set()


def test_public_api_is_unchanged():
    missing = [name for name in PUBLIC_BEFORE_SPLIT if name not in slicer.__all__]
    assert missing == []
    for name in slicer.__all__:
        assert getattr(slicer, name) is not None, name
    assert slicer.build.__module__ == "slicer.pipeline.build"
    with pytest.raises(AttributeError, match="no attribute 'no_such_name'"):
        slicer.no_such_name  # noqa: B018


def _modules_after(argv: list[str] | None, code: str = "") -> set[str]:
    """The modules loaded in a fresh process by the command line ``slicer <argv>`` (or by
    ``code``)."""
    if argv is not None:
        code = ("from slicer.cli import main\n"
                f"try:\n    main({argv!r})\nexcept SystemExit:\n    pass\n")
    code = "import sys\n" + code + "\nprint('\\n'.join(sys.modules), file=sys.stderr)"
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          cwd=ROOT, timeout=120)
    return set(done.stderr.split())


@pytest.mark.parametrize("argv", [
    ["--help"], ["--version"], ["build", "--help"],
    ["plan", "--frequency", "400", "--permittivity", "9", "--target-depth", "1"],
], ids=["help", "version", "build-help", "plan"])
def test_quick_commands_do_not_load_heavy_libraries(argv):
    loaded = _modules_after(argv)
    assert "slicer.cli" in loaded  # the command ran in that process
    assert [m for m in HEAVY if m in loaded] == []


def test_the_build_does_load_them():
    """The check above can fail: the writers a build imports once its engine is open load the
    heavy stack (``slicer.build`` itself defers them, so its workers start sooner)."""
    loaded = _modules_after(None, "import slicer\nslicer.build\n"
                                  "import slicer.pipeline.cube_build, slicer.pipeline.view\n"
                                  "import slicer.pipeline.worker_outputs")
    assert {"xarray", "segyio", "scipy.fft"} <= loaded  # dask: with the first DataArray


def test_a_build_without_netcdf_or_zarr_does_not_load_their_libraries():
    """What a GeoTIFF build's processes import (the calling process's writers, and what its
    workers' fork server imports) leaves out the NetCDF and Zarr writers' libraries and
    dask.array: 0.5 s of every worker's start (benchmarks/startup.py)."""
    from slicer.pipeline.worker_processes import WARM_MODULES
    loaded = _modules_after(None, "import slicer\nslicer.build\n"
                                  "import slicer.pipeline.view, slicer.outputs.sink\n"
                                  + "".join(f"import {m}\n" for m in WARM_MODULES))
    assert set(WARM_MODULES) <= loaded
    assert [m for m in ("h5py", "h5netcdf", "netCDF4", "zarr", "dask.array") if m in loaded] == []


def test_the_process_that_plans_a_build_does_not_load_scipy_spatial_or_rasterio():
    """On worker processes the calling process never grids and writes no GeoTIFF, so the
    modules it imports for a build leave scipy.spatial (the gridding's KD-tree, imported where
    it grids: 0.13 s) to the workers' fork server, which imports it with the task modules, and
    rasterio (0.13 s) to where a file is written (the record reads GDAL's version on a thread
    while the workers grid)."""
    from slicer.pipeline.worker_processes import WARM_MODULES
    loaded = _modules_after(None, "import slicer\nslicer.build\n"
                                  "import slicer.pipeline.cube_build, slicer.pipeline.view\n"
                                  "import slicer.outputs.sink, slicer.pipeline.worker_outputs\n")
    assert "slicer.pipeline.cube_build" in loaded and "slicer.gridding.grid" in loaded
    assert "scipy.spatial" not in loaded and "rasterio" not in loaded
    assert "scipy.spatial" in WARM_MODULES


def test_a_build_without_a_terminal_does_not_load_tqdm():
    """Bars are drawn on a terminal only (slicer.core.progress); elsewhere tqdm, whose import
    looks up its installed version (about 60 ms a process), is not loaded at all."""
    from slicer.pipeline.worker_processes import WARM_MODULES
    loaded = _modules_after(None, "import slicer.pipeline.view, slicer.outputs.sink\n"
                                  + "".join(f"import {m}\n" for m in WARM_MODULES)
                                  + "from slicer.core.progress import bar_for, progress_bar\n"
                                  "assert list(progress_bar(range(3))) == [0, 1, 2]\n"
                                  "with bar_for(total=2) as bar:\n    bar.update(2)\n")
    assert "slicer.core.progress" in loaded and "tqdm" not in loaded


def test_reading_a_builds_settings_does_not_load_the_array_libraries(tmp_path):
    """slicer.load_settings reads and checks a line table with the standard library, numpy and
    pyproj: xarray (with pandas and dask), scipy and the file readers come with the build,
    which can start its worker processes' imports first."""
    (tmp_path / "lines.csv").write_text(
        "file,start_x,start_y,end_x,end_y\nL1.sgy,0,0,10,0\nL2.sgy,0,1,10,1\n")
    loaded = _modules_after(None, (
        "import slicer\n"
        f"s = slicer.load_settings({str(tmp_path / 'lines.csv')!r}, crs='EPSG:32633', "
        "sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.1, depths='0:2.4:0.1', "
        "background='scaled', out='out')\n"
        "assert s.cell == 0.1 and len(s.lines) == 2\n"))
    assert "slicer.pipeline.settings" in loaded and "pyproj" in loaded
    assert [m for m in ("xarray", "pandas", "dask", "scipy", "segyio", "rasterio")
            if m in loaded] == []


def test_a_build_opens_its_engine_before_importing_the_array_stack(small_survey, tmp_path):
    """slicer.build chooses and opens its engine (``scheduler = "auto"`` counts the traces in
    the SEG-Y headers) before it imports xarray, scipy and the writers, so a ``processes``
    engine's fork server imports the task modules while the calling process imports its own
    (benchmarks/README.md, peers.py). The engine is watched as the build opens it."""
    loaded = _modules_after(None, (
        "import slicer\nimport slicer.pipeline.build as b\n"
        "real = b.open_engine\n"
        "def watch(settings):\n"
        "    engine = real(settings)\n"
        "    print('engine', engine.spec.kind, file=sys.stderr)\n"
        "    print('\\n'.join(sys.modules), file=sys.stderr)\n"
        "    raise SystemExit(0)\n"
        "b.open_engine = watch\n"
        f"s = slicer.load_settings({str(small_survey.line_table)!r}, crs='EPSG:32633', "
        "sample_interval=0.1, time_zero=3.0, velocity=0.1, cell=0.1, depths='0:2:0.25', "
        f"scheduler='auto', out={str(tmp_path / 'out')!r})\n"
        "slicer.build(s, progress=False)\n"
        "print('not stopped', file=sys.stderr)\n"))
    assert "engine" in loaded and "threads" in loaded and "stopped" not in loaded
    assert "segyio" in loaded  # the trace count was read from the headers
    assert [m for m in ("xarray", "pandas", "dask", "scipy", "rasterio", "matplotlib",
                        "slicer.pipeline.cube_build", "slicer.pipeline.line_tasks")
            if m in loaded] == []
    assert not (tmp_path / "out").exists()


def test_a_builds_worker_does_not_load_the_drawing_or_array_libraries():
    """A build's worker process imports its task modules (worker_processes.WARM_MODULES) and never
    draws: matplotlib (about 0.5 s of its start) and scipy.signal (0.6-0.7 s) stay out
    (benchmarks/startup.py, "a build's worker"). The main process imports matplotlib where it
    draws the overview. Its tasks work on plain arrays: xarray with pandas (0.25-0.36 s of
    the fork server's CPU), dask and pyproj stay out too (the modules it imports name xarray
    for annotations only, and import it in the functions that make DataArrays)."""
    from slicer.pipeline.worker_processes import SERVER_START, WARM_MODULES
    loaded = _modules_after(None, "import " + ", ".join([SERVER_START, *WARM_MODULES]))
    assert set(WARM_MODULES) <= loaded
    assert [m for m in ("matplotlib", "scipy.signal", "xarray", "pandas", "dask", "pyproj")
            if m in loaded] == []


def test_modules_stay_small():
    """DEVELOPERS.md: modules under ~500 lines."""
    sizes = {str(p.relative_to(ROOT)): len(p.read_text().splitlines())
             for p in PACKAGE.rglob("*.py")}
    assert {k: v for k, v in sizes.items() if v > 500} == {}
