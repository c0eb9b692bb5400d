"""Tests of slicer.outputs.zarr_store: the cube as a chunked Zarr store, read back by xarray and by
GDAL."""

from __future__ import annotations

import json
import warnings

import numpy as np
import pyproj
import pytest
import rasterio
import rioxarray  # noqa: F401  (registers the .rio accessor)
import xarray as xr
import zarr

from slicer.core.errors import InputFileError, OutputError, SettingsError
from slicer.outputs.cube import cube_transform, empty_cube, new_cube
from slicer.outputs.zarr_store import create_cube_store, open_cube_zarr, write_tile

# Worked example of /work/shared/reference/check-values.md (OGC 19-008r4, GeoTIFF 1.1):
# EPSG:32633, upper-left corner (500000, 4649776), 0.05 m cells.
WEST, NORTH, CELL, EPSG = 500000.0, 4649776.0, 0.05, 32633
TILE = 16


def grid(axis="depth", crs=f"EPSG:{EPSG}"):
    step = 0.1 if axis == "depth" else 2.5
    tops = np.arange(3) * step
    return {"west": WEST, "north": NORTH, "cell": CELL, "crs": crs, "top": tops,
            "bottom": tops + step, "axis": axis,
            "velocity": 0.1 if axis == "depth" else None,
            "processing": "dewow; background removal; envelope"}


def values(shape=(3, 40, 50), seed=0):
    data = np.random.default_rng(seed).random(shape).astype(np.float32)
    data[:, :3, :4] = np.nan
    return data


def build_store(path, data, *, tile=TILE, skip=(), **kwargs):
    """Write ``data`` tile by tile (tiles in ``skip`` left out); return the finished path."""
    g = grid(**kwargs)
    with create_cube_store(path, empty_cube(data.shape, tile=tile, **g), tile=tile) as store:
        for row0 in range(0, data.shape[1], tile):
            for col0 in range(0, data.shape[2], tile):
                if (row0, col0) not in skip:
                    store.write_tile(row0, col0, data[:, row0:row0 + tile, col0:col0 + tile])
    return path, new_cube(data, **g)


def test_round_trip_through_open_cube_zarr_is_identical(tmp_path):
    # 40 x 50 cells in 16-cell tiles: the last row and column of tiles are partial.
    path, cube = build_store(tmp_path / "cube.zarr", values())
    back = open_cube_zarr(path)
    assert back.chunks is not None  # lazy: dask-backed, nothing read yet
    assert back.chunks[1][0] == back.chunks[2][0] == TILE and back.chunks[0] == (1, 1, 1)
    xr.testing.assert_identical(back, cube)
    array = zarr.open_array(store=str(path), path="envelope", mode="r")
    assert array.chunks == (1, TILE, TILE)
    assert array.dtype == np.float32


def test_plain_xarray_and_rioxarray_read_crs_and_bounds(tmp_path):
    path, cube = build_store(tmp_path / "cube.zarr", values())
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # consolidated: xarray's default open does not warn
        ds = xr.open_zarr(path)
    with ds:
        da = ds["envelope"]
        np.testing.assert_array_equal(da.values, cube.values)
        assert da.dtype == np.float32
        np.testing.assert_array_equal(ds.depth_top.values, cube.depth_top.values)
        np.testing.assert_array_equal(ds.depth_bottom.values, cube.depth_bottom.values)
        assert ds.attrs["Conventions"] == "CF-1.8"
        # CF 1.8 section 5.6 / Appendix F: the grid_mapping attribute names the variable whose
        # attributes describe the CRS; pyproj.CRS.from_cf must give the CRS back.
        gm = ds[da.attrs["grid_mapping"]].attrs
        assert pyproj.CRS.from_cf(gm) == pyproj.CRS.from_epsg(EPSG)
        assert pyproj.CRS.from_wkt(gm["crs_wkt"]) == pyproj.CRS.from_epsg(EPSG)
        assert ds.x.attrs["standard_name"] == "projection_x_coordinate"
        assert ds.depth.attrs["positive"] == "down"
        assert ds.spatial_ref.dtype == np.int32 and ds.spatial_ref.attrs["long_name"]
        # CF 1.8 section 7.1: cell bounds in a (depth, 2) variable named by `bounds`.
        bnds = ds[ds.depth.attrs["bounds"]]
        assert bnds.dims == ("depth", "bnds")
        np.testing.assert_array_equal(bnds.values[:, 0], cube.depth_top.values)
        np.testing.assert_array_equal(bnds.values[:, 1], cube.depth_bottom.values)
    with xr.open_zarr(path, decode_coords="all") as ds:
        assert ds["envelope"].rio.crs.to_epsg() == EPSG
        assert ds["envelope"].rio.transform() == cube_transform(cube)


