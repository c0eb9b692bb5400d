"""Tests of slicer.outputs.cube: the cube data model, its transform and CRS, and the CF NetCDF
file."""

from __future__ import annotations

import builtins
import errno
import io
import os
import subprocess
import sys
import tracemalloc
import warnings
from pathlib import Path

import dask.array as darray
import numpy as np
import pyproj
import pytest
import rasterio
import rioxarray  # noqa: F401  (registers the .rio accessor)
import xarray as xr
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import InputFileError, OutputError, SettingsError, SlicerError
from slicer.outputs.cube import (
    check_tile,
    cube_crs,
    cube_transform,
    empty_cube,
    new_cube,
    read_cube_netcdf,
    write_cube_netcdf,
)

# Worked example of /work/shared/reference/check-values.md (OGC 19-008r4, GeoTIFF 1.1):
# EPSG:32633, upper-left corner (500000, 4649776), 0.05 m cells.
WEST, NORTH, CELL, EPSG = 500000.0, 4649776.0, 0.05, 32633


def make_cube(n=3, ny=4, nx=5, *, crs=f"EPSG:{EPSG}", axis="depth", velocity=0.1, seed=0):
    rng = np.random.default_rng(seed)
    data = rng.random((n, ny, nx)).astype(np.float32)
    data[0, 0, 0] = np.nan
    step = 0.1 if axis == "depth" else 2.0
    tops = np.arange(n) * step
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs=crs, top=tops,
                    bottom=tops + step, axis=axis, velocity=velocity,
                    processing=["dewow", "background removal", "envelope"])


def test_coordinates_are_cell_centres_of_a_north_up_grid():
    cube = make_cube()
    assert cube.dims == ("depth", "y", "x")
    assert cube.name == "envelope"
    assert cube.dtype == np.float32
    # OGC 19-008r4 (GeoTIFF 1.1), PixelIsArea; check-values.md worked example: centre of pixel
    # (i, j) = (500000 + 0.05 (i + 1/2), 4649776 - 0.05 (j + 1/2)).
    i, j = np.arange(5), np.arange(4)
    np.testing.assert_allclose(cube.x.values, 500000 + 0.05 * (i + 0.5), rtol=0, atol=1e-9)
    np.testing.assert_allclose(cube.y.values, 4649776 - 0.05 * (j + 0.5), rtol=0, atol=1e-9)
    assert np.all(np.diff(cube.y.values) < 0)
    for name in ("x", "y", "depth", "depth_top", "depth_bottom"):
        assert cube[name].dtype == np.float64
        assert cube[name].attrs["units"] == "m"
    np.testing.assert_allclose(cube.depth.values,
                               (cube.depth_top.values + cube.depth_bottom.values) / 2)
    assert cube.depth_top.dims == cube.depth_bottom.dims == ("depth",)
    assert cube.depth.attrs["positive"] == "down"
    assert cube.attrs["cell_size"] == CELL
    assert (cube.attrs["west"], cube.attrs["north"]) == (WEST, NORTH)
    assert cube.attrs["velocity"] == 0.1
    assert cube.attrs["processing"] == "dewow; background removal; envelope"
    assert cube.attrs["grid_mapping"] == "spatial_ref"
    assert "units" in cube.attrs


def test_time_slices_use_ns():
    cube = make_cube(axis="twt", velocity=None)
    assert cube.dims == ("twt", "y", "x")
    for name in ("twt", "twt_top", "twt_bottom"):
        assert cube[name].attrs["units"] == "ns"
    assert "velocity" not in cube.attrs


def test_spatial_ref_is_laid_out_as_rioxarray_writes_it():
    cube = make_cube()
    transform = cube_transform(cube)
    # Reference: rioxarray's own write_crs + write_transform on the same grid.
    ref = (xr.DataArray(cube.values, dims=cube.dims, coords={"x": cube.x, "y": cube.y})
           .rio.write_crs(EPSG).rio.write_transform(transform))
    ours, theirs = cube.spatial_ref.attrs, ref.spatial_ref.attrs
    # plus the long_name compliance-checker asks for at cf:1.8 (CF 1.8 section 3.3)
    assert set(ours) == set(theirs) | {"long_name"}
    assert ours["GeoTransform"] == theirs["GeoTransform"]
    for key in ("grid_mapping_name", "longitude_of_central_meridian", "false_easting",
                "scale_factor_at_central_meridian", "semi_major_axis", "inverse_flattening"):
        assert ours[key] == theirs[key]
    for key in ("crs_wkt", "spatial_ref"):
        assert pyproj.CRS.from_wkt(ours[key]) == pyproj.CRS.from_wkt(theirs[key])
    # rioxarray reads our cube's CRS and exact transform back.
    assert cube.rio.crs.to_epsg() == EPSG
    assert cube.rio.transform() == transform


