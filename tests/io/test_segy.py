"""Tests of slicer.io.segy: SEG-Y reading and writing, checked against segyio as the
independent reader/writer.

Byte positions are 1-based as printed in SEG-Y rev 1 (Norris & Faichney eds., 2002, "SEG Y rev 1
Data Exchange format") and SEG-Y rev 2.0 (Hagelund & Levin eds., 2017, "SEG-Y_r2.0: SEG-Y
revision 2.0 Data Exchange format"), abbreviated below as rev 1 and rev 2.0.
"""

from __future__ import annotations

import os
import struct
import warnings
from pathlib import Path

import numpy as np
import pytest
import segyio
import xarray as xr
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from slicer.core.errors import InputFileError, OutputError, SettingsError, SlicerWarning
from slicer.io.segy import read_segy_line, segy_line_info, write_segy_line

TF = segyio.TraceField
BF = segyio.BinField
X0, Y0 = 512345.67, 4649776.12


def _line(data, *, interval_ns=0.1, xy=True, name="L7"):
    data = np.asarray(data, dtype=np.float32)
    n_traces, n_samples = data.shape
    coords = {"twt": ("twt", interval_ns * np.arange(n_samples)), "trace": np.arange(n_traces)}
    if xy:
        coords["x"] = ("trace", X0 + 0.05 * np.arange(n_traces))
        coords["y"] = ("trace", Y0 + 0.02 * np.arange(n_traces))
    return xr.DataArray(data, dims=("trace", "twt"), coords=coords, name="amplitude",
                        attrs={"line": name, "sample_interval_ns": interval_ns})


def _data(n_traces=6, n_samples=9, seed=0):
    return np.random.default_rng(seed).normal(size=(n_traces, n_samples)).astype(np.float32)


def _patch(path, byte, code, value):
    """Overwrite a big-endian binary header field at 1-based ``byte``."""
    with open(path, "r+b") as fh:
        fh.seek(byte - 1)
        fh.write(struct.pack(">" + code, value))


def _bytes_at(path, byte, n):
    with open(path, "rb") as fh:
        fh.seek(byte - 1)
        return fh.read(n)


def _plain_segyio(path, data, *, headers=None, binary=None, fmt=5):
    """A file written by segyio alone (rev 0 unless ``binary`` says otherwise)."""
    spec = segyio.spec()
    spec.format = fmt
    spec.samples = np.zeros(data.shape[1])  # segyio then stores interval 0
    spec.tracecount = data.shape[0]
    with segyio.create(str(path), spec) as f:
        f.trace = np.asarray(data, dtype=np.float32)
        for i in range(data.shape[0]):
            if headers is not None:
                f.header[i] = {key: int(np.asarray(v)[i]) for key, v in headers.items()}
        if binary:
            f.bin.update(binary)
    return Path(path)


@pytest.fixture
def good(tmp_path):
    return write_segy_line(_line(_data()), tmp_path / "good.sgy")


# --- round trips and the written layout ------------------------------------------------------


@pytest.mark.parametrize("code", [1, 2, 3, 5])
def test_round_trip_each_format(tmp_path, code):
    data = _data()
    path = write_segy_line(_line(data), tmp_path / f"f{code}.sgy", format_code=code)
    back = read_segy_line(path)
    peak = np.abs(data).max()
    if code == 5:
        np.testing.assert_array_equal(back.values, data)
    elif code == 1:
        # IBM hexadecimal float: 24-bit fraction, base-16 exponent, so the relative spacing is at
        # most 16**-5 = 2**-20 (IBM System/360 Principles of Operation, 1964, "Floating-point
        # data format"; SEG-Y rev 1 section 3, format code 1).
        np.testing.assert_allclose(back.values, data, rtol=2.0**-20, atol=0)
    else:
        # Integer formats: the peak maps to the top of the range, every sample rounds to the
        # nearest step of peak / top (common practice for fixed-point export).
        top = np.iinfo(np.int16 if code == 3 else np.int32).max
        assert np.abs(back.values).max() == pytest.approx(top, rel=1e-7)
        np.testing.assert_allclose(back.values * (peak / top), data, rtol=0,
                                   atol=0.5 * peak / top + 1e-7 * peak)
    assert back.dtype == np.float32
    assert segy_line_info(path).format == {1: "segy-ibm", 2: "segy-int4", 3: "segy-int2",
                                           5: "segy-ieee"}[code]
    with segyio.open(str(path), ignore_geometry=True) as f:
        # segyio's own decoding of the sample format code (rev 1 binary header 3225-3226).
        assert f.bin[BF.Format] == code
        np.testing.assert_allclose(f.trace.raw[:].astype(np.float32), back.values, rtol=0)