def gdal_name(path, name="envelope"):
    """GDAL Zarr driver's name of one array of a store (https://gdal.org/drivers/raster/zarr.html).

    The folder alone opens the one array of 2 or more dimensions; the store holds two (the
    cube and the CF bounds ``depth_bnds``), so GDAL lists both as subdatasets.
    """
    return f'ZARR:"{path}":/{name}'


def test_gdal_lists_the_cube_among_the_subdatasets(tmp_path):
    path, _ = build_store(tmp_path / "cube.zarr", values())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rasterio.errors.NotGeoreferencedWarning)
        with rasterio.open(path) as src:  # GDAL's Zarr driver, the store's folder as name
            assert src.count == 0
            assert {s.split(":")[-1] for s in src.subdatasets} >= {"/envelope", "/depth_bnds"}


# Measured (see the report of issue 11): GDAL 3.10.3 (rasterio 1.4.4 wheel) reads the cube in
# place; GDAL 3.6.4, 3.8.4, 3.9.2 and 3.9.3 (rasterio 1.3.9-1.4.3 wheels) give 1 m cells at
# (0, 0) -- thousands of km off -- and those wheels lack blosc altogether.
@pytest.mark.skipif(tuple(int(v) for v in rasterio.__gdal_version__.split(".")[:2]) < (3, 10),
                    reason="GDAL < 3.10 does not georeference the Zarr cube")
def test_gdal_reads_values_crs_and_transform(tmp_path):
    data = values()
    path, cube = build_store(tmp_path / "cube.zarr", data)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no NotGeoreferencedWarning
        with rasterio.open(gdal_name(path)) as src:  # GDAL's Zarr driver
            assert src.driver == "Zarr"
            assert src.count == 3 and src.shape == (40, 50)
            assert src.crs.to_epsg() == EPSG
            # GDAL's Zarr driver derives the transform from the x/y coordinate values, so at
            # UTM magnitudes it is only close (stack-notes trap 4); the GeoTIFFs carry it
            # exactly.
            np.testing.assert_allclose(src.transform[:6], cube_transform(cube)[:6],
                                       rtol=1e-9, atol=1e-6)
            np.testing.assert_array_equal(src.read(), data)
            assert np.isnan(src.nodata)


def test_gdal_finds_the_crs_from_the_crs_attribute_alone(tmp_path):
    # A CRS without an EPSG code, to see the full definition travel.
    custom = pyproj.CRS.from_proj4("+proj=tmerc +lat_0=0 +lon_0=14.2 +k=1 +x_0=200000 +y_0=0 "
                                   "+ellps=GRS80 +units=m +no_defs")
    assert custom.to_epsg() is None
    path, _ = build_store(tmp_path / "cube.zarr", values(), crs=custom)
    meta_path = path / "envelope" / ".zattrs"
    attrs = json.loads(meta_path.read_text())
    # GDAL Zarr driver documentation, "SRS encoding" (https://gdal.org/drivers/raster/zarr.html):
    # a "_CRS" dictionary on the array with "wkt" (WKT2:2019) and/or "projjson" keys.
    assert set(attrs["_CRS"]) == {"wkt", "projjson"}
    assert pyproj.CRS.from_json_dict(attrs["_CRS"]["projjson"]) == custom
    # Without the CF link, GDAL can only have the CRS from "_CRS" (GDAL reads the
    # consolidated copy, so that is made again).
    del attrs["grid_mapping"]
    meta_path.write_text(json.dumps(attrs))
    zarr.consolidate_metadata(str(path), zarr_format=2)
    with rasterio.open(gdal_name(path)) as src:
        assert pyproj.CRS.from_wkt(src.crs.to_wkt()).equals(custom, ignore_axis_order=True)


