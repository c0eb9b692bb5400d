"""Tests of slicer.io.lines: the Line data model every reader shares (LineInfo, the
sample-interval rules, NaN handling, the returned DataArray) and the checks of the writers.

The readers' own tests (tests/io/test_segy.py, tests/io/test_linefile.py) check the same rules
through each file format against segyio and netCDF4; here the shared rules are checked once,
directly. Sources named beside the checks:
- NumPy reference, ``numpy.isfinite``: NaN, +inf and -inf are the non-finite values.
- NetCDF Climate and Forecast (CF) Metadata Conventions, section 3.1 (units): "1" is the
  UDUNITS spelling of a dimensionless quantity [memory for the section number].
"""

from __future__ import annotations

import dataclasses
import os
import warnings
from pathlib import Path

import hypothesis.extra.numpy as hnp
import hypothesis.strategies as st
import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings

from slicer.core.errors import InputFileError, OutputError, SettingsError, SlicerWarning
from slicer.io.lines import (
    AMPLITUDE_UNITS,
    PLAUSIBLE_INTERVAL_NS,
    LineInfo,
    _check_file,
    _check_line,
    _choose_interval,
    _line_interval,
    _line_xy,
    _make_line,
    _plausible_interval,
    _zero_nonfinite,
)
from slicer.io.reading import line_info
from slicer.io.segy import write_segy_line


def _line(n_traces=4, n_samples=6, interval_ns=0.2, **coords):
    data = np.random.default_rng(2).normal(size=(n_traces, n_samples)).astype(np.float32)
    return xr.DataArray(
        data, dims=("trace", "twt"), name="amplitude",
        coords={"twt": ("twt", interval_ns * np.arange(n_samples)),
                **{k: ("trace", v) for k, v in coords.items()}},
        attrs={"line": "L1", "sample_interval_ns": interval_ns})


# --- LineInfo --------------------------------------------------------------------------------


def test_line_info_is_frozen(tmp_path):
    # moved from tests/io/test_reading.py
    path = write_segy_line(_line(), tmp_path / "a.sgy")
    info = line_info(path)
    assert isinstance(info, LineInfo) and info.path == path
    with pytest.raises(dataclasses.FrozenInstanceError):
        info.n_traces = 0  # type: ignore[misc]


# --- files -----------------------------------------------------------------------------------


def test_check_file_returns_the_size_the_file_system_reports(tmp_path):
    path = tmp_path / "a.sgy"
    path.write_bytes(b"\x00" * 3600)
    assert _check_file(path) == os.stat(path).st_size == 3600


@pytest.mark.parametrize(("make", "match"), [
    (lambda p: None, "file not found"),
    (lambda p: p.mkdir(), "not a regular file"),
    (lambda p: p.write_bytes(b""), "file is empty"),
])
def test_check_file_refuses_missing_folder_and_empty(tmp_path, make, match):
    path = tmp_path / "L000.sgy"
    make(path)
    with pytest.raises(InputFileError, match=match) as info:
        _check_file(path)
    assert info.value.where == str(path)


# --- the sample-interval rule ----------------------------------------------------------------


def test_plausible_interval_range_is_inclusive_and_finite():
    low, high = PLAUSIBLE_INTERVAL_NS
    assert _plausible_interval(low) and _plausible_interval(high) and _plausible_interval(0.1)
    for bad in (None, float("nan"), float("inf"), -0.1, 0.0, low / 2, high * 2):
        assert not _plausible_interval(bad), bad


def test_the_files_interval_serves_when_none_is_given(tmp_path):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert _choose_interval(tmp_path / "a.sgy", 0.1, None, "the header") == 0.1


def test_the_given_interval_wins_and_a_disagreement_is_said(tmp_path):
    path = tmp_path / "a.sgy"
    with pytest.warns(SlicerWarning, match=r"a\.sgy: the header states .* 0\.1 ns; using the "
                                           r"given 0\.2 ns"):
        assert _choose_interval(path, 0.1, 0.2, "the header") == 0.2
    with warnings.catch_warnings():  # within 1e-3 relative: the same interval, no warning
        warnings.simplefilter("error")
        assert _choose_interval(path, 0.1, 0.10005, "the header") == 0.10005
        assert _choose_interval(path, None, 0.3, "the header") == 0.3


