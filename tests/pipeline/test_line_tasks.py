"""Tests of slicer.pipeline.line_tasks: the per-line task (read, place, fused chain, windows)
equals the public step-by-step xarray functions."""

import numpy as np
import pytest
import xarray as xr

import slicer
from slicer.geometry.survey import load_line, survey_info
from slicer.gridding.windows import make_windows, reduce_to_windows
from slicer.pipeline.line_tasks import LineJob, reduce_line
from slicer.processing.steps import (
    apply_gain,
    correct_time_zero,
    dewow,
    envelope,
    remove_background,
)


@pytest.mark.parametrize("options", [
    {"depths": "0:2.4:0.1", "velocity": 0.1, "dewow": 1.5, "background": "median",
     "migrate": "off"},
    {"times": "0:40:2.5", "dewow": "off", "background": "mean", "gain": "exp:0.2"},
    {"depths": "0.05:1.9:0.15", "thickness": 0.07, "velocity": 0.09, "gain": "none", "dewow": 2.2,
     "migrate": "off"}])
def test_line_task_equals_the_single_steps(small_survey, options):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, **options)
    info = survey_info(settings.lines, sample_interval_ns=0.1)
    windows = settings.requested_windows
    velocity = settings.resolved_velocity
    job = LineJob(1, settings.lines[1], settings, windows, velocity, 0.1, None)
    got = reduce_line(job)

    line = correct_time_zero(load_line(settings.lines[1], settings, sample_interval_ns=0.1),
                             time_zero=3.0)
    if settings.dewow != "off":
        line = dewow(line, window_ns=float(settings.dewow))
    if settings.background != "off":
        line = remove_background(line, method=settings.background)
    if settings.gain_curve is not None:
        line = apply_gain(line, kind=settings.gain_curve[0], value=settings.gain_curve[1])
    env = envelope(line)
    expected = reduce_to_windows(env, windows, velocity=velocity).values
    assert got["values"].shape == (info.lines[1].n_traces, len(windows))
    np.testing.assert_allclose(got["values"], expected, rtol=1e-5,
                               atol=1e-6 * np.nanmax(np.abs(expected)))
    assert got["history"] == env.attrs["history"]
    np.testing.assert_array_equal(got["x"], line["x"].values)


def test_window_values_equal_the_labelled_table():
    from slicer.gridding.windows import window_values
    rng = np.random.default_rng(4)
    twt = -1.0 + 0.1 * np.arange(300)
    line = xr.DataArray(rng.normal(size=(5, 300)).astype(np.float32), dims=("trace", "twt"),
                        coords={"twt": twt})
    w = make_windows(0.0, 1.2, 0.1, axis="depth")
    np.testing.assert_array_equal(window_values(line, w, velocity=0.1),
                                  reduce_to_windows(line, w, velocity=0.1).values)


# --- the plain-array line task against the public labelled steps ------------------------------
# The line task runs the cores on plain arrays; here every case is written out with the public
# step-by-step functions (each checked against its own reference in tests/processing and
# tests/velocity) and must agree to float32 rounding.

LAYERED = ('kind = "layered"\n[[layer]]\ntop_depth = 0.0\nvelocity = 0.1\nvelocity_std = 0.0\n'
           '[[layer]]\ntop_depth = 1.0\nvelocity = 0.08\nvelocity_std = 0.0\n')


def _labelled(settings, entry, windows, model, *, dewow_ns=None, correction=None,
              frequency=None):
    """reduce_line written with the public labelled functions, one step each."""
    from slicer.gridding.windows import window_signs
    from slicer.pipeline.line_chain import migration_arguments, migration_method
    from slicer.pipeline.line_tasks import depth_axis_for
    from slicer.processing.migration import migrate
    from slicer.processing.polarity import direct_wave_polarity
    from slicer.processing.steps import dominant_frequency
    from slicer.processing.ties import correct_line
    s = settings.antenna_separation or 0.0
    line = correct_time_zero(load_line(entry, settings, sample_interval_ns=0.1),
                             time_zero=settings.time_zero, separation=s)
    # the direct wave is looked for one dominant period plus the antennas' air time from t0
    # (line_chain.process_line); 0.29979 m/ns is c (CODATA)
    polarity = direct_wave_polarity(line, period_ns=1 / dominant_frequency(line) + s / 0.299792458)
    window = dewow_ns if settings.dewow == "auto" else settings.dewow
    if window != "off":
        line = dewow(line, window_ns=None if window is None else float(window))
    if settings.background != "off":
        line = remove_background(line, method=settings.background)
    method, _ = migration_method(settings)
    if method != "off":
        line = migrate(line, **migration_arguments(settings), frequency=frequency)
    if settings.gain_curve is not None:
        line = apply_gain(line, kind=settings.gain_curve[0], value=settings.gain_curve[1])
    env = envelope(line)
    if correction is not None:
        env, line = correct_line(env, *correction), correct_line(line, *correction)
    values = reduce_to_windows(depth_axis_for(env, windows, model), windows, velocity=model,
                               separation=s).values
    signs = window_signs(depth_axis_for(line, windows, model), depth_axis_for(env, windows, model),
                         windows, velocity=model, separation=s) * polarity
    return values, signs, env