def test_transform_is_exact_and_not_rebuilt_from_coordinates():
    cube = make_cube(nx=40)
    transform = cube_transform(cube)
    # check-values.md worked example (OGC 19-008r4): tiepoint (500000, 4649776), scale 0.05.
    assert transform == Affine(0.05, 0.0, 500000.0, 0.0, -0.05, 4649776.0)
    # stack-notes trap 4: the coordinate difference at UTM magnitudes is not exactly 0.05, so a
    # transform derived from it would drift; ours is built from the attrs.
    assert transform.a == CELL and transform.e == -CELL
    cols, rows = ~transform * (cube.x.values, np.full(40, cube.y.values[2]))
    np.testing.assert_allclose(cols, np.arange(40) + 0.5, atol=1e-6)
    np.testing.assert_allclose(rows, 2.5, atol=1e-6)


def test_crs_and_local_grid():
    assert cube_crs(make_cube()) == pyproj.CRS.from_epsg(EPSG)
    local = make_cube(crs=None)
    assert cube_crs(local) is None
    assert "spatial_ref" not in local.coords
    assert "grid_mapping" not in local.attrs
    assert cube_transform(local) == Affine(0.05, 0.0, 500000.0, 0.0, -0.05, 4649776.0)


GOOD = {"west": 0.0, "north": 10.0, "cell": 0.5, "crs": None, "top": [0.0, 0.1],
        "bottom": [0.1, 0.2]}


@pytest.mark.parametrize(("change", "where"), [
    ({"cell": 0.0}, "cell"),
    ({"cell": -0.5}, "cell"),
    ({"cell": float("nan")}, "cell"),
    ({"top": [0.1, 0.2], "bottom": [0.1, 0.3]}, "top/bottom"),
    ({"top": [0.0, 0.3], "bottom": [0.1, 0.2]}, "top/bottom"),
    ({"top": [0.0], "bottom": [0.1]}, "top/bottom"),
    ({"top": [0.1, 0.0], "bottom": [0.2, 0.1]}, "top/bottom"),
    ({"axis": "time"}, "axis"),
    ({"velocity": 0.31}, "velocity"),
    ({"velocity": 0.0}, "velocity"),
    ({"crs": "EPSG:0"}, "crs"),
    ({"west": float("inf")}, "west/north"),
])
def test_bad_settings_are_refused(change, where):
    with pytest.raises(SettingsError) as info:
        new_cube(np.zeros((2, 3, 4)), **{**GOOD, **change})
    assert isinstance(info.value, SlicerError)
    assert info.value.where == where
    assert str(info.value).startswith(where)


@pytest.mark.parametrize("shape", [(3, 4), (0, 3, 4), (2, 3, 4, 1)])
def test_bad_data_shape_is_refused(shape):
    with pytest.raises(SlicerError, match="data"):
        new_cube(np.zeros(shape), **GOOD)


@settings(max_examples=30, deadline=None)
@given(top=st.floats(0, 10), thickness=st.floats(-5, 0))
def test_window_without_thickness_is_refused(top, thickness):
    with pytest.raises(SettingsError, match="not above"):
        new_cube(np.zeros((1, 2, 2)), west=0, north=0, cell=1, crs=None, top=[top],
                 bottom=[top + thickness])


def test_netcdf_round_trip_is_identical(tmp_path):
    cube = make_cube()
    path = write_cube_netcdf(cube, tmp_path / "cube.nc")
    back = read_cube_netcdf(path)
    xr.testing.assert_identical(back, cube)
    assert back.dtype == np.float32
    assert np.isnan(back.values[0, 0, 0])
    # The file is closed: it can be removed and the data still used.
    path.unlink()
    assert float(back.sum()) == pytest.approx(float(cube.sum()))