def test_layout_read_by_segyio_and_struct(tmp_path):
    data = _data(4, 11)
    path = write_segy_line(_line(data, interval_ns=0.25), tmp_path / "l.sgy")
    with segyio.open(str(path), ignore_geometry=True) as f:
        assert f.tracecount == 4
        assert f.bin[BF.Samples] == 11                      # rev 1 bytes 3221-3222
        assert f.bin[BF.SEGYRevision] == 2                  # rev 2.0 byte 3501
        assert f.bin[BF.SEGYRevisionMinor] == 0             # rev 2.0 byte 3502
        assert f.bin[BF.Interval] == 0                      # rev 1 bytes 3217-3218
        assert f.bin[BF.MeasurementSystem] == 1             # rev 1 bytes 3255-3256: metres
        for i in range(4):
            h = f.header[i]
            assert h[TF.TRACE_SEQUENCE_LINE] == i + 1
            assert h[TF.TRACE_SAMPLE_COUNT] == 11
            assert h[TF.CoordinateUnits] == 1               # rev 1 bytes 89-90: length
            # Rev 1 bytes 71-72 scalar: negative divides. Worked example of check-values.md:
            # 512345.67 stored as 51234567 with scalar -100.
            assert h[TF.SourceGroupScalar] == -100
            expect_x = round((X0 + 0.05 * i) * 100)
            expect_y = round((Y0 + 0.02 * i) * 100)
            for fx, fy in ((TF.CDP_X, TF.CDP_Y), (TF.SourceX, TF.SourceY),
                           (TF.GroupX, TF.GroupY)):
                assert (h[fx], h[fy]) == (expect_x, expect_y)
        assert f.header[0][TF.CDP_X] == 51234567
        np.testing.assert_array_equal(f.trace.raw[:], data)
    # Rev 2.0 extended sample interval, bytes 3273-3280, IEEE double in microseconds, read
    # independently of slicer with struct.
    (interval_us,) = struct.unpack(">d", _bytes_at(path, 3273, 8))
    assert interval_us == pytest.approx(0.25e-3, rel=1e-15)
    assert _bytes_at(path, 3501, 2) == b"\x02\x00"
    assert _bytes_at(path, 3217, 2) == b"\x00\x00"
    assert struct.unpack(">I", _bytes_at(path, 3297, 4))[0] == 16909060  # rev 2.0 byte order
    assert struct.unpack(">Q", _bytes_at(path, 3513, 8))[0] == 4  # rev 2.0 trace count
    # Rev 1 section 3: the textual header is EBCDIC (code page 500 here).
    assert "C39 SEG-Y_REV2.0" in _bytes_at(path, 1, 3200).decode("cp500")


def test_line_data_model(good):
    line = read_segy_line(good)
    assert line.name == "amplitude" and line.dims == ("trace", "twt")
    assert line.dtype == np.float32 and line["twt"].dtype == np.float64
    assert line["twt"].attrs["units"] == "ns" and line["twt"].values[0] == 0.0
    np.testing.assert_allclose(np.diff(line["twt"].values), 0.1, rtol=1e-12)
    np.testing.assert_array_equal(line["trace"].values, np.arange(6))
    assert {"x", "y", "distance"}.isdisjoint(line.coords)
    assert set(line.attrs) == {"line", "source", "sample_interval_ns", "time_zero_ns",
                               "history", "units"}
    assert (line.attrs["line"], line.attrs["source"]) == ("good", str(good))
    assert line.attrs["sample_interval_ns"] == 0.1 and line.attrs["time_zero_ns"] == 0.0
    assert line.attrs["history"] == "" and isinstance(line.attrs["units"], str)
    assert read_segy_line(good, name="north").attrs["line"] == "north"
    assert line["header_x"].dtype == np.float64 and line["header_x"].attrs["units"] == "m"
    # 51234567 with scalar -100 is 512345.67 m (rev 1 bytes 71-72, worked example).
    assert line["header_x"].values[0] == 512345.67
    np.testing.assert_allclose(line["header_y"].values, Y0 + 0.02 * np.arange(6), atol=5e-3)