@pytest.mark.parametrize("case", [
    # Stolt migration (auto: one velocity, depth slices), default scaled background, picked t0
    {"options": {"depths": "0:2.4:0.1", "velocity": 0.1, "time_zero": "auto"}},
    # the same with the survey's migrated band (a build's: its first line's frequency)
    {"options": {"depths": "0:2.4:0.1", "velocity": 0.1}, "frequency": 0.4},
    # signed slices, antenna separation (picked t0), tie correction, exp gain, phase shift
    {"options": {"depths": "0:2:0.2", "velocity": 0.1, "attribute": "signed",
                 "antenna_separation": 0.1, "time_zero": "auto", "migrate": "phase-shift",
                 "gain": "exp:0.1", "background": "median:0-12"},
     "correction": (0.25, 1.3)},
    # a layered velocity model: phase-shift migration and a depth axis before the windows
    {"options": {"depths": "0:2:0.1", "attribute": "signed"}, "model": LAYERED},
    # time slices, dewow from the dominant frequency (no survey window), mean background
    {"options": {"times": "0:40:2.5", "background": "mean", "dewow": "auto"}, "dewow_ns": None},
])
def test_plain_line_task_equals_the_labelled_steps(small_survey, tmp_path, case):
    options = {"time_zero": 3.0, **case["options"]}
    if "model" in case:
        path = tmp_path / "model.toml"
        path.write_text(case["model"])
        options["velocity_model"] = path
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1, **options)
    windows = settings.requested_windows
    model = settings.resolved_velocity or settings.resolved_model
    dewow_ns = case.get("dewow_ns", 3.75)
    for number in (0, 3):
        job = LineJob(number, settings.lines[number], settings, windows, model, 0.1, dewow_ns,
                      case.get("correction"), case.get("frequency"))
        got = reduce_line(job)
        values, signs, env = _labelled(settings, settings.lines[number], windows, model,
                                       dewow_ns=dewow_ns, correction=case.get("correction"),
                                       frequency=case.get("frequency"))
        if settings.attribute == "signed":
            values = values * signs
            assert (np.sign(got["values"]) != 0).any()
        scale = float(np.nanmax(np.abs(values)))
        np.testing.assert_allclose(got["values"], values, rtol=1e-5, atol=1e-6 * scale)
        assert got["history"] == env.attrs["history"]
        assert got["time_zero_ns"] == pytest.approx(env.attrs["time_zero_ns"], abs=1e-12)


def test_the_table_filled_line_by_line_equals_the_joined_lines():
    # numpy.concatenate of the lines' pieces is the reference; the fill is sized from the
    # headers (here too small: a line holding more traces than they said grows it)
    from slicer.pipeline.line_tasks import _TableFill, assemble_table
    rng = np.random.default_rng(5)
    windows = make_windows(0.0, 0.3, 0.1)
    results = [{"values": rng.random((k, 3)).astype(np.float32), "x": rng.random(k),
                "y": rng.random(k), "line": i, "traces": k}
               for i, k in enumerate((4, 7, 2))]
    joined = assemble_table([dict(r) for r in results], windows)
    for capacity in (13, 9):
        fill = _TableFill(capacity)
        for r in results:
            fill.add(dict(r))
        table = fill.table(windows)
        xr.testing.assert_identical(table, joined)
        assert table["line"].dtype == np.int32 and table.dtype == np.float32