def test_netcdf_follows_cf_1_8(tmp_path):
    path = write_cube_netcdf(make_cube(), tmp_path / "cube.nc")
    with xr.open_dataset(path, engine="h5netcdf") as ds:
        assert ds.attrs["Conventions"] == "CF-1.8"
        for key in ("title", "history", "source"):
            assert ds.attrs[key]
        da = ds["envelope"]
        # CF 1.8 section 5.6 / Appendix F: the grid_mapping attribute names the variable whose
        # attributes describe the CRS; pyproj.CRS.from_cf must give the CRS back.
        gm = ds[da.attrs["grid_mapping"]].attrs
        assert pyproj.CRS.from_cf(gm) == pyproj.CRS.from_epsg(EPSG)
        # UTM zone 33N (check-values.md, CF Appendix F transverse_mercator).
        assert gm["grid_mapping_name"] == "transverse_mercator"
        assert gm["longitude_of_central_meridian"] == 15
        assert gm["scale_factor_at_central_meridian"] == pytest.approx(0.9996)
        assert gm["false_easting"] == 500000
        assert "crs_wkt" in gm
        assert ds.x.attrs["standard_name"] == "projection_x_coordinate"
        assert ds.y.attrs["standard_name"] == "projection_y_coordinate"
        assert ds.x.attrs["units"] == ds.y.attrs["units"] == "m"
        assert ds.x.attrs["long_name"] and ds.y.attrs["long_name"]
        assert ds.depth.attrs["positive"] == "down"
        assert ds.depth.attrs["units"] == "m"
        # CF 1.8 section 7.1: cell boundaries in a (depth, 2) variable named by `bounds`.
        bnds = ds[ds.depth.attrs["bounds"]]
        assert bnds.dims[0] == "depth" and bnds.shape[1] == 2
        np.testing.assert_array_equal(bnds.values[:, 0], ds.depth_top.values)
        np.testing.assert_array_equal(bnds.values[:, 1], ds.depth_bottom.values)
        assert da.encoding["zlib"] is True
        assert np.isnan(da.encoding["_FillValue"])
        assert da.encoding["dtype"] == np.float32


def test_rioxarray_and_gdal_find_the_crs(tmp_path):
    cube = make_cube()
    path = write_cube_netcdf(cube, tmp_path / "cube.nc")
    with xr.open_dataset(path, engine="h5netcdf", decode_coords="all") as ds:
        assert ds["envelope"].rio.crs.to_epsg() == EPSG
        assert ds["envelope"].rio.transform() == cube_transform(cube)
    # Through GDAL's netCDF driver, independently of xarray's CF decoding.
    opened = rioxarray.open_rasterio(path, variable="envelope")
    try:
        assert opened.rio.crs.to_epsg() == EPSG
        # GDAL's netCDF driver derives the transform from the coordinate values, so at UTM
        # magnitudes it is only close (stack-notes trap 4); the GeoTIFFs carry it exactly.
        np.testing.assert_allclose(opened.rio.transform()[:6], cube_transform(cube)[:6],
                                   rtol=1e-9, atol=1e-6)
        assert opened["envelope"].shape == cube.shape
    finally:
        opened.close()


def test_rewriting_a_read_cube_keeps_grid_mapping(tmp_path):
    # stack-notes trap 6: an explicit encoding must not drop grid_mapping on the second write.
    first = read_cube_netcdf(write_cube_netcdf(make_cube(), tmp_path / "a.nc"))
    second = read_cube_netcdf(write_cube_netcdf(first.isel(depth=[0, 2]), tmp_path / "b.nc"))
    assert second.attrs["grid_mapping"] == "spatial_ref"
    assert cube_crs(second) == pyproj.CRS.from_epsg(EPSG)
    xr.testing.assert_identical(second, first.isel(depth=[0, 2]))


def test_grid_mapping_in_encoding_survives(tmp_path):
    cube = make_cube()
    cube.encoding["grid_mapping"] = cube.attrs.pop("grid_mapping")
    back = read_cube_netcdf(write_cube_netcdf(cube, tmp_path / "c.nc"))
    assert back.attrs["grid_mapping"] == "spatial_ref"


@pytest.mark.parametrize(("axis", "crs"), [("twt", f"EPSG:{EPSG}"), ("depth", None)])
def test_round_trip_of_time_slices_and_local_grids(tmp_path, axis, crs):
    cube = make_cube(axis=axis, crs=crs, velocity=None)
    back = read_cube_netcdf(write_cube_netcdf(cube, tmp_path / "c.nc"))
    xr.testing.assert_identical(back, cube)
    assert back[axis].dtype == np.float64  # "ns" must not be decoded to timedelta
    assert cube_crs(back) == (None if crs is None else pyproj.CRS.from_user_input(crs))


