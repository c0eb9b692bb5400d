"""Tests of slicer.io.reading: dispatch of line files on their suffix, and agreement between
the two line formats."""

from __future__ import annotations

import shutil

import numpy as np
import pytest
import xarray as xr

from slicer.core.errors import InputFileError, SettingsError, SlicerWarning
from slicer.io.linefile import read_line_netcdf, write_line_netcdf
from slicer.io.reading import line_info, read_line
from slicer.io.segy import read_segy_line, write_segy_line


def _line(n_traces=4, n_samples=6, interval_ns=0.2):
    data = np.random.default_rng(2).normal(size=(n_traces, n_samples)).astype(np.float32)
    return xr.DataArray(
        data, dims=("trace", "twt"), name="amplitude",
        coords={"twt": ("twt", interval_ns * np.arange(n_samples)),
                "x": ("trace", 300000.0 + 0.1 * np.arange(n_traces)),
                "y": ("trace", 5000000.0 + np.zeros(n_traces))},
        attrs={"line": "L1", "sample_interval_ns": interval_ns})


@pytest.fixture
def files(tmp_path):
    line = _line()
    return {"segy": write_segy_line(line, tmp_path / "a.sgy"),
            "netcdf": write_line_netcdf(line, tmp_path / "a.nc")}


@pytest.mark.parametrize("suffix", [".sgy", ".segy", ".SGY", ".SeGy"])
def test_segy_suffixes_any_case(tmp_path, files, suffix):
    path = tmp_path / f"copy{suffix}"
    shutil.copy(files["segy"], path)
    xr.testing.assert_identical(read_line(path, name="n"), read_segy_line(path, name="n"))
    assert line_info(path).format == "segy-ieee"


def test_netcdf_dispatch(files):
    xr.testing.assert_identical(read_line(files["netcdf"]), read_line_netcdf(files["netcdf"]))
    assert line_info(files["netcdf"]).format == "netcdf"


@pytest.mark.parametrize("name", ["line.txt", "line", "line.nc.bak", "line.sgy.gz"])
def test_unknown_suffix_lists_accepted(tmp_path, files, name):
    path = tmp_path / name
    shutil.copy(files["segy"], path)
    for call in (read_line, line_info):
        with pytest.raises(InputFileError, match=r"\.sgy, \.segy, \.nc") as exc:
            call(path)
        assert exc.value.where == str(path)


def test_both_formats_give_the_same_line(files):
    segy, netcdf = read_line(files["segy"]), read_line(files["netcdf"])
    np.testing.assert_array_equal(segy.values, netcdf.values)
    np.testing.assert_array_equal(segy["twt"].values, netcdf["twt"].values)
    # SEG-Y keeps centimetres (coordinate scalar -100); NetCDF keeps the float64 values.
    np.testing.assert_allclose(segy["header_x"].values, netcdf["header_x"].values, atol=5e-3)
    assert set(segy.coords) == set(netcdf.coords) == {"trace", "twt", "header_x", "header_y"}
    assert set(segy.attrs) == set(netcdf.attrs)
    for key in ("line", "sample_interval_ns", "time_zero_ns", "history", "units"):
        assert segy.attrs[key] == netcdf.attrs[key], key
    assert segy.attrs["line"] == "a"  # the file stem by default (DEVELOPERS.md, Line)
    infos = [line_info(p) for p in files.values()]
    assert {(i.n_traces, i.n_samples, i.sample_interval_ns) for i in infos} == {(4, 6, 0.2)}


def test_interval_rules_through_dispatch(files):
    for path in files.values():
        with pytest.warns(SlicerWarning, match=path.name):
            assert read_line(path, sample_interval_ns=0.4).attrs["sample_interval_ns"] == 0.4
        with pytest.raises(SettingsError):
            read_line(path, sample_interval_ns=-1.0)


def test_missing_files_raise_input_file_error(tmp_path):
    for name in ("gone.sgy", "gone.nc"):
        with pytest.raises(InputFileError, match="not found"):
            read_line(tmp_path / name)


@pytest.mark.parametrize("kind", ["segy", "netcdf"])
def test_coordinates_are_read_only_when_asked(files, kind):
    # a line placed from its table needs no trace-header coordinates; leaving them out must
    # not touch the samples or the time axis
    full = read_line(files[kind])
    bare = read_line(files[kind], coordinates=False)
    assert "header_x" in full.coords and "header_y" in full.coords
    assert "header_x" not in bare.coords and "header_y" not in bare.coords
    xr.testing.assert_identical(bare, full.drop_vars(["header_x", "header_y"]))
    np.testing.assert_allclose(full["header_x"].values, _line()["x"].values, atol=0.005)


def test_memory_mapped_segy_reads_what_segyio_reads_plainly(files):
    # reference: segyio without memory mapping, trace by trace (segyio's own reader)
    import segyio
    with segyio.open(str(files["segy"]), "r", ignore_geometry=True) as f:
        plain = np.stack([np.asarray(f.trace[i]) for i in range(f.tracecount)])
        xs = np.asarray(f.attributes(segyio.TraceField.CDP_X)[:], dtype=float) / 100
    line = read_line(files["segy"])
    np.testing.assert_array_equal(line.values, plain)
    np.testing.assert_array_equal(line["header_x"].values, xs)  # scalar -100: centimetres


@pytest.mark.parametrize(("content", "digest"), [
    # FIPS 180-4 / its examples document (NIST): SHA-256 of "abc"
    (b"abc", "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"),
    # SHA-256 of the empty message (NIST's published value, quoted from memory)
    (b"", "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"),
])
def test_describe_file_gives_the_published_sha256(tmp_path, content, digest):
    from slicer.io.reading import describe_file
    path = tmp_path / "input.sgy"
    path.write_bytes(content)
    assert describe_file(path) == {"file": str(path), "bytes": len(content), "sha256": digest}


def test_describe_file_of_a_large_file_is_that_of_its_bytes(tmp_path):
    import hashlib

    from slicer.io.reading import describe_file
    data = np.random.default_rng(1).bytes(3 * 2**20 + 17)  # more than one read block
    path = tmp_path / "big.sgy"
    path.write_bytes(data)
    assert describe_file(path)["sha256"] == hashlib.sha256(data).hexdigest()