def test_a_build_migrates_every_line_with_one_band(small_survey, tmp_path):
    # The survey's band: four times the first line's dominant frequency
    # (slicer.processing.steps.dominant_frequency, checked in tests/processing), the same in
    # every line's history.
    from slicer.processing.steps import dominant_frequency
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1, time_zero=3.0,
                                    depths="0:2:0.2", velocity=0.1, out=tmp_path / "out")
    result = slicer.build(settings, progress=False)
    first = correct_time_zero(load_line(settings.lines[0], settings, sample_interval_ns=0.1),
                              time_zero=3.0)
    band = f"frequencies to {4 * dominant_frequency(first):.3g} GHz"
    histories = [line["history"] for line in result.record["lines"]]
    assert len(histories) == len(settings.lines)
    assert all(band in h for h in histories), (band, histories[0])


def _silenced(survey, tmp_path, count):
    """A copy of ``survey`` whose first ``count`` line files hold only zeros (segyio)."""
    import shutil

    import segyio
    folder = tmp_path / "silenced"
    shutil.copytree(survey.line_table.parent, folder)
    settings = slicer.load_settings(folder / survey.line_table.name, sample_interval=0.1)
    for entry in settings.lines[:count]:
        with segyio.open(entry.file, "r+", ignore_geometry=True) as f:
            for i in range(f.tracecount):
                f.trace[i] = np.zeros(f.samples.size, dtype=np.float32)
    return folder / survey.line_table.name


def test_a_silent_first_line_gives_way_to_the_next_for_the_survey_frequency(small_survey,
                                                                            tmp_path):
    # A dead first line (a channel that recorded nothing) has no dominant frequency
    # (dominant_frequency refuses a silent record); the dewow window and the migrated band
    # come from the next line, so the band equals the one the second line gives on its own.
    from slicer.processing.steps import dominant_frequency
    table = _silenced(small_survey, tmp_path, 1)
    settings = slicer.load_settings(table, sample_interval=0.1, time_zero=3.0, depths="0:2:0.2",
                                    velocity=0.1, out=tmp_path / "out")
    result = slicer.build(settings, progress=False)
    second = correct_time_zero(load_line(settings.lines[1], settings, sample_interval_ns=0.1),
                               time_zero=3.0)
    band = f"frequencies to {4 * dominant_frequency(second):.3g} GHz"
    assert all(band in line["history"] for line in result.record["lines"])
    assert np.isfinite(result.cube.values).any()


def test_a_survey_of_silent_lines_is_one_clear_error(small_survey, tmp_path):
    table = _silenced(small_survey, tmp_path, 6)
    settings = slicer.load_settings(table, sample_interval=0.1, time_zero=3.0, depths="0:2:0.2",
                                    velocity=0.1, out=tmp_path / "out")
    with pytest.raises(slicer.SlicerError, match="dewow") as caught:
        slicer.build(settings, progress=False)
    assert caught.value.where == "--dewow" and "\n" not in str(caught.value)
    assert not (tmp_path / "out").exists()


def test_migration_operators_are_released_once_the_lines_are_done(small_survey, monkeypatch):
    # a processes build runs its first line tasks in the calling process, which then keeps
    # their Stolt operators (35-43 MB each at 1 M traces) through the gridding unless released
    import slicer.processing.fk as fk
    from slicer.pipeline.line_tasks import reduce_survey
    held, real = [], fk.release_operators

    def release():
        held.append(fk.stolt_operator.cache_info().currsize)
        real()

    monkeypatch.setattr(fk, "release_operators", release)
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, depths="0:2.4:0.1", cell=0.1)
    reduce_survey(settings, progress=False)
    assert held and held[-1] >= 1  # the lines were migrated here, with an operator kept
    assert fk.stolt_operator.cache_info().currsize == 0


