"""Tests of slicer.io.linefile: the NetCDF line format, checked with netCDF4-python (Unidata's
reader, independent of the h5netcdf engine slicer writes with) and against files written by
xarray directly."""

from __future__ import annotations

import os
import warnings

import netCDF4
import numpy as np
import pytest
import xarray as xr
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from slicer.core.errors import InputFileError, OutputError, SettingsError, SlicerWarning
from slicer.io.linefile import netcdf_line_info, read_line_netcdf, write_line_netcdf

X0, Y0 = 512345.67, 4649776.12


def _line(data, *, interval_ns=0.1, twt0=0.0, xy="x"):
    data = np.asarray(data, dtype=np.float32)
    n_traces, n_samples = data.shape
    coords = {"twt": ("twt", twt0 + interval_ns * np.arange(n_samples), {"units": "ns"}),
              "trace": np.arange(n_traces)}
    if xy:
        coords[xy] = ("trace", X0 + 0.05 * np.arange(n_traces))
        coords[xy.replace("x", "y")] = ("trace", Y0 - 0.05 * np.arange(n_traces))
    return xr.DataArray(data, dims=("trace", "twt"), coords=coords, name="amplitude",
                        attrs={"line": "L3", "sample_interval_ns": interval_ns, "units": "1",
                               "time_zero_ns": 0.0, "history": ""})


def _data(n_traces=5, n_samples=8, seed=1):
    return np.random.default_rng(seed).normal(size=(n_traces, n_samples)).astype(np.float32)


def _raw(path, amplitude, *, twt=None, attrs=None, **coords):
    """A file written by xarray directly, to build what slicer's writer never would."""
    ds = xr.Dataset({"amplitude": amplitude}, attrs={"slicer_line_format": 1, **(attrs or {})})
    if twt is not None:
        ds = ds.assign_coords(twt=twt)
    ds = ds.assign_coords(coords)
    ds.to_netcdf(path, engine="h5netcdf")
    return path


@pytest.fixture
def good(tmp_path):
    return write_line_netcdf(_line(_data()), tmp_path / "good.nc")


def test_round_trip_exact(good):
    data = _data()
    line = read_line_netcdf(good)
    np.testing.assert_array_equal(line.values, data)
    assert line.dtype == np.float32 and line.dims == ("trace", "twt")
    np.testing.assert_array_equal(line["twt"].values, 0.1 * np.arange(8))
    assert line["twt"].attrs["units"] == "ns"
    # Stored x/y come back as header coordinates: the survey decides positions.
    assert "x" not in line.coords and "y" not in line.coords
    np.testing.assert_array_equal(line["header_x"].values, X0 + 0.05 * np.arange(5))
    np.testing.assert_array_equal(line["header_y"].values, Y0 - 0.05 * np.arange(5))
    assert line["header_x"].dtype == np.float64
    # DEVELOPERS.md, Line: the name is the file stem by default, whatever the stored attribute.
    assert line.attrs["line"] == "good" and line.attrs["source"] == str(good)
    assert line.attrs["sample_interval_ns"] == 0.1
    assert read_line_netcdf(good, name="other").attrs["line"] == "other"
    info = netcdf_line_info(good)
    assert (info.n_traces, info.n_samples, info.sample_interval_ns, info.format) == (
        5, 8, 0.1, "netcdf")


def test_layout_read_by_netcdf4(good):
    with netCDF4.Dataset(good) as nc:
        amp = nc.variables["amplitude"]
        assert amp.dimensions == ("trace", "twt")
        assert amp.dtype == np.float32
        assert nc.variables["twt"].units == "ns"
        assert nc.variables["x"].units == "m" and nc.variables["x"].dtype == np.float64
        assert nc.slicer_line_format == 1
        assert nc.sample_interval_ns == 0.1
        assert nc.line == "L3"
        np.testing.assert_array_equal(amp[:], _data())
        assert amp.filters()["zlib"]


def test_processed_line_keeps_time_axis_and_history(tmp_path):
    line = _line(_data(), interval_ns=0.2, twt0=-1.4).assign_attrs(
        time_zero_ns=1.4, history="time zero; dewow")
    back = read_line_netcdf(write_line_netcdf(line, tmp_path / "p.nc"))
    np.testing.assert_array_equal(back["twt"].values, line["twt"].values)
    assert back.attrs["time_zero_ns"] == 1.4 and back.attrs["history"] == "time zero; dewow"


def test_header_coords_written_for_unplaced_line(tmp_path):
    back = read_line_netcdf(write_line_netcdf(_line(_data(), xy="header_x"), tmp_path / "h.nc"))
    np.testing.assert_array_equal(back["header_x"].values, X0 + 0.05 * np.arange(5))
    none = read_line_netcdf(write_line_netcdf(_line(_data(), xy=None), tmp_path / "n.nc"))
    assert "header_x" not in none.coords