# --- coordinates in files written by segyio alone --------------------------------------------


@pytest.mark.parametrize(("scalar", "stored", "metres"), [
    (-100, 51234567, 512345.67),   # rev 1: negative divides
    (10, 51234, 512340.0),         # rev 1: positive multiplies
    (0, 512345, 512345.0),         # rev 2.0: 0 means 1
    (1, 512345, 512345.0),
])
def test_coordinate_scalar_semantics(tmp_path, scalar, stored, metres):
    n = 3
    headers = {TF.SourceGroupScalar: [scalar] * n, TF.CDP_X: [stored] * n,
               TF.CDP_Y: [stored + 1] * n, TF.SourceX: [7] * n, TF.SourceY: [7] * n}
    path = _plain_segyio(tmp_path / "c.sgy", _data(n, 5), headers=headers)
    line = read_segy_line(path, sample_interval_ns=0.1)
    np.testing.assert_allclose(line["header_x"].values, metres, rtol=1e-15)


def test_source_xy_used_when_cdp_is_zero(tmp_path):
    headers = {TF.SourceGroupScalar: [-100] * 2, TF.SourceX: [100, 250], TF.SourceY: [0, 5]}
    line = read_segy_line(_plain_segyio(tmp_path / "s.sgy", _data(2, 4), headers=headers),
                          sample_interval_ns=0.1)
    np.testing.assert_allclose(line["header_x"].values, [1.0, 2.5])
    np.testing.assert_allclose(line["header_y"].values, [0.0, 0.05])


def test_no_coordinates_no_header_coords(tmp_path):
    line = read_segy_line(write_segy_line(_line(_data(), xy=False), tmp_path / "n.sgy"))
    assert "header_x" not in line.coords and "header_y" not in line.coords


def test_feet_and_angular_coordinates(tmp_path):
    headers = {TF.SourceGroupScalar: [1, 1], TF.CDP_X: [1000, 2000], TF.CDP_Y: [10, 10]}
    feet = _plain_segyio(tmp_path / "ft.sgy", _data(2, 4), headers=headers,
                         binary={BF.MeasurementSystem: 2})
    with pytest.warns(SlicerWarning, match="feet"):
        line = read_segy_line(feet, sample_interval_ns=0.1)
    # International foot = 0.3048 m exactly (International Yard and Pound Agreement, 1959).
    np.testing.assert_allclose(line["header_x"].values, [304.8, 609.6], rtol=1e-15)
    angular = _plain_segyio(tmp_path / "deg.sgy", _data(2, 4),
                            headers={**headers, TF.CoordinateUnits: [3, 3]})
    with pytest.warns(SlicerWarning, match="not lengths"):
        line = read_segy_line(angular, sample_interval_ns=0.1)
    assert "header_x" not in line.coords


# --- sample interval rules ----------------------------------------------------------------


def test_header_interval_used(tmp_path):
    path = write_segy_line(_line(_data(), interval_ns=0.0625), tmp_path / "h.sgy")
    assert segy_line_info(path).sample_interval_ns == 0.0625
    with warnings.catch_warnings():
        warnings.simplefilter("error", SlicerWarning)
        line = read_segy_line(path)
        same = read_segy_line(path, sample_interval_ns=0.0625 * 1.0009)  # within 0.1 %
    assert line.attrs["sample_interval_ns"] == 0.0625
    assert line["twt"].values[-1] == pytest.approx(0.0625 * 8)
    assert same.attrs["sample_interval_ns"] == pytest.approx(0.0625 * 1.0009)


