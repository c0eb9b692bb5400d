"""Tests of slicer.geometry.survey: what the headers of a survey's lines say (and whether they
agree), and its lines read and placed one at a time.

Sources named beside the checks:
- Lines of one survey must share the sample count and interval to be cut into the same slices
  (common practice: one record length and sample interval per grid survey).
- A record of n samples taken dt apart spans (n - 1) dt: the first sample is at 0.
- Positions are checked against ``numpy.linspace`` (even spacing along a straight line) and the
  cumulative Euclidean path length ``numpy.cumsum(numpy.hypot(...))`` (plane geometry).
"""

from __future__ import annotations

import inspect
import math
import types
from pathlib import Path

import numpy as np
import pytest
import segyio
import xarray as xr

import slicer
from slicer.core.errors import InputFileError, SettingsError
from slicer.geometry.survey import (
    PlacedSamples,
    SurveyInfo,
    iter_lines,
    load_line,
    load_line_samples,
    position_line,
    survey_info,
)
from slicer.io.linefile import write_line_netcdf
from slicer.io.linetable import LineEntry
from slicer.io.reading import read_line

E0, N0 = 512000.0, 4650000.0


def _write(folder: Path, name: str, *, traces=21, samples=64, interval=0.1, seed=0) -> Path:
    """A NetCDF line with header coordinates 0.05 m apart, due east."""
    data = np.random.default_rng(seed).normal(size=(traces, samples)).astype(np.float32)
    line = xr.DataArray(
        data, dims=("trace", "twt"), name="amplitude",
        coords={"twt": ("twt", interval * np.arange(samples)),
                "x": ("trace", E0 + 0.05 * np.arange(traces)),
                "y": ("trace", np.full(traces, N0 + seed))},
        attrs={"line": name, "sample_interval_ns": interval})
    return write_line_netcdf(line, folder / f"{name}.nc")


def _entry(path: Path, k=0, length=4.0) -> LineEntry:
    return LineEntry(file=path, start=(E0, N0 + 0.5 * k), end=(E0 + length, N0 + 0.5 * k),
                     where=f"lines.csv:{k + 2}")


# --- survey_info -----------------------------------------------------------------------------


def test_agreeing_lines_are_summed(tmp_path):
    entries = [_entry(_write(tmp_path, f"L{k}", traces=n, seed=k), k)
               for k, n in enumerate((21, 30, 5))]
    info = survey_info(entries)
    assert isinstance(info, SurveyInfo)
    assert [i.path for i in info.lines] == [e.file for e in entries]
    assert (info.n_traces, info.n_samples) == (21 + 30 + 5, 64)
    assert info.sample_interval_ns == pytest.approx(0.1)
    # 64 samples 0.1 ns apart, the first at 0: the last at 6.3 ns
    assert info.record_ns == pytest.approx(63 * 0.1)


def test_lines_with_other_sample_counts_are_refused(tmp_path):
    first = _write(tmp_path, "L0")
    other = _write(tmp_path, "L1", samples=50)
    with pytest.raises(InputFileError, match="50 samples per trace, but L0.nc has 64") as info:
        survey_info([_entry(first), _entry(other, 1)])
    assert info.value.where == str(other)


def test_lines_with_other_sample_intervals_are_refused(tmp_path):
    first = _write(tmp_path, "L0")
    other = _write(tmp_path, "L1", interval=0.2)
    with pytest.raises(InputFileError,
                       match=r"sample interval 0.2 ns, but L0.nc has 0.1 ns") as info:
        survey_info([_entry(first), _entry(other, 1), _entry(_write(tmp_path, "L2"), 2)])
    assert info.value.where == str(other)


@pytest.mark.parametrize("interval", [0.0, -0.1, math.inf, math.nan, "fast", None])
def test_no_lines_or_an_impossible_given_interval_are_refused_by_name(tmp_path, interval):
    # an empty survey had ended in a bare IndexError, and a given interval was taken
    # unchecked (0 ns builds a record of no length)
    from slicer.core.errors import SettingsError
    with pytest.raises(SettingsError, match="at least one line") as info:
        survey_info([])
    assert info.value.where == "lines"
    entries = [_entry(_write(tmp_path, "L0"))]
    if interval is None:  # from the headers, as before
        assert survey_info(entries).sample_interval_ns == pytest.approx(0.1)
        return
    with pytest.raises(SettingsError) as info:
        survey_info(entries, sample_interval_ns=interval)
    assert info.value.where == "--sample-interval"