def test_tiles_never_written_are_nan(tmp_path):
    data = values()
    path, _ = build_store(tmp_path / "cube.zarr", data, skip={(16, 16)})
    back = open_cube_zarr(path).values
    assert np.isnan(back[:, 16:32, 16:32]).all()
    outside = np.ones(back.shape, dtype=bool)
    outside[:, 16:32, 16:32] = False
    np.testing.assert_array_equal(back[outside], data[outside])


def test_existing_store_is_replaced_only_at_finalize(tmp_path):
    target = tmp_path / "cube.zarr"
    first = values(seed=1)
    build_store(target, first)
    second = values(seed=2)
    store = create_cube_store(target, empty_cube(second.shape, **grid()), tile=TILE)
    store.write_tile(0, 0, second)
    # Until finalize, readers of the final name see the earlier store, untouched.
    np.testing.assert_array_equal(open_cube_zarr(target).values, first)
    assert store.path.parent == tmp_path and store.path.name.startswith(".cube.zarr.")
    assert store.finalize() == target
    np.testing.assert_array_equal(open_cube_zarr(target).values, second)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cube.zarr"]


def test_error_inside_the_with_leaves_nothing(tmp_path):
    target = tmp_path / "cube.zarr"
    data = values()
    with pytest.raises(RuntimeError, match="killed"), \
            create_cube_store(target, empty_cube(data.shape, **grid())) as store:
        store.write_tile(0, 0, data)
        raise RuntimeError("killed mid-way")
    assert list(tmp_path.iterdir()) == []
    with pytest.raises(OutputError):
        store.write_tile(0, 0, data)


def test_a_folder_that_is_not_a_store_is_never_replaced(tmp_path):
    target = tmp_path / "cube.zarr"
    target.mkdir()
    (target / "notes.txt").write_text("keep me")
    with pytest.raises(OutputError) as info:
        create_cube_store(target, empty_cube((3, 4, 5), **grid()))
    assert info.value.where == str(target)
    assert (target / "notes.txt").read_text() == "keep me"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cube.zarr"]


@pytest.mark.parametrize(("axis", "crs"), [("twt", f"EPSG:{EPSG}"), ("depth", None)])
def test_time_slices_and_local_grids(tmp_path, axis, crs):
    path, cube = build_store(tmp_path / "cube.zarr", values(), axis=axis, crs=crs)
    back = open_cube_zarr(path)
    xr.testing.assert_identical(back, cube)
    assert back[axis].dtype == np.float64  # "ns" must not be decoded to timedelta
    attrs = json.loads((path / "envelope" / ".zattrs").read_text())
    assert ("_CRS" in attrs) == (crs is not None)


def test_write_tile_on_a_store_path_and_bad_tiles(tmp_path):
    data = values()
    store = create_cube_store(tmp_path / "cube.zarr", empty_cube(data.shape, **grid()))
    write_tile(store.path, 8, 8, data[:, 8:24, 8:40])
    path = store.finalize()
    back = open_cube_zarr(path).values
    np.testing.assert_array_equal(back[:, 8:24, 8:40], data[:, 8:24, 8:40])
    assert np.isnan(back[:, :8]).all()
    for row0, col0, block in [(0, 0, data[:2]), (30, 0, data), (0, -1, data[:, :4, :4]),
                              (0, 0, data[0])]:
        with pytest.raises(SettingsError) as info:
            write_tile(path, row0, col0, block)
        assert info.value.where == "tile"
    with pytest.raises(InputFileError):
        write_tile(path, 0, 0, data, name="amplitude")


def test_zarr_v3_store_reads_back_in_xarray(tmp_path):
    data = values()
    g = grid()
    with create_cube_store(tmp_path / "cube.zarr", empty_cube(data.shape, **g),
                           zarr_format=3) as store:
        store.write_tile(0, 0, data)
    assert (tmp_path / "cube.zarr" / "zarr.json").is_file()
    meta = json.loads((tmp_path / "cube.zarr" / "envelope" / "zarr.json").read_text())
    assert meta["zarr_format"] == 3 and "_CRS" in meta["attributes"]
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # stack-notes trap 7: no consolidated-metadata warning
        back = open_cube_zarr(tmp_path / "cube.zarr")
        xr.testing.assert_identical(back, new_cube(data, **g))