def test_line_task_image_is_plain_arrays_that_label_as_display_image(small_survey):
    """The radargram image a line task returns (a LineImage: plain arrays, so a worker never
    builds a DataArray) labels as image_of_samples labels the same processed line, at a page's
    size (display_image's, with a page's cells)."""
    from slicer.outputs.radargram import PAGE_CELLS, LineImage, image_of_samples
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, depths="0:2.4:0.1", velocity=0.1,
                                    dewow=1.5, background="median", migrate="off")
    job = LineJob(2, settings.lines[2], settings, settings.requested_windows, 0.1, 0.1, None)
    image = reduce_line(job)["image"]
    assert isinstance(image, LineImage)
    assert not any(isinstance(v, xr.DataArray) for v in vars(image).values())
    line = correct_time_zero(load_line(settings.lines[2], settings, sample_interval_ns=0.1),
                             time_zero=3.0)
    env = envelope(apply_gain(remove_background(dewow(line, window_ns=1.5), method="median"),
                              kind="power", value=1.0))
    env = env.transpose("trace", "twt")
    expected = image_of_samples(env.values, env["x"].values, env["y"].values, env["twt"].values,
                                most=PAGE_CELLS)
    got = image.labelled()
    assert got.shape == (81, 256)  # 81 traces kept, 512 samples in blocks of 2
    assert got.dims == expected.dims == ("distance", "twt")
    np.testing.assert_allclose(got.values, expected.values, rtol=1e-5,
                               atol=1e-6 * float(np.nanmax(expected.values)))
    for name in ("distance", "x", "y", "twt"):
        np.testing.assert_allclose(got[name].values, expected[name].values, rtol=1e-12)
        assert got[name].attrs == expected[name].attrs
    assert got.attrs["line_start"] == expected.attrs["line_start"]
    assert got.attrs["line_end"] == expected.attrs["line_end"]


def test_a_line_task_leaves_the_array_libraries_unloaded(small_survey, tmp_path):
    """A worker process runs a line task (migrated, as by default) without importing xarray,
    pandas, dask or pyproj: the fork server's modules leave them out (0.3-0.4 s of its CPU,
    benchmarks/README.md) and a line task works on plain arrays (its radargram image included,
    slicer.outputs.radargram.LineImage). The job is made here and unpickled in a fresh process
    holding the worker's modules, as a worker receives it. The check fails with any of them
    imported at the top of a module the task uses (checked with slicer.processing.migration's
    xarray import put back)."""
    import pickle
    import subprocess
    import sys

    from slicer.pipeline.line_tasks import LineJob
    s = slicer.load_settings(small_survey.line_table, sample_interval=0.1, time_zero=3.0,
                             depths="0:2.4:0.1", velocity=0.1, dewow=1.5)
    assert s.migrate == "auto"
    job = tmp_path / "job.pickle"
    job.write_bytes(pickle.dumps(LineJob(0, s.lines[0], s, s.requested_windows, 0.1, 0.1, 1.5,
                                         None, 0.4)))
    code = (
        "import pickle, sys\n"
        "from slicer.pipeline.worker_processes import SERVER_START, WARM_MODULES\n"
        "for m in (SERVER_START, *WARM_MODULES): __import__(m)\n"
        "from slicer.pipeline.line_tasks import reduce_line\n"
        f"r = reduce_line(pickle.loads(open({str(job)!r}, 'rb').read()))\n"
        "print(type(r['image']).__name__, r['values'].shape, 'Stolt' in r['history'],\n"
        "      [m for m in ('xarray', 'pandas', 'dask', 'pyproj') if m in sys.modules])\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split()[0] == "LineImage"
    assert done.stdout.split()[-2:] == ["True", "[]"]


def test_a_record_that_starts_late_is_measured_from_its_first_sample():
    # NetCDF lines may store a delayed window: times 10-35.5 ns. Time zero at 13 ns leaves
    # 22.5 ns of record, 1.125 m at 0.1 m/ns (d = v t / 2): eleven 0.1 m slices, not six
    from types import SimpleNamespace

    from slicer.geometry.survey import SurveyInfo
    from slicer.io.lines import LineInfo
    from slicer.pipeline.line_tasks import plan_windows
    lines = tuple(LineInfo(path=f"L{k}.nc", n_traces=10, n_samples=256, sample_interval_ns=0.1,
                           format="netcdf", first_sample_ns=start)
                  for k, start in enumerate((10.0, 9.5)))
    info = SurveyInfo(lines=lines, n_samples=256, sample_interval_ns=0.1, n_traces=20)
    assert info.record_span_ns == (10.0, pytest.approx(35.0))  # what every line covers
    settings = SimpleNamespace(requested_windows=make_windows(0.0, 1.1, 0.1), time_zero=13.0,
                               slices_axis="depth", times=None, resolved_velocity=0.1,
                               resolved_model=None)
    assert len(plan_windows(settings, info)) == 11
    for outside in (3.0, 35.0):
        settings.time_zero = outside
        with pytest.raises(slicer.SettingsError, match=r"outside the record \(10 to 35 ns\)"):
            plan_windows(settings, info)