def test_intervals_within_a_thousandth_agree(tmp_path):
    # 0.10005 ns is 5e-4 relative from 0.1 ns, inside the tolerance of math.isclose(1e-3)
    entries = [_entry(_write(tmp_path, "L0")), _entry(_write(tmp_path, "L1", interval=0.10005))]
    assert survey_info(entries).sample_interval_ns == pytest.approx(0.1)


def test_a_given_interval_is_used_for_every_line(tmp_path):
    entries = [_entry(_write(tmp_path, "L0")), _entry(_write(tmp_path, "L1", interval=0.2))]
    info = survey_info(entries, sample_interval_ns=0.25)
    assert info.sample_interval_ns == 0.25 and info.record_ns == pytest.approx(63 * 0.25)


def test_a_line_without_an_interval_needs_one(tmp_path):
    # plain segyio writes no SEG-Y rev 2 extended interval (bytes 3273-3280), and its integer
    # microsecond field (bytes 3217-3218) cannot hold a radar interval of tenths of a ns
    # (SEG-Y rev 2.0, Hagelund & Levin (eds.), 2017): the file holds no usable one
    spec = segyio.spec()
    spec.format, spec.samples, spec.tracecount = 5, np.arange(64), 21
    bare = tmp_path / "bare.sgy"
    with segyio.create(bare, spec) as f:
        f.trace = [np.zeros(64, np.float32)] * 21
    entries = [_entry(_write(tmp_path, "L0")), _entry(bare, 1)]
    with pytest.raises(SettingsError, match="bare.sgy holds no usable radar sample interval"
                       ) as info:
        survey_info(entries)
    assert info.value.where == "--sample-interval"
    assert survey_info(entries, sample_interval_ns=0.1).n_traces == 42


def test_a_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputFileError, match="not found"):
        survey_info([_entry(_write(tmp_path, "L0")), _entry(tmp_path / "gone.nc", 1)])


# --- lines read and placed -------------------------------------------------------------------


def test_iter_lines_reads_and_places_one_line_at_a_time(tmp_path):
    entries = [_entry(_write(tmp_path, f"L{k}", seed=k), k) for k in range(3)]
    lines = iter_lines(entries)
    assert inspect.isgenerator(lines)
    first = next(lines)
    entries[2].file.unlink()  # not read yet: only the line being yielded is in memory
    np.testing.assert_array_equal(first.values, read_line(entries[0].file).values)
    np.testing.assert_allclose(first["x"].values, np.linspace(E0, E0 + 4.0, 21), atol=1e-9)
    second = next(lines)
    np.testing.assert_allclose(second["y"].values, N0 + 0.5, atol=1e-9)
    with pytest.raises(InputFileError, match="not found"):
        next(lines)


def test_position_line_from_the_table_or_from_the_headers(tmp_path):
    # header positions along an L: 10 traces east 0.1 m apart, then 10 north 0.2 m apart
    x = np.concatenate([E0 + 0.1 * np.arange(10), np.full(10, E0 + 0.9)])
    y = np.concatenate([np.full(10, N0), N0 + 0.2 * np.arange(1, 11)])
    line = xr.DataArray(np.zeros((20, 8), np.float32), dims=("trace", "twt"),
                        coords={"twt": 0.1 * np.arange(8), "header_x": ("trace", x),
                                "header_y": ("trace", y)},
                        attrs={"line": "L", "sample_interval_ns": 0.1})
    entry = LineEntry(file=Path("L.sgy"), start=(E0, N0), end=(E0, N0 + 3.8), where="t:2")
    table = position_line(line, entry)
    np.testing.assert_allclose(table["x"].values, E0, atol=1e-9)
    np.testing.assert_allclose(table["y"].values, np.linspace(N0, N0 + 3.8, 20), atol=1e-9)
    headers = position_line(line, entry, positions="headers")
    np.testing.assert_array_equal(headers["x"].values, x)
    np.testing.assert_array_equal(headers["y"].values, y)
    path = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))])
    np.testing.assert_allclose(headers["distance"].values, path, atol=1e-9)
    assert headers["distance"].values[-1] == pytest.approx(0.9 + 2.0)