def test_failed_write_leaves_existing_file_intact(tmp_path, monkeypatch):
    path = tmp_path / "cube.nc"
    write_cube_netcdf(make_cube(seed=1), path)
    before = path.read_bytes()

    def broken(self, target, *args, **kwargs):
        target.write(b"\x89HDF\r\n partial")  # the open temporary file
        raise OSError("disk full")

    monkeypatch.setattr(xr.Dataset, "to_netcdf", broken)
    with pytest.raises(OutputError, match="disk full") as info:
        write_cube_netcdf(make_cube(seed=2), path, overwrite=True)
    assert info.value.where == str(path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cube.nc"]
    with pytest.raises(OutputError):
        write_cube_netcdf(make_cube(), tmp_path / "new.nc")
    assert not (tmp_path / "new.nc").exists()


class _FillingDisk(io.FileIO):
    """A file on a disk that fills after ``room`` bytes (errno 28, as the system says)."""

    room = 20_000

    def write(self, data):
        if self.tell() + len(data) > self.room:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return super().write(data)


def test_a_full_disk_ends_in_one_error_and_leaves_the_file_as_it_was(tmp_path, monkeypatch):
    import slicer.core.atomic
    path = tmp_path / "cube.nc"
    write_cube_netcdf(make_cube(seed=1), path)
    before = path.read_bytes()
    big = make_cube(6, 40, 50, seed=3)

    def on_a_small_disk(file, mode="r", *args, **kwargs):
        if "b" in mode and Path(file).parent == tmp_path:
            return _FillingDisk(file, mode.replace("b", ""))
        return builtins.open(file, mode, *args, **kwargs)

    monkeypatch.setattr(slicer.core.atomic, "open", on_a_small_disk, raising=False)
    with pytest.raises(OutputError, match="No space left on device") as info:
        write_cube_netcdf(big, path, overwrite=True)
    assert info.value.where == str(path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cube.nc"]
    # HDF5 saw no failed write: nothing of it is left open to be closed again (which crashed)
    import h5py
    assert [i for i in h5py.h5f.get_obj_ids(types=h5py.h5f.OBJ_FILE)
            if str(tmp_path) in i.name.decode()] == []
    monkeypatch.undo()
    back = read_cube_netcdf(write_cube_netcdf(big, path, overwrite=True))  # with room, it works
    np.testing.assert_array_equal(back.values, big.values)


def test_an_existing_file_is_replaced_only_when_asked(tmp_path):
    # nothing on disk is lost without an explicit flag (DEVELOPERS.md): a colleague's file of
    # the same name stays byte for byte
    path = tmp_path / "notes.nc"
    path.write_text("a colleague's notes")
    with pytest.raises(OutputError, match="already exists.*overwrite=True") as info:
        write_cube_netcdf(make_cube(seed=1), path)
    assert info.value.where == str(path)
    assert path.read_text() == "a colleague's notes"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.nc"]
    back = read_cube_netcdf(write_cube_netcdf(make_cube(seed=1), path, overwrite=True))
    np.testing.assert_array_equal(back.values, make_cube(seed=1).values)


def test_reading_a_non_netcdf_file_names_it(tmp_path):
    path = tmp_path / "notes.nc"
    path.write_text("not a NetCDF file")
    with pytest.raises(InputFileError) as info:
        read_cube_netcdf(path)
    assert info.value.where == str(path)


def test_missing_grid_attrs_are_reported():
    cube = make_cube()
    del cube.attrs["cell_size"]
    with pytest.raises(SettingsError, match="cell_size"):
        cube_transform(cube)


def test_empty_cube_is_lazy_nan_with_the_full_description():
    kwargs = {"west": WEST, "north": NORTH, "cell": CELL, "crs": f"EPSG:{EPSG}",
              "top": [0.0, 0.1], "bottom": [0.1, 0.2], "velocity": 0.1, "processing": "x"}
    # 2 x 20000 x 20000 float32 would be 3.2 GB: only a description is built.
    template = empty_cube((2, 20_000, 20_000), tile=512, **kwargs)
    assert isinstance(template.data, darray.Array)
    assert template.data.chunksize == (1, 512, 512)
    assert template.dtype == np.float32
    small = empty_cube((2, 3, 4), **kwargs)
    xr.testing.assert_identical(
        small.compute(), new_cube(np.full((2, 3, 4), np.nan), **kwargs))
    with pytest.raises(SettingsError, match="shape"):
        empty_cube((3, 4), **kwargs)
    with pytest.raises(SettingsError) as info:
        empty_cube((2, 3, 4), tile=0, **kwargs)
    assert info.value.where == "tile"


def test_new_cube_keeps_dask_data_lazy():
    def never(block):
        raise AssertionError("computed")

    lazy = darray.zeros((3, 4, 5), chunks=(1, 4, 5)).map_blocks(never, dtype=np.float64)
    cube = new_cube(lazy, west=WEST, north=NORTH, cell=CELL, crs=None, top=[0, 1, 2],
                    bottom=[1, 2, 3])
    assert isinstance(cube.data, darray.Array) and cube.dtype == np.float32
    assert cube.data.chunks == lazy.chunks


def test_check_tile():
    block = np.ones((3, 2, 2), dtype=np.float64)
    out = check_tile(block, (3, 4, 5), 2, 3)
    assert out.dtype == np.float32 and out.shape == (3, 2, 2)
    for args in [(block[:2], 0, 0), (block, 3, 0), (block, 0, 4), (block, -1, 0),
                 (block[0], 0, 0), (block[:, :0], 0, 0)]:
        with pytest.raises(SettingsError) as info:
            check_tile(args[0], (3, 4, 5), *args[1:])
        assert info.value.where == "tile"


def test_dask_cube_netcdf_equals_the_in_memory_one_and_is_written_by_chunks(tmp_path):
    values = np.random.default_rng(4).random((2, 1000, 1000)).astype(np.float32)
    values[:, :10, :10] = np.nan
    kwargs = {"west": WEST, "north": NORTH, "cell": CELL, "crs": f"EPSG:{EPSG}",
              "top": [0.0, 0.1], "bottom": [0.1, 0.2], "velocity": 0.1}
    cube = new_cube(values, **kwargs)
    lazy = new_cube(darray.from_array(values, chunks=(1, 250, 250)), **kwargs)
    write_cube_netcdf(cube.isel(depth=[0], y=slice(0, 5)), tmp_path / "warm.nc")
    tracemalloc.start()
    try:
        write_cube_netcdf(lazy, tmp_path / "lazy.nc")
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < values.nbytes / 4  # never the whole cube at once (8 MB here)
    write_cube_netcdf(cube, tmp_path / "memory.nc")
    xr.testing.assert_identical(read_cube_netcdf(tmp_path / "lazy.nc"),
                                read_cube_netcdf(tmp_path / "memory.nc"))
    with xr.open_dataset(tmp_path / "lazy.nc", engine="h5netcdf") as ds:
        assert ds["envelope"].encoding["chunksizes"] == (1, 250, 250)  # one per dask chunk



@pytest.mark.parametrize(("axis", "crs"), [("depth", f"EPSG:{EPSG}"), ("twt", f"EPSG:{EPSG}"),
                                           ("depth", None)], ids=["depth", "twt", "local"])
def test_netcdf_passes_the_cf_1_8_compliance_checker(tmp_path, cf_failures, axis, crs):
    path = write_cube_netcdf(make_cube(axis=axis, crs=crs, velocity=None), tmp_path / "c.nc")
    # IOOS compliance-checker, cf:1.8: no failure at any priority (high ones were the int64
    # spatial_ref, CF 1.8 section 2.2 as it reads it, and x/y of a local grid taken for
    # longitude/latitude, section 5.6).
    assert cf_failures(path) == []


def test_a_builds_netcdf_passes_the_cf_1_8_compliance_checker(tmp_path, cf_failures):
    from slicer.outputs.sink import write_cube

    # write_cube goes the way of a build: tiles into the Zarr store, NetCDF from the store.
    write_cube(make_cube(ny=40, nx=50), tmp_path / "out", progress=False, tile=16)
    assert cf_failures(tmp_path / "out" / "cube.nc") == []  # IOOS compliance-checker


@pytest.mark.parametrize("crs", [f"EPSG:{EPSG}", None], ids=["projected", "local"])
def test_cf_xarray_finds_axes_bounds_and_grid_mapping(tmp_path, crs):
    import cf_xarray  # noqa: F401  (registers the .cf accessor)

    path = write_cube_netcdf(make_cube(crs=crs), tmp_path / "c.nc")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with xr.open_dataset(path, engine="h5netcdf") as ds:
            # cf_xarray identifies each by the CF attributes (axis, standard_name, bounds,
            # grid_mapping), CF 1.8 sections 4, 5.6 and 7.1.
            assert ds.cf.axes == {"X": ["x"], "Y": ["y"], "Z": ["depth"]}
            assert ds.cf.bounds["depth"] == ["depth_bnds"]
            assert ds.cf["Z"].name == "depth"
            assert ds.cf.get_bounds("depth").dims == ("depth", "bnds")
            if crs is None:
                assert ds.cf.grid_mapping_names == {}
            else:
                assert ds.cf.grid_mapping_names == {"transverse_mercator": ["spatial_ref"]}
                assert ds["envelope"].cf.grid_mapping_name == "transverse_mercator"


def test_spatial_ref_is_int32_with_a_long_name_in_memory_and_in_the_file(tmp_path):
    import netCDF4

    cube = make_cube()
    assert cube.spatial_ref.dtype == np.int32
    assert cube.spatial_ref.attrs["long_name"]
    path = write_cube_netcdf(cube, tmp_path / "c.nc")
    with netCDF4.Dataset(path) as nc:  # the netCDF-C library's view of the file
        assert nc["spatial_ref"].dtype == np.int32
        assert nc["spatial_ref"].long_name == cube.spatial_ref.attrs["long_name"]
    assert read_cube_netcdf(path).spatial_ref.dtype == np.int32


def test_nodata_is_nan_for_rioxarray_and_in_the_file(tmp_path):
    cube = make_cube()
    # rioxarray: the encoded _FillValue is the nodata value, NaN for float32.
    assert np.isnan(cube.rio.nodata) and np.isnan(cube.rio.encoded_nodata)
    assert "_FillValue" not in cube.attrs  # in encoding only, as xarray decodes a file
    back = read_cube_netcdf(write_cube_netcdf(cube, tmp_path / "c.nc"))
    assert np.isnan(back.rio.nodata) and np.isnan(back.rio.encoded_nodata)
    assert np.isnan(back.encoding["_FillValue"])


def test_rio_works_without_the_caller_importing_rioxarray(tmp_path):
    # A fresh interpreter that never imports rioxarray itself.
    code = f"""
import sys
import numpy as np
from slicer.outputs.cube import new_cube
cube = new_cube(np.ones((2, 3, 4)), west={WEST}, north={NORTH}, cell={CELL},
                crs="EPSG:{EPSG}", top=[0.0, 0.1], bottom=[0.1, 0.2])
assert cube.rio.crs.to_epsg() == {EPSG}, cube.rio.crs
cube.rio.to_raster(sys.argv[1])
cube.rio.to_raster(sys.argv[2], recalc_transform=False)
"""
    tifs = [tmp_path / "recalc.tif", tmp_path / "kept.tif"]
    subprocess.run([sys.executable, "-c", code, *map(str, tifs)], check=True, timeout=120)
    exact = Affine(CELL, 0.0, WEST, 0.0, -CELL, NORTH)
    for tif in tifs:
        with rasterio.open(tif) as src:  # GDAL via rasterio reads what rioxarray wrote
            assert src.count == 2 and src.shape == (3, 4)
            assert src.crs.to_epsg() == EPSG
            assert np.isnan(src.nodata)
            assert (src.read() == 1).all()
            # rioxarray's default recomputes the transform from the coordinates, close at
            # UTM magnitudes (stack-notes trap 4); recalc_transform=False keeps the exact
            # GeoTransform of spatial_ref.
            np.testing.assert_allclose(src.transform[:6], exact[:6], rtol=1e-9, atol=1e-6)
            if tif.name == "kept.tif":
                assert src.transform == exact


def test_a_template_for_the_writers_leaves_rioxarray_unloaded():
    # a build's template (empty_cube, accessor=False) carries the same grid, windows and
    # nodata without importing rioxarray (0.1 s); a cube handed out has .rio (rioxarray's own
    # reading of the CRS and transform)
    import subprocess
    import sys
    code = (
        "import sys, numpy as np\nfrom slicer.outputs.cube import empty_cube, new_cube\n"
        "kw = dict(west=500000.0, north=4100000.0, cell=0.5, crs='EPSG:32633', "
        "top=np.array([0.0, 0.1]), bottom=np.array([0.1, 0.2]))\n"
        "t = empty_cube((2, 3, 4), tile=2, accessor=False, **kw)\n"
        "print('rioxarray' in sys.modules, t.encoding['_FillValue'], float(t.sel(depth=0.15)"
        "['depth_top']))\n"
        "c = new_cube(np.zeros((2, 3, 4)), **kw)\n"
        "print(c.rio.crs.to_epsg(), tuple(c.rio.transform())[:6])\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120, check=True)
    first, second = done.stdout.splitlines()
    assert first.split() == ["False", "nan", "0.1"]
    assert second == "32633 (0.5, 0.0, 500000.0, 0.0, -0.5, 4100000.0)"
