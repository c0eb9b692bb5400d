"""Tests of slicer.outputs.netcdf_chunks: NetCDF chunks compressed by hand, read back through
netCDF4 and h5py."""

from __future__ import annotations

import h5py
import netCDF4
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import OutputError
from slicer.outputs.cube import new_cube, write_cube_netcdf
from slicer.outputs.netcdf_chunks import chunk_layout, compress_slice, store_chunks, write_skeleton


def _cube(n=3, ny=37, nx=52, seed=0):
    rng = np.random.default_rng(seed)
    data = rng.gamma(2.0, 1.0, (n, ny, nx)).astype(np.float32)
    data[:, :5, :7] = np.nan  # empty cells, as beyond the search radius
    return new_cube(data, west=500000.0, north=4600000.0, cell=0.1, crs="EPSG:32633",
                    top=0.1 * np.arange(n), bottom=0.1 * np.arange(1, n + 1), velocity=0.1)


def _by_hand(cube, path, tile):
    write_skeleton(cube, path, tile=tile)
    layout = chunk_layout(path, "envelope")
    with h5py.File(path, "r+") as f:
        for i in range(cube.shape[0]):
            store_chunks(f, layout, i, compress_slice(cube.values[i], layout))
    return layout


@settings(max_examples=8, deadline=None)
@given(ny=st.integers(1, 40), nx=st.integers(1, 40), tile=st.sampled_from([16, 32]))
def test_direct_chunks_read_back_exactly(tmp_path_factory, ny, nx, tile):
    # netCDF4-C (an independent reader of HDF5 filters) decodes every hand-made chunk,
    # edge chunks included, to the exact values
    cube = _cube(2, ny, nx)
    path = tmp_path_factory.mktemp("nc") / "c.nc"
    layout = _by_hand(cube, path, tile)
    assert layout.chunks == (1, min(tile, ny), min(tile, nx)) and layout.shuffle
    with netCDF4.Dataset(path) as ds:
        got = np.asarray(ds["envelope"][:].filled(np.nan))
        assert ds["envelope"].filters()["zlib"] and ds["envelope"].filters()["shuffle"]
    np.testing.assert_array_equal(got, cube.values)


def test_direct_file_matches_the_usual_writer(tmp_path):
    cube = _cube()
    _by_hand(cube, tmp_path / "direct.nc", 16)
    write_cube_netcdf(cube.chunk({"depth": 1, "y": 16, "x": 16}), tmp_path / "usual.nc")
    with netCDF4.Dataset(tmp_path / "direct.nc") as a, netCDF4.Dataset(tmp_path / "usual.nc") as b:
        np.testing.assert_array_equal(a["envelope"][:].filled(np.nan),
                                      b["envelope"][:].filled(np.nan))
        assert a["envelope"].chunking() == b["envelope"].chunking()
        assert a["envelope"].ncattrs() == b["envelope"].ncattrs()
        for var in ("x", "y", "depth", "depth_bnds"):
            np.testing.assert_array_equal(a[var][:], b[var][:])
    # the hand-made chunks are the same size as HDF5's own, to within a few bytes each
    size = (tmp_path / "direct.nc").stat().st_size / (tmp_path / "usual.nc").stat().st_size
    assert size == pytest.approx(1.0, abs=0.05)


def test_unknown_filters_are_refused(tmp_path):
    with h5py.File(tmp_path / "f.nc", "w") as f:
        f.create_dataset("envelope", shape=(2, 8, 8), chunks=(1, 8, 8), dtype="f4",
                         compression="gzip", fletcher32=True)
        f.create_dataset("plain", shape=(2, 8, 8), dtype="f4")
    for name in ("envelope", "plain"):
        with pytest.raises(OutputError, match="only chunked shuffle\\+deflate"):
            chunk_layout(tmp_path / "f.nc", name)


def test_direct_file_passes_the_cf_1_8_compliance_checker(tmp_path, cf_failures):
    # The NetCDF of a build with workers is made this way: IOOS compliance-checker, cf:1.8,
    # finds no failure at any priority.
    _by_hand(_cube(), tmp_path / "direct.nc", 16)
    assert cf_failures(tmp_path / "direct.nc") == []
    with netCDF4.Dataset(tmp_path / "direct.nc") as nc:  # netCDF-C's view
        assert nc["spatial_ref"].dtype == np.int32
        assert nc["depth"].bounds == "depth_bnds"  # CF 1.8 section 7.1