def test_user_interval_wins_with_warning(good):
    with pytest.warns(SlicerWarning, match=r"good\.sgy.*0\.1 ns.*0\.2 ns"):
        line = read_segy_line(good, sample_interval_ns=0.2)
    assert line.attrs["sample_interval_ns"] == 0.2
    assert line["twt"].values[1] == 0.2


def test_segyio_default_file_needs_interval(tmp_path):
    path = _plain_segyio(tmp_path / "rev0.sgy", _data(3, 5))
    with segyio.open(str(path), ignore_geometry=True) as f:
        # segyio stores int(us) = 0 for a sub-microsecond interval and then falls back to
        # 4000 us (stack-notes trap 8): exactly the value slicer must never take silently.
        assert f.bin[BF.Interval] == 0
        assert segyio.tools.dt(f, fallback_dt=4000.0) == 4000.0
    assert segy_line_info(path).sample_interval_ns is None
    with pytest.raises(SettingsError, match="rev0.sgy.*no usable radar sample interval") as exc:
        read_segy_line(path)
    assert exc.value.where == "--sample-interval"
    assert read_segy_line(path, sample_interval_ns=0.1).attrs["sample_interval_ns"] == 0.1


@pytest.mark.parametrize(("revision", "interval_us"), [
    (1, 1e-4),      # a plausible value, but not a rev 2 file: untrusted
    (2, 4000.0),    # segyio's fallback, 4e6 ns
    (2, 0.0),
    (2, 1e-7),      # 1e-4 ns, below the radar range
    (2, float("nan")),
])
def test_untrusted_extended_interval(good, revision, interval_us):
    _patch(good, 3501, "B", revision)
    _patch(good, 3273, "d", interval_us)
    assert segy_line_info(good).sample_interval_ns is None
    with pytest.raises(SettingsError):
        read_segy_line(good)


@pytest.mark.parametrize("bad", [0.0, -0.1, float("nan"), float("inf")])
def test_bad_user_interval(good, bad):
    with pytest.raises(SettingsError) as exc:
        read_segy_line(good, sample_interval_ns=bad)
    assert exc.value.where == "--sample-interval"


# --- tolerated oddities and bad files -------------------------------------------------------


def test_nan_and_inf_samples_zeroed(tmp_path):
    data = _data()
    data[1, 2], data[3, 0], data[5, 8] = np.nan, np.inf, -np.inf
    path = write_segy_line(_line(data), tmp_path / "nan.sgy")
    with pytest.warns(SlicerWarning, match=r"nan\.sgy: 3 NaN"):
        line = read_segy_line(path)
    finite = np.isfinite(data)
    np.testing.assert_array_equal(line.values[~finite], 0.0)
    np.testing.assert_array_equal(line.values[finite], data[finite])


def _bad_file_cases(tmp_path, good):
    size = good.stat().st_size
    trace_bytes = 240 + 9 * 4
    cases = {"missing": tmp_path / "missing.sgy", "empty": tmp_path / "empty.sgy",
             "random": tmp_path / "random.sgy", "folder": tmp_path / "dir.sgy"}
    cases["empty"].write_bytes(b"")
    cases["random"].write_bytes(np.random.default_rng(3).bytes(5000))
    cases["folder"].mkdir()
    for label, length in (("short", 1000), ("headers_only", 3600), ("cut_sample", size - 1),
                          ("cut_trace", size - trace_bytes), ("cut_header", 3600 + 100)):
        cases[label] = tmp_path / f"{label}.sgy"
        cases[label].write_bytes(good.read_bytes())
        os.truncate(cases[label], length)
    for label, byte, code, value in (("zero_samples", 3221, "H", 0),
                                     ("format_4", 3225, "h", 4), ("format_99", 3225, "h", 99),
                                     ("little_endian", 3297, "I", 0x04030201),
                                     ("extra_headers", 3507, "i", 1),
                                     ("text_headers", 3505, "h", 3)):
        cases[label] = tmp_path / f"{label}.sgy"
        cases[label].write_bytes(good.read_bytes())
        _patch(cases[label], byte, code, value)
    return cases


