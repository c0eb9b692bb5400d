"""The ground's elevation at every trace: GNSS heights, line ends, an elevation model."""

from pathlib import Path

import numpy as np
import pyproj
import pytest
import rasterio
from hypothesis import given, settings
from hypothesis import strategies as st
from rasterio.transform import from_origin
from rasterio.warp import Resampling, calculate_default_transform, reproject

from slicer.core.errors import InputFileError
from slicer.geometry.terrain import (
    ElevationModel,
    check_terrain,
    surface_from_ends,
    surface_from_heights,
)

WEST, NORTH, CELL = 512000.0, 4650010.0, 0.25


def plane(x, y):
    """A 10 % slope rising to the east, 2 % to the north (invented)."""
    return 100.0 + 0.1 * (x - WEST) + 0.02 * (y - (NORTH - 10))


def _write(path, values, *, crs, transform, nodata=np.nan):
    with rasterio.open(path, "w", driver="GTiff", width=values.shape[1],
                       height=values.shape[0], count=1, dtype="float32", crs=crs,
                       transform=transform, nodata=nodata) as dst:
        dst.write(values.astype(np.float32), 1)
    return path


@pytest.fixture(scope="module")
def dem(tmp_path_factory):
    folder = tmp_path_factory.mktemp("dem")
    nx, ny = 60, 40
    xc = WEST + CELL * (np.arange(nx) + 0.5)
    yc = NORTH - CELL * (np.arange(ny) + 0.5)
    values = plane(xc[None, :], yc[:, None])
    return _write(folder / "dem.tif", values, crs="EPSG:32633",
                  transform=from_origin(WEST, NORTH, CELL, CELL))


def test_heights_less_the_antenna():
    np.testing.assert_allclose(surface_from_heights([101.5, 102.0], gnss_height=1.5),
                               [100.0, 100.5])


def test_a_missing_height_is_refused_naming_the_trace():
    with pytest.raises(InputFileError, match="first: trace 2") as e:
        surface_from_heights([1.0, 2.0, np.nan, np.nan], gnss_height=0.0, where="t.csv")
    assert e.value.where == "t.csv" and "2 of 4" in e.value.message


def test_linear_between_the_ends_and_held_beyond():
    x = np.array([-1.0, 0.0, 2.5, 10.0, 12.0])
    z = surface_from_ends(x, np.zeros(5), start=(0, 0), end=(10, 0), start_elevation=5.0,
                          end_elevation=6.0)
    np.testing.assert_allclose(z, [5.0, 5.0, 5.25, 6.0, 6.0])  # hand-computed


def test_the_model_is_exact_on_a_plane(dem):
    # Bilinear interpolation reproduces a plane exactly (its cross term vanishes): any
    # point between cell centres gets the plane's value, to float32 rounding of the file.
    model = ElevationModel.read(dem)
    rng = np.random.default_rng(1)
    x = rng.uniform(WEST + CELL, WEST + 14, 500)
    y = rng.uniform(NORTH - 9.5, NORTH - CELL, 500)
    np.testing.assert_allclose(model.sample(x, y, crs="EPSG:32633"), plane(x, y), atol=2e-5)


def test_a_model_in_another_crs_is_sampled_where_the_traces_are(dem, tmp_path):
    # the same plane warped by GDAL (rasterio.warp) to Web Mercator, 0.25 m cells there
    with rasterio.open(dem) as src:
        t, w, h = calculate_default_transform(src.crs, "EPSG:3857", src.width, src.height,
                                              *src.bounds)
        out = np.full((h, w), np.nan, dtype=np.float32)
        reproject(src.read(1), out, src_transform=src.transform, src_crs=src.crs,
                  dst_transform=t, dst_crs="EPSG:3857", resampling=Resampling.bilinear,
                  src_nodata=np.nan, dst_nodata=np.nan)
    warped = _write(tmp_path / "dem3857.tif", out, crs="EPSG:3857", transform=t)
    model = ElevationModel.read(warped)
    assert model.crs.equals(pyproj.CRS.from_epsg(3857))
    x = np.linspace(WEST + 2, WEST + 12, 50)
    y = np.linspace(NORTH - 8, NORTH - 2, 50)
    # two bilinear resamplings of a plane: exact up to float32 and the warp's rounding
    np.testing.assert_allclose(model.sample(x, y, crs="EPSG:32633"), plane(x, y), atol=2e-3)


def test_a_geographic_model_with_a_nodata_number(dem, tmp_path):
    # elevation models often come in longitude/latitude (EPSG:4326) with a nodata number:
    # warped by GDAL (rasterio.warp) to about 0.25 m cells in degrees, nodata -9999
    with rasterio.open(dem) as src:
        t, w, h = calculate_default_transform(src.crs, "EPSG:4326", src.width, src.height,
                                              *src.bounds, resolution=(2.5e-6, 2.5e-6))
        out = np.full((h, w), -9999, dtype=np.float32)
        reproject(src.read(1), out, src_transform=src.transform, src_crs=src.crs,
                  dst_transform=t, dst_crs="EPSG:4326", resampling=Resampling.bilinear,
                  src_nodata=np.nan, dst_nodata=-9999)
    model = ElevationModel.read(_write(tmp_path / "geo.tif", out, crs="EPSG:4326",
                                       transform=t, nodata=-9999))
    x = np.linspace(WEST + 2, WEST + 12, 40)
    y = np.linspace(NORTH - 8, NORTH - 2, 40)
    np.testing.assert_allclose(model.sample(x, y, crs="EPSG:32633"), plane(x, y), atol=5e-3)


def test_a_model_that_misses_the_survey_is_refused(dem):
    model = ElevationModel.read(dem)
    with pytest.raises(InputFileError, match="does not cover 2 of 3 traces of line A"):
        model.sample([WEST + 1, WEST + 40, WEST - 3], [NORTH - 1] * 3, crs="EPSG:32633",
                     where="line A")


def test_nodata_next_to_a_trace_is_refused(tmp_path):
    values = np.full((4, 4), 10.0)
    values[1, 1] = -9999
    path = _write(tmp_path / "hole.tif", values, crs="EPSG:32633",
                  transform=from_origin(0, 4, 1, 1), nodata=-9999)
    model = ElevationModel.read(path)
    assert model.sample([2.6], [1.4], crs="EPSG:32633")[0] == pytest.approx(10.0)
    with pytest.raises(InputFileError, match="does not cover 1 of 1"):
        model.sample([1.6], [2.4], crs="EPSG:32633")


def test_a_model_without_crs_or_file_is_refused(tmp_path):
    path = _write(tmp_path / "nocrs.tif", np.zeros((2, 2)), crs=None,
                  transform=from_origin(0, 2, 1, 1))
    with pytest.raises(InputFileError, match="no CRS"):
        ElevationModel.read(path)
    with pytest.raises(InputFileError, match="not found"):
        ElevationModel.read(tmp_path / "missing.tif")


@settings(max_examples=40, deadline=None)
@given(word=st.sampled_from(["gnss", "GNSS", " table "]), name=st.text(min_size=1).filter(
    lambda s: s.strip() and s.strip().lower() not in ("gnss", "table") and "\x00" not in s))
def test_terrain_words_and_paths(word, name):
    assert check_terrain(word) in ("gnss", "table")
    assert check_terrain(name) == Path(name.strip())