def test_load_line_reads_and_places_a_survey_line(small_survey):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1)
    entry = settings.lines[1]
    line = load_line(entry, settings, sample_interval_ns=0.1)
    raw = read_line(entry.file, sample_interval_ns=0.1)
    np.testing.assert_array_equal(line.values, raw.values)
    n = raw.sizes["trace"]
    np.testing.assert_allclose(line["x"].values, np.linspace(entry.start[0], entry.end[0], n),
                               rtol=0, atol=1e-6)
    np.testing.assert_allclose(line["y"].values, np.linspace(entry.start[1], entry.end[1], n),
                               rtol=0, atol=1e-6)
    assert line["distance"].values[-1] == pytest.approx(math.dist(entry.start, entry.end))


def test_load_line_follows_the_settings_positions(small_survey):
    # from the headers, the synthetic lines' CDP X/Y in centimetres (SEG-Y scalar -100) give
    # the planned positions to half a centimetre
    entry = slicer.load_settings(small_survey.line_table).lines[0]
    settings = types.SimpleNamespace(positions="headers", trace_spacing=None)
    line = load_line(entry, settings, sample_interval_ns=0.1)
    n = line.sizes["trace"]
    np.testing.assert_array_equal(line["x"].values, line["header_x"].values)
    np.testing.assert_array_equal(line["y"].values, line["header_y"].values)
    np.testing.assert_allclose(line["x"].values, np.linspace(entry.start[0], entry.end[0], n),
                               atol=0.005)


def test_load_line_reads_header_coordinates_only_for_header_positions(small_survey,
                                                                      monkeypatch):
    # table positions need none of the file's trace-header coordinates, so that pass over
    # every trace header is skipped; header positions still read (and use) them
    import slicer.io.segy as segy
    calls = []
    original = segy._header_coordinates
    monkeypatch.setattr(segy, "_header_coordinates",
                        lambda f, path: calls.append(path) or original(f, path))
    entry = slicer.load_settings(small_survey.line_table).lines[0]
    table = load_line(entry, types.SimpleNamespace(positions="table", trace_spacing=None),
                      sample_interval_ns=0.1)
    assert calls == [] and "header_x" not in table.coords
    headers = load_line(entry, types.SimpleNamespace(positions="headers", trace_spacing=None),
                        sample_interval_ns=0.1)
    assert calls == [entry.file]
    np.testing.assert_array_equal(headers.values, table.values)
    # the synthetic file's header positions lie on the table's line, to half a centimetre
    np.testing.assert_allclose(headers["x"].values, table["x"].values, atol=0.005)


def _same(a: PlacedSamples, b: PlacedSamples) -> None:
    for name in ("values", "twt", "x", "y", "distance", "height"):
        got, want = getattr(a, name), getattr(b, name)
        assert (got is None) == (want is None), name
        if want is not None:
            np.testing.assert_array_equal(got, want, err_msg=name)
            assert got.dtype == want.dtype, name
    assert a.attrs == b.attrs


@pytest.mark.parametrize("positions", ["table", "headers"])
def test_the_plain_arrays_of_a_line_are_those_of_its_dataarray(small_survey, positions):
    # a build's line task reads a table-placed SEG-Y line without a DataArray; it must get
    # exactly what load_line gives (the labelled reader is the reference here), and any other
    # line goes through load_line itself
    entry = slicer.load_settings(small_survey.line_table).lines[2]
    settings = types.SimpleNamespace(positions=positions, trace_spacing=None)
    plain = load_line_samples(entry, settings, sample_interval_ns=0.1)
    _same(plain, PlacedSamples.of(load_line(entry, settings, sample_interval_ns=0.1)))
    assert plain.values.dtype == np.float32 and plain.distance is not None


def test_the_plain_reader_refuses_what_the_labelled_one_refuses(small_survey, tmp_path):
    # the same checks: a file whose header holds no interval needs one given, and a
    # truncated file is an input error naming it
    entry = slicer.load_settings(small_survey.line_table).lines[0]
    settings = types.SimpleNamespace(positions="table", trace_spacing=None)
    cut = tmp_path / "cut.sgy"
    cut.write_bytes(entry.file.read_bytes()[:-7])
    short = LineEntry(file=cut, start=entry.start, end=entry.end, where="lines.csv:2")
    for reader in (load_line, load_line_samples):
        with pytest.raises(InputFileError, match="truncated") as caught:
            reader(short, settings, sample_interval_ns=0.1)
        assert caught.value.where == str(cut)