def test_line_read_from_file_can_be_written_again(tmp_path, good):
    # Encoding inherited from the first file (chunk sizes of the full line) must not reach the
    # writer of a smaller selection (stack-notes trap 6 is about encodings replaced on write).
    first = read_line_netcdf(good)
    first.encoding.update({"chunksizes": (5, 8), "source": str(good)})
    part = first.isel(trace=slice(1, 3), twt=slice(0, 4))
    back = read_line_netcdf(write_line_netcdf(part, tmp_path / "part.nc"))
    np.testing.assert_array_equal(back.values, _data()[1:3, :4])


def test_overwrite_is_atomic_and_leaves_no_temporary(tmp_path, good):
    before = good.read_bytes()
    # nothing on disk is replaced unasked (DEVELOPERS.md): refused, the file as it was
    with pytest.raises(OutputError, match=r"good\.nc.*already exists.*overwrite=True"):
        write_line_netcdf(_line(_data(seed=9)), good)
    assert good.read_bytes() == before
    write_line_netcdf(_line(_data(seed=9)), good, overwrite=True)
    np.testing.assert_array_equal(read_line_netcdf(good).values, _data(seed=9))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["good.nc"]


# --- sample interval rules ----------------------------------------------------------------


def test_user_interval_wins_with_warning(good):
    with pytest.warns(SlicerWarning, match=r"good\.nc.*0\.1 ns.*0\.25 ns"):
        line = read_line_netcdf(good, sample_interval_ns=0.25)
    assert line.attrs["sample_interval_ns"] == 0.25
    np.testing.assert_allclose(line["twt"].values, 0.25 * np.arange(8))
    with warnings.catch_warnings():
        warnings.simplefilter("error", SlicerWarning)
        same = read_line_netcdf(good, sample_interval_ns=0.1 * (1 + 5e-4))
    assert same.attrs["sample_interval_ns"] == pytest.approx(0.1 * (1 + 5e-4))


def test_interval_from_twt_alone_and_from_attr_alone(tmp_path):
    amp = (("trace", "twt"), _data(2, 4))
    path = _raw(tmp_path / "t.nc", amp, twt=("twt", 0.5 * np.arange(4), {"units": "ns"}))
    assert netcdf_line_info(path).sample_interval_ns == 0.5
    single = _raw(tmp_path / "s.nc", (("trace", "twt"), _data(2, 1)),
                  attrs={"sample_interval_ns": 0.3})
    line = read_line_netcdf(single)
    assert line.attrs["sample_interval_ns"] == 0.3 and line["twt"].values.tolist() == [0.0]


def test_no_interval_needs_user_value(tmp_path):
    path = _raw(tmp_path / "one.nc", (("trace", "twt"), _data(3, 1)))
    assert netcdf_line_info(path).sample_interval_ns is None
    with pytest.raises(SettingsError, match="one.nc.*no usable radar sample interval") as exc:
        read_line_netcdf(path)
    assert exc.value.where == "--sample-interval"
    assert read_line_netcdf(path, sample_interval_ns=0.1).attrs["sample_interval_ns"] == 0.1


# --- tolerated oddities and bad files -------------------------------------------------------


def test_nan_and_inf_samples_zeroed(tmp_path):
    data = _data()
    data[0, 0], data[4, 7] = np.nan, -np.inf
    path = write_line_netcdf(_line(data), tmp_path / "nan.nc")
    with pytest.warns(SlicerWarning, match=r"nan\.nc: 2 NaN"):
        line = read_line_netcdf(path)
    finite = np.isfinite(data)
    np.testing.assert_array_equal(line.values[~finite], 0.0)
    np.testing.assert_array_equal(line.values[finite], data[finite])