def test_no_interval_anywhere_asks_for_one(tmp_path):
    with pytest.raises(SettingsError, match="give it with --sample-interval") as info:
        _choose_interval(tmp_path / "a.sgy", None, None, "the header")
    assert info.value.where == "--sample-interval"


@pytest.mark.parametrize("bad", [0.0, -0.1, float("nan"), float("inf")])
def test_a_given_interval_must_be_a_positive_number(tmp_path, bad):
    with pytest.raises(SettingsError, match="positive number of ns") as info:
        _choose_interval(tmp_path / "a.sgy", 0.1, bad, "the header")
    assert info.value.where == "--sample-interval"


# --- NaN and infinite samples ----------------------------------------------------------------


def test_non_finite_samples_are_zeroed_in_place_and_counted(tmp_path):
    rng = np.random.default_rng(5)
    data = rng.normal(size=(7, 50)).astype(np.float32)
    bad = rng.random(data.shape) < 0.1
    data[bad] = rng.choice(np.array([np.nan, np.inf, -np.inf], np.float32), size=bad.sum())
    before = data.copy()
    with pytest.warns(SlicerWarning, match=rf"a\.nc: {bad.sum()} NaN or infinite sample"):
        out = _zero_nonfinite(data, tmp_path / "a.nc")
    assert out is data  # in place, no second copy of a large line
    expected = np.where(np.isfinite(before), before, 0.0)  # numpy.isfinite
    np.testing.assert_array_equal(out, expected)


def test_samples_whose_squares_overflow_float32_are_zeroed_and_counted(tmp_path):
    # the largest float32 is 3.4e38 (IEEE 754 single), so a sample above its root, 1.8e19,
    # squares to infinity and one such sample made its line's every envelope infinite
    rng = np.random.default_rng(6)
    data = rng.normal(size=(4, 64)).astype(np.float32)
    data[1, 10], data[2, 20] = 3e38, -2e19
    before = data.copy()
    with pytest.warns(SlicerWarning, match=r"a\.sgy: 2 sample\(s\) up to 3e\+38.*set to 0"):
        out = _zero_nonfinite(data, tmp_path / "a.sgy")
    expected = np.where(np.abs(before) > 1.8e19, 0.0, before)
    np.testing.assert_array_equal(out, expected)
    with np.errstate(over="raise"):  # the envelope squares them: no overflow is left
        assert np.isfinite(np.square(out, dtype=np.float32)).all()


def test_finite_samples_pass_without_a_warning(tmp_path):
    data = np.arange(12, dtype=np.float32).reshape(3, 4)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        np.testing.assert_array_equal(_zero_nonfinite(data.copy(), tmp_path / "a.nc"), data)


def test_finite_samples_whose_squares_overflow_are_zeroed_and_the_rest_kept(tmp_path):
    # float32 holds values up to 3.4e38 (IEEE 754): an envelope squares its samples, which
    # overflows above sqrt(3.4e38) = 1.8e19; such samples are set to 0 and counted
    data = np.full((2, 2), 1e38, dtype=np.float32)
    with np.errstate(over="ignore"):
        assert not np.isfinite(data.sum()) and not np.isfinite(np.square(data)).any()
    with pytest.warns(SlicerWarning, match=r"a\.nc: 4 sample\(s\) up to 1e\+38, beyond any "):
        np.testing.assert_array_equal(_zero_nonfinite(data.copy(), tmp_path / "a.nc"), 0 * data)
    # one damaged trace of +-3e38 among ordinary ones (a sum in order cancels it)
    data = np.random.default_rng(2).normal(size=(5, 64)).astype(np.float32)
    data[3] = np.float32(3e38) * (-1) ** np.arange(64)
    with pytest.warns(SlicerWarning, match=r"64 sample\(s\) up to 3e\+38.*20 % of the line"):
        out = _zero_nonfinite(data.copy(), tmp_path / "a.nc")
    np.testing.assert_array_equal(out[3], 0)
    np.testing.assert_array_equal(np.delete(out, 3, axis=0), np.delete(data, 3, axis=0))
    data = np.full((2, 2), 1e19, dtype=np.float32)  # squares still finite: nothing said
    assert np.isfinite(np.square(data)).all()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        np.testing.assert_array_equal(_zero_nonfinite(data.copy(), tmp_path / "a.nc"), data)


@settings(max_examples=60, deadline=None)
@given(values=hnp.arrays(np.float32, hnp.array_shapes(min_dims=2, max_dims=2, max_side=40),
                         elements=st.floats(width=32, allow_nan=True, allow_infinity=True)))