@pytest.mark.skipif(tuple(int(v) for v in rasterio.__gdal_version__.split(".")[:2]) < (3, 11),
                    reason="GDAL < 3.11 predates the Zarr v3 'bytes' codec name "
                           "(OSGeo/gdal#11787) and cannot read zarr-python's v3 arrays")
def test_gdal_reads_a_zarr_v3_store(tmp_path):
    data = values()
    with create_cube_store(tmp_path / "cube.zarr", empty_cube(data.shape, **grid()),
                           zarr_format=3) as store:
        store.write_tile(0, 0, data)
    with rasterio.open(gdal_name(tmp_path / "cube.zarr")) as src:
        assert src.crs.to_epsg() == EPSG
        np.testing.assert_array_equal(src.read(), data)


def test_opening_what_is_not_a_store_names_it(tmp_path):
    with pytest.raises(InputFileError) as info:
        open_cube_zarr(tmp_path)
    assert info.value.where == str(tmp_path)


@pytest.mark.parametrize("zarr_format", [2, 3])
def test_metadata_is_consolidated_and_stays_exact_as_tiles_arrive(tmp_path, zarr_format):
    data = values()
    target = tmp_path / "cube.zarr"
    store = create_cube_store(target, empty_cube(data.shape, tile=TILE, **grid()), tile=TILE,
                              zarr_format=zarr_format)
    for row0 in range(0, 40, TILE):  # workers write tiles by path, as a build's do
        write_tile(store.path, row0, 0, data[:, row0:row0 + TILE])
    store.finalize()
    meta = target / (".zmetadata" if zarr_format == 2 else "zarr.json")
    written = json.loads(meta.read_text())
    # zarr-python's own consolidation of the finished store gives the same document.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # v3: not yet in the specification
        zarr.consolidate_metadata(str(target), zarr_format=zarr_format)
    assert json.loads(meta.read_text()) == written
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with xr.open_zarr(target, consolidated=True) as ds:  # xarray reads the consolidated copy
            np.testing.assert_array_equal(ds["envelope"].values, data)
            assert "depth_bnds" in ds


def test_a_store_without_consolidated_metadata_still_opens_quietly(tmp_path):
    # Stores written before slicer consolidated their metadata.
    path, cube = build_store(tmp_path / "cube.zarr", values())
    (path / ".zmetadata").unlink()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        xr.testing.assert_identical(open_cube_zarr(path), cube)


def test_cf_xarray_finds_axes_bounds_and_grid_mapping(tmp_path):
    import cf_xarray  # noqa: F401  (registers the .cf accessor)

    path, _ = build_store(tmp_path / "cube.zarr", values())
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with xr.open_zarr(path) as ds:
            # cf_xarray, from the CF attributes (CF 1.8 sections 4, 5.6 and 7.1)
            assert ds.cf.axes == {"X": ["x"], "Y": ["y"], "Z": ["depth"]}
            assert ds.cf.bounds["depth"] == ["depth_bnds"]
            assert ds.cf.grid_mapping_names == {"transverse_mercator": ["spatial_ref"]}


def test_the_opened_cube_has_rio_nodata_and_the_window_index(tmp_path):
    from slicer.outputs.cube_index import WindowIndex

    path, cube = build_store(tmp_path / "cube.zarr", values())
    back = open_cube_zarr(path)
    assert isinstance(back.xindexes["depth"], WindowIndex)
    assert float(back.sel(depth=0.1).depth_top) == 0.1  # [top, bottom): common practice
    # rioxarray: CRS, exact transform (from spatial_ref's GeoTransform) and NaN nodata
    assert back.rio.crs.to_epsg() == EPSG
    assert back.rio.transform() == cube_transform(cube)
    assert np.isnan(back.rio.nodata) and np.isnan(back.rio.encoded_nodata)