_BAD_FILE_MESSAGES = {
    "missing": "not found", "empty": "empty", "random": "format code", "folder": "regular",
    "short": "shorter than the 3600-byte", "headers_only": "no traces",
    "cut_sample": "truncated", "cut_trace": "states 6 traces", "cut_header": "truncated",
    "zero_samples": "0 samples", "format_4": "format code 4", "format_99": "format code 99",
    "little_endian": "little-endian", "extra_headers": "additional trace headers",
    "text_headers": "extended textual headers",
}


def test_every_bad_file_raises_input_file_error(tmp_path, good):
    cases = _bad_file_cases(tmp_path, good)
    assert set(cases) == set(_BAD_FILE_MESSAGES)
    for label, path in cases.items():
        for reader in (segy_line_info,
                       lambda p: read_segy_line(p, sample_interval_ns=0.1)):
            with pytest.raises(InputFileError, match=_BAD_FILE_MESSAGES[label]) as exc:
                reader(path)
            assert exc.value.where == str(path), label
            assert "\n" not in str(exc.value), label


def test_plain_segyio_truncation_detected(tmp_path):
    # Without a rev 2 trace count only partial traces betray truncation.
    path = _plain_segyio(tmp_path / "p.sgy", _data(3, 5))
    os.truncate(path, path.stat().st_size - 7)
    with pytest.raises(InputFileError, match="truncated"):
        read_segy_line(path, sample_interval_ns=0.1)


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(cut=st.floats(0.0, 1.0, exclude_max=True))
def test_any_truncation_raises_input_file_error(good, cut):
    data = good.read_bytes()
    path = good.with_name("cut.sgy")
    path.write_bytes(data[: int(cut * len(data))])
    with pytest.raises(InputFileError):
        segy_line_info(path)
    with pytest.raises(InputFileError):
        read_segy_line(path, sample_interval_ns=0.1)


@settings(max_examples=30, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(garbage=st.binary(min_size=0, max_size=4200))
def test_garbage_only_raises_input_file_error(tmp_path, garbage):
    path = tmp_path / "garbage.sgy"
    path.write_bytes(garbage)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SlicerWarning)
        try:
            line = read_segy_line(path, sample_interval_ns=0.1)
        except InputFileError as exc:
            assert exc.where == str(path)
        else:  # a byte string that happens to be a valid SEG-Y file
            assert line.dims == ("trace", "twt")


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=arrays(np.float32, st.tuples(st.integers(1, 5), st.integers(1, 8)),
                   # within 1.8e19: the reader zeroes larger samples (their squares overflow)
                   elements=st.floats(-2.0**63, 2.0**63, width=32)),
       interval=st.floats(0.001, 20.0),
       offset=st.floats(-1e5, 1e5))
def test_random_round_trip(tmp_path, data, interval, offset):
    line = _line(data, interval_ns=interval)
    line = line.assign_coords(x=line["x"] + offset, y=line["y"] - offset)
    back = read_segy_line(write_segy_line(line, tmp_path / "r.sgy", overwrite=True))
    np.testing.assert_array_equal(back.values, data)
    assert back.attrs["sample_interval_ns"] == pytest.approx(interval, rel=1e-11)
    # Centimetre storage (scalar -100): each coordinate within half a centimetre, plus the
    # float64 rounding of a coordinate of millions of metres at exactly half a centimetre
    # (hypothesis found 0.005 + 1e-10 m)
    half = 5e-3 + 1e-8
    np.testing.assert_allclose(back["header_x"].values, line["x"].values, rtol=0, atol=half)
    np.testing.assert_allclose(back["header_y"].values, line["y"].values, rtol=0, atol=half)


# --- writer refusals --------------------------------------------------------------------