def test_zeroing_is_numpys_finite_mask_for_any_samples(values):
    # numpy.isfinite as the reference: every NaN and infinity becomes 0, and every sample
    # beyond 1.8e19 (sqrt(3.4e38) rounded down: its float32 square may overflow); nothing
    # else changes
    with np.errstate(invalid="ignore"):
        keep = np.isfinite(values) & (np.abs(values) <= 1.8e19)
    expected = np.where(keep, values, np.float32(0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = _zero_nonfinite(values.copy(), Path("a.nc"))
    np.testing.assert_array_equal(out, expected)


# --- the returned Line -----------------------------------------------------------------------


def test_made_line_follows_the_data_model(tmp_path):
    data = np.arange(15, dtype=np.int16).reshape(3, 5)
    hx, hy = np.array([1.0, 2.0, 3.0]), np.array([4.0, 5.0, 6.0])
    line = _make_line(data, interval_ns=0.25, path=tmp_path / "L007.sgy", name=None,
                      header_xy=(hx, hy), time_zero_ns=1.5, history="read")
    assert line.dims == ("trace", "twt") and line.dtype == np.float32 and line.name == "amplitude"
    np.testing.assert_array_equal(line.values, data)
    np.testing.assert_allclose(line["twt"].values, np.linspace(0.0, 1.0, 5), rtol=0, atol=1e-15)
    np.testing.assert_array_equal(line["trace"].values, [0, 1, 2])
    np.testing.assert_array_equal(line["header_x"].values, hx)
    np.testing.assert_array_equal(line["header_y"].values, hy)
    assert line["twt"].attrs["units"] == "ns" and line["header_x"].attrs["units"] == "m"
    assert line.attrs == {"line": "L007", "source": str(tmp_path / "L007.sgy"),
                          "sample_interval_ns": 0.25, "time_zero_ns": 1.5, "history": "read",
                          "units": AMPLITUDE_UNITS}
    assert AMPLITUDE_UNITS == "1"  # dimensionless recorder counts (CF section 3.1)


def test_made_line_keeps_a_stored_time_axis_and_name(tmp_path):
    twt = np.array([-0.3, -0.1, 0.1, 0.3])
    line = _make_line(np.zeros((2, 4)), interval_ns=0.2, path=tmp_path / "a.nc", name="east",
                      twt_ns=twt)
    np.testing.assert_array_equal(line["twt"].values, twt)
    assert line.attrs["line"] == "east"
    assert "header_x" not in line.coords


# --- what the writers check ------------------------------------------------------------------


def test_interval_of_a_line_from_its_attribute_else_its_time_axis():
    line = _line(interval_ns=0.2)
    assert _line_interval(line, "out.sgy") == 0.2
    del line.attrs["sample_interval_ns"]
    assert _line_interval(line, "out.sgy") == pytest.approx(0.2, rel=1e-12)
    with pytest.raises(OutputError, match="no positive sample_interval_ns") as info:
        _line_interval(line.isel(twt=[0]), "out.sgy")
    assert info.value.where == "out.sgy"
    line.attrs["sample_interval_ns"] = -0.2
    with pytest.raises(OutputError):
        _line_interval(line, "out.sgy")


def test_placed_positions_are_stored_before_header_positions():
    x, y = np.arange(4.0), np.arange(4.0) + 10
    assert _line_xy(_line()) is None
    hx, hy = _line_xy(_line(header_x=x, header_y=y))
    np.testing.assert_array_equal(hx, x)
    np.testing.assert_array_equal(hy, y)
    px, py = _line_xy(_line(header_x=x, header_y=y, x=x + 100, y=y + 100))
    np.testing.assert_array_equal(px, x + 100)
    np.testing.assert_array_equal(py, y + 100)
    assert _line_xy(_line(x=x)) is None  # x alone is no position


def test_writers_refuse_what_is_not_a_line():
    _check_line(_line(), "out.nc")  # a line passes
    _check_line(_line().transpose("twt", "trace"), "out.nc")  # in any dimension order
    for bad, match in ((np.zeros((2, 3)), "DataArray with dims"),
                       (_line().rename(twt="depth"), "DataArray with dims"),
                       (_line().isel(trace=[]), "empty"),
                       (_line().isel(twt=[]), "empty")):
        with pytest.raises(OutputError, match=match) as info:
            _check_line(bad, "out.nc")
        assert info.value.where == "out.nc"