def _bad_cases(tmp_path, good):
    amp = (("trace", "twt"), _data(2, 4))
    even = ("twt", 0.1 * np.arange(4), {"units": "ns"})
    cases = {
        "missing": (tmp_path / "missing.nc", "not found"),
        "empty": (tmp_path / "empty.nc", "empty"),
        "random": (tmp_path / "random.nc", "NetCDF"),
        "text": (tmp_path / "text.nc", "NetCDF"),
        "truncated": (tmp_path / "cut.nc", "NetCDF"),
        "no_variable": (tmp_path / "nov.nc", "no 'amplitude'"),
        "one_dim": (_raw(tmp_path / "1d.nc", (("trace",), np.ones(3, np.float32))), "dims"),
        "other_dims": (_raw(tmp_path / "ab.nc", (("a", "b"), _data(2, 4))), "dims"),
        "no_traces": (_raw(tmp_path / "z.nc", (("trace", "twt"), np.ones((0, 4), np.float32)),
                           twt=even), "no samples"),
        "uneven": (_raw(tmp_path / "u.nc", amp, twt=("twt", [0.0, 0.1, 0.3, 0.4])), "evenly"),
        "decreasing": (_raw(tmp_path / "d.nc", amp, twt=("twt", [0.3, 0.2, 0.1, 0.0])),
                       "evenly"),
        "ms_units": (_raw(tmp_path / "ms.nc", amp, twt=("twt", np.arange(4.0),
                                                          {"units": "ms"})), "units"),
        "attr_disagrees": (_raw(tmp_path / "ad.nc", amp, twt=even,
                                attrs={"sample_interval_ns": 0.2}), "disagrees"),
        "bad_attr": (_raw(tmp_path / "ba.nc", amp, attrs={"sample_interval_ns": -1.0}),
                     "positive"),
        "version": (_raw(tmp_path / "v.nc", amp, attrs={"slicer_line_format": 2}), "version"),
        "x_only": (_raw(tmp_path / "xo.nc", amp, twt=even, x=("trace", [1.0, 2.0])), "'y'"),
    }
    cases["empty"][0].write_bytes(b"")
    cases["random"][0].write_bytes(np.random.default_rng(4).bytes(3000))
    cases["text"][0].write_text("trace,twt\n1,2\n")
    cases["truncated"][0].write_bytes(good.read_bytes())
    os.truncate(cases["truncated"][0], good.stat().st_size // 2)
    xr.Dataset({"other": (("trace", "twt"), _data(2, 4))}).to_netcdf(
        cases["no_variable"][0], engine="h5netcdf")
    return cases


def test_every_bad_file_raises_input_file_error(tmp_path, good):
    for label, (path, fragment) in _bad_cases(tmp_path, good).items():
        for reader in (netcdf_line_info,
                       lambda p: read_line_netcdf(p, sample_interval_ns=0.1)):
            with pytest.raises(InputFileError, match=fragment) as exc:
                reader(path)
            assert exc.value.where == str(path), label
            assert "\n" not in str(exc.value), label


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(cut=st.floats(0.0, 1.0, exclude_max=True))
def test_any_truncation_raises_input_file_error(good, cut):
    data = good.read_bytes()
    path = good.with_name("cut.nc")
    path.write_bytes(data[: int(cut * len(data))])
    with pytest.raises(InputFileError):
        read_line_netcdf(path, sample_interval_ns=0.1)


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=arrays(np.float32, st.tuples(st.integers(1, 5), st.integers(1, 8)),
                   # within 1.8e19: the reader zeroes larger samples (their squares overflow)
                   elements=st.floats(-2.0**63, 2.0**63, width=32)),
       interval=st.floats(0.001, 20.0), twt0=st.floats(-50.0, 50.0))
def test_random_round_trip(tmp_path, data, interval, twt0):
    line = _line(data, interval_ns=interval, twt0=twt0)
    back = read_line_netcdf(write_line_netcdf(line, tmp_path / "r.nc", overwrite=True))
    np.testing.assert_array_equal(back.values, data)
    np.testing.assert_array_equal(back["twt"].values, line["twt"].values)
    assert back.attrs["sample_interval_ns"] == interval
    np.testing.assert_array_equal(back["header_x"].values, line["x"].values)


def test_times_stored_in_float32_are_taken_as_the_even_axis_they_round(tmp_path):
    # 0.1 ns steps to 51 ns rounded to float32 (IEEE 754 single: 24-bit significand) vary by
    # up to 4e-6 ns: still one even axis, not "uneven", and read back exactly even
    twt = (0.1 * np.arange(512)).astype(np.float32)
    assert np.ptp(np.diff(twt.astype(np.float64))) > 1e-6 * 0.1  # the rounding is there
    path = _raw(tmp_path / "f32.nc", (("trace", "twt"), _data(3, 512)),
                twt=("twt", twt, {"units": "ns"}))
    line = read_line_netcdf(path)
    np.testing.assert_allclose(line["twt"].values, 0.1 * np.arange(512), rtol=0, atol=2e-6)
    assert np.ptp(np.diff(line["twt"].values)) < 1e-12
    assert line.attrs["sample_interval_ns"] == pytest.approx(0.1, rel=1e-6)


@pytest.mark.parametrize("fmt", ["NETCDF3_CLASSIC", "NETCDF3_64BIT"])
def test_classic_netcdf_lines_read_as_their_netcdf4_twins(tmp_path, good, fmt):
    # xarray writes classic NetCDF where netCDF4 is missing; SciPy reads formats 1 and 2
    # (magic CDF\x01, CDF\x02: the NetCDF classic format specification, Unidata)
    with xr.open_dataset(good, engine="h5netcdf") as ds:
        ds.load().to_netcdf(tmp_path / "classic.nc", format=fmt, engine="scipy")
    assert (tmp_path / "classic.nc").read_bytes()[:4] in (b"CDF\x01", b"CDF\x02")
    back, twin = read_line_netcdf(tmp_path / "classic.nc"), read_line_netcdf(good)
    np.testing.assert_array_equal(back.values, twin.values)
    np.testing.assert_array_equal(back["twt"].values, twin["twt"].values)
    assert back.attrs["sample_interval_ns"] == twin.attrs["sample_interval_ns"]