def test_writer_refuses_bad_options_and_lines(tmp_path):
    line = _line(_data())
    out = tmp_path / "w.sgy"
    with pytest.raises(SettingsError) as exc:
        write_segy_line(line, out, format_code=4)
    assert exc.value.where == "format_code"
    for scalar in (0, 1.5, True, 40000):
        with pytest.raises(SettingsError):
            write_segy_line(line, out, coordinate_scalar=scalar)
    # Stack-notes trap 8: scalar -1000 puts a 4.6e6 m northing at 4.6e9 > 2**31 - 1.
    with pytest.raises(OutputError, match="overflow"):
        write_segy_line(line, out, coordinate_scalar=-1000)
    nan_line = line.copy(data=np.where(np.eye(6, 9, dtype=bool), np.nan, line.values))
    with pytest.raises(OutputError, match="integers"):
        write_segy_line(nan_line, out, format_code=3)
    with pytest.raises(OutputError):
        write_segy_line(line.isel(twt=0), out)
    with pytest.raises(OutputError):
        write_segy_line(line.assign_coords(x=line["x"].where(line["trace"] != 2)), out)
    assert list(tmp_path.iterdir()) == []  # nothing, not even a temporary file, is left


def test_transposed_line_and_header_coords_are_written(tmp_path):
    data = _data(3, 4)
    first = read_segy_line(write_segy_line(_line(data), tmp_path / "a.sgy"))
    # An unplaced line keeps its header coordinates when copied; dims order does not matter.
    copy = read_segy_line(write_segy_line(first.transpose("twt", "trace"), tmp_path / "b.sgy"))
    np.testing.assert_array_equal(copy.values, data)
    np.testing.assert_array_equal(copy["header_x"].values, first["header_x"].values)


def test_writer_warns_about_implausible_interval(tmp_path):
    with pytest.warns(SlicerWarning, match="outside the radar range"):
        path = write_segy_line(_line(_data(), interval_ns=50.0), tmp_path / "slow.sgy")
    (interval_us,) = struct.unpack(">d", _bytes_at(path, 3273, 8))
    assert interval_us == 0.05  # stored all the same (rev 2.0 bytes 3273-3280)
    assert segy_line_info(path).sample_interval_ns is None
    assert read_segy_line(path, sample_interval_ns=50.0).attrs["sample_interval_ns"] == 50.0


@pytest.mark.parametrize("revision", [1, 2])
def test_little_endian_files_read_as_their_big_endian_twins(tmp_path, revision):
    # some recorders write SEG-Y little-endian: rev 2 says so in its byte-order constant
    # (bytes 3297-3300), rev 1 only by a format code that reads as one little-endian. segyio,
    # told the byte order, is the reference reader here
    rng = np.random.default_rng(11)
    data = rng.normal(size=(9, 40)).astype(np.float32)
    path = tmp_path / f"le{revision}.sgy"
    spec = segyio.spec()
    spec.format, spec.samples, spec.tracecount, spec.endian = 5, range(40), 9, "little"
    with segyio.create(str(path), spec) as f:
        f.trace = list(data)
        for i in range(9):
            f.header[i] = {segyio.TraceField.CDP_X: 51200000 + 5 * i,
                           segyio.TraceField.CDP_Y: 465000000,
                           segyio.TraceField.SourceGroupScalar: -100}
        f.bin.update({segyio.BinField.SEGYRevision: revision << 8})
    if revision == 2:
        with open(path, "r+b") as fh:  # the rev 2.0 byte-order constant, little-endian
            fh.seek(3296)
            fh.write(struct.pack("<I", 0x01020304))
            fh.seek(3500)
            fh.write(bytes([2, 0]))
            fh.seek(3272)
            fh.write(struct.pack("<d", 1e-4))  # 0.1 ns in microseconds
    with segyio.open(str(path), ignore_geometry=True, endian="little") as f:
        reference = np.stack([f.trace[i] for i in range(9)])
    line = read_segy_line(path, sample_interval_ns=None if revision == 2 else 0.1)
    np.testing.assert_array_equal(line.values, reference)
    np.testing.assert_array_equal(line.values, data)
    np.testing.assert_allclose(line["header_x"].values, 512000.0 + 0.05 * np.arange(9))
    assert line.attrs["sample_interval_ns"] == pytest.approx(0.1)
