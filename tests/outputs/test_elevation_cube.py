"""A cube of elevation slices: CF vertical axis pointing up, bounds, GeoTIFF tags, selection."""

import numpy as np
import pytest
import rasterio
import xarray as xr

from slicer.core.errors import SettingsError
from slicer.outputs.cube import new_cube, read_cube_netcdf, write_cube_netcdf
from slicer.outputs.geotiff import write_slice_geotiffs

WEST, NORTH, CELL, EPSG = 500000.0, 4649776.0, 0.05, 32633
DATUM = "EGM2008 (as the user named it)"


def make_cube(n=4, *, datum=DATUM):
    data = np.random.default_rng(0).random((n, 4, 5)).astype(np.float32)
    tops = 120.0 - 0.1 * np.arange(n)  # 120.0-119.9, 119.9-119.8, ... m above the datum
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs=f"EPSG:{EPSG}", top=tops,
                    bottom=tops - 0.1, axis="elevation", velocity=0.1,
                    processing="envelope", vertical_datum=datum)


def test_the_vertical_axis_points_up_with_bounds_and_datum():
    cube = make_cube()
    assert cube.dims == ("elevation", "y", "x")
    # CF 1.8 section 4.3: a vertical coordinate in length units says which way is positive
    assert cube["elevation"].attrs["positive"] == "up"
    assert cube["elevation"].attrs["axis"] == "Z"
    assert cube.attrs["vertical_datum"] == DATUM
    np.testing.assert_allclose(cube["elevation"].values, [119.95, 119.85, 119.75, 119.65])


def test_selection_by_elevation_takes_the_window_holding_it():
    cube = make_cube()
    assert float(cube.sel(elevation=119.93)["elevation"]) == pytest.approx(119.95)
    # a shared edge belongs to the deeper window, as in depth ((bottom, top] counting up)
    assert float(cube.sel(elevation=119.9)["elevation"]) == pytest.approx(119.85)
    assert float(cube.sel(elevation=121.0, method="nearest")["elevation"]) == \
        pytest.approx(119.95)


@pytest.mark.parametrize(("change", "match"), [
    ({"datum": None}, "vertical datum"),
    ({"datum": "  "}, "vertical datum"),
])
def test_elevation_needs_a_datum(change, match):
    with pytest.raises(SettingsError, match=match):
        make_cube(**change)


def test_windows_must_go_down():
    with pytest.raises(SettingsError, match="not above"):
        new_cube(np.zeros((1, 2, 2)), west=0, north=0, cell=1, crs=None, top=[1.0],
                 bottom=[2.0], axis="elevation", vertical_datum="d")
    with pytest.raises(SettingsError, match="downwards"):
        new_cube(np.zeros((2, 2, 2)), west=0, north=0, cell=1, crs=None, top=[1.0, 2.0],
                 bottom=[0.0, 1.0], axis="elevation", vertical_datum="d")


def test_depth_cubes_take_no_datum():
    with pytest.raises(SettingsError, match="only they"):
        new_cube(np.zeros((1, 2, 2)), west=0, north=0, cell=1, crs=None, top=[0.0],
                 bottom=[1.0], axis="depth", vertical_datum="d")


def test_netcdf_passes_the_cf_1_8_compliance_checker(tmp_path, cf_failures):
    path = write_cube_netcdf(make_cube(), tmp_path / "e.nc")
    assert cf_failures(path) == []  # IOOS compliance-checker, cf:1.8, every priority
    back = read_cube_netcdf(path)
    xr.testing.assert_allclose(back, make_cube())
    assert back.attrs["vertical_datum"] == DATUM
    with xr.open_dataset(path, engine="h5netcdf") as ds:  # CF 1.8 section 7.1 cell bounds
        np.testing.assert_allclose(ds[ds["elevation"].attrs["bounds"]].values[0], [120.0, 119.9])


def test_geotiff_tags_read_by_gdal(tmp_path):
    paths = write_slice_geotiffs(make_cube(), tmp_path / "slices", progress=False)
    assert paths[0].name == "slice_000_120.000-119.900m.tif"
    with rasterio.open(paths[1]) as src:  # GDAL's metadata domain, through rasterio
        tags = src.tags()
        assert float(tags["ELEVATION_TOP"]) == pytest.approx(119.9)
        assert float(tags["ELEVATION_BOTTOM"]) == pytest.approx(119.8)
        assert tags["VERTICAL_DATUM"] == DATUM
        assert float(tags["VELOCITY_M_PER_NS"]) == 0.1
        assert src.descriptions[0] == "elevation 119.900-119.800 m"


def test_a_body_spans_from_its_highest_to_its_lowest_edge():
    from slicer.outputs.outlines import outline
    data = np.zeros((4, 20, 20), dtype=np.float32)
    data += np.random.default_rng(2).normal(0, 0.01, data.shape).astype(np.float32)
    data[1:3, 5:10, 5:10] = 5.0  # a block in the slices 119.9-119.8 and 119.8-119.7 m
    cube = new_cube(data, west=WEST, north=NORTH, cell=0.1, crs=f"EPSG:{EPSG}",
                    top=120.0 - 0.1 * np.arange(4), bottom=119.9 - 0.1 * np.arange(4),
                    axis="elevation", vertical_datum=DATUM)
    bodies = outline(cube).bodies
    assert len(bodies) == 1
    body = bodies[0]
    # hand-computed: the block spans 119.9 down to 119.7 m, 25 cells of 0.01 m2, 0.2 m thick
    assert body["top"] == pytest.approx(119.9) and body["bottom"] == pytest.approx(119.7)
    assert body["volume_m3"] == pytest.approx(25 * 0.01 * 0.2)


def test_overview_and_section_name_the_elevations(tmp_path):
    from slicer.outputs.figures import plot_overview
    from slicer.outputs.section import plot_section, section
    cube = make_cube()
    figure = plot_overview(cube)
    texts = {t.get_text() for t in figure.texts}  # the overview is drawn as one picture
    assert {"120.00-119.90 m", "119.70-119.60 m"} <= texts, texts
    sec = section(cube, [(WEST + 0.02, NORTH - 0.1), (WEST + 0.2, NORTH - 0.1)])
    assert sec.dims == ("distance", "elevation")
    figure = plot_section(sec, tmp_path / "s.png")
    assert (tmp_path / "s.png").stat().st_size > 0
    assert figure.axes[0].get_ylabel() == f"elevation above {DATUM} (m)"
    low, high = figure.axes[0].get_ylim()
    assert high > low  # elevation counts up the page


def test_a_radargram_title_names_the_ground_at_the_line_ends():
    from slicer.outputs.radargram import image_of_samples, titles
    n = 50
    image = image_of_samples(np.ones((n, 40)), 513000 + 0.1 * np.arange(n), np.full(n, 4651000.0),
                             0.1 * np.arange(40), attrs={"line": "L7",
                                                         "ground": [120.0, 120.392, "site"]})
    name, ends = titles(image)
    assert name == "L7   ground 120.00 to 120.39 m above site"
    assert "(513000.00, 4651000.00) to (513004.90, 4651000.00) m" in ends
