"""Anomaly outlines on a cube with known anomalies, read back through GDAL/OGR (pyogrio).

The cube is written here: seeded noise around 1.0 with a rectangle (a "cellar floor") in
slices 3-6, a ring (a "well") with a hole in slices 8-9, and a one-cell speck. Footprints are
compared with shapely (the reference geometry library) as intersection over union.
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely
import shapely.geometry

from slicer.core.errors import SettingsError
from slicer.outputs.cube import new_cube
from slicer.outputs.outlines import anomaly_mask, outline, write_outlines

WEST, NORTH, CELL = 500000.0, 4200010.0, 0.1
TOPS = np.round(0.1 * np.arange(12), 6)


def cube_with_anomalies():
    rng = np.random.default_rng(3)
    data = rng.normal(1.0, 0.1, (12, 100, 80)).astype(np.float32)
    data[3:7, 20:40, 10:30] = 3.0  # 2 m x 2 m from x 1-3 m, y 2-4 m below the north edge
    yy, xx = np.mgrid[0:100, 0:80]
    r = np.hypot(yy - 70, xx - 55)
    ring = (r >= 6) & (r <= 10)
    data[8:10][:, ring] = 3.0
    data[5, 90, 5] = 5.0  # a speck: one cell
    data[:, :3, :3] = np.nan
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633", top=TOPS,
                    bottom=TOPS + 0.1)


def box(col0, col1, row0, row1):
    return shapely.geometry.box(WEST + CELL * col0, NORTH - CELL * row1,
                                WEST + CELL * col1, NORTH - CELL * row0)


def iou(a, b):
    return a.intersection(b).area / a.union(b).area


def test_the_rectangle_is_outlined_in_its_slices_and_as_one_body():
    out = outline(cube_with_anomalies())
    rect = box(10, 30, 20, 40)
    in_slices = [p for p in out.patches if iou(p["geometry"], rect) > 0.95]
    assert sorted(p["slice"] for p in in_slices) == [3, 4, 5, 6]
    assert all(p["area_m2"] == pytest.approx(4.0) for p in in_slices)
    body = [b for b in out.bodies if iou(b["geometry"], rect) > 0.95]
    assert len(body) == 1
    assert (body[0]["top"], body[0]["bottom"], body[0]["slices"]) == (0.3, 0.7, 4)
    assert body[0]["volume_m3"] == pytest.approx(4.0 * 0.4)


def test_holes_are_filled_and_specks_dropped():
    out = outline(cube_with_anomalies())
    disc = shapely.geometry.Point(WEST + CELL * 55.5, NORTH - CELL * 70.5).buffer(10 * CELL)
    ring = [p for p in out.patches if p["slice"] == 8 and iou(p["geometry"], disc) > 0.85]
    assert len(ring) == 1 and len(ring[0]["geometry"].geoms if hasattr(
        ring[0]["geometry"], "geoms") else [ring[0]["geometry"]]) == 1
    assert not list(ring[0]["geometry"].interiors)  # the hole is filled
    speck = shapely.geometry.Point(WEST + CELL * 5.5, NORTH - CELL * 90.5)
    assert not any(p["geometry"].contains(speck) for p in out.patches)
    kept = outline(cube_with_anomalies(), min_area=0.0)
    assert any(p["geometry"].contains(speck) for p in kept.patches)
    # an area beyond the whole grid keeps nothing, up to the largest float (4.5e305 m² had
    # overflowed into an OverflowError; found by the hypothesis attack on options)
    for huge in (1e9, 4.494232837155791e305, 1.7e308):
        assert outline(cube_with_anomalies(), min_area=huge).patches == []


def test_noise_alone_makes_few_outlines():
    rng = np.random.default_rng(9)
    noise = new_cube(rng.normal(1.0, 0.1, (4, 100, 100)).astype(np.float32), west=WEST,
                     north=NORTH, cell=CELL, crs="EPSG:32633", top=TOPS[:4],
                     bottom=TOPS[:4] + 0.1)
    # 3 robust deviations: 0.13 % of normal cells, and four touching cells are needed
    assert len(outline(noise).patches) == 0
    assert anomaly_mask(noise).mean() < 0.003


def test_the_geopackage_opens_in_gdal_with_crs_and_types(tmp_path):
    import pyogrio
    import pyproj
    path = write_outlines(outline(cube_with_anomalies()), tmp_path / "outlines.gpkg")
    layers = {name for name, _ in pyogrio.list_layers(path)}
    assert layers == {"outlines", "bodies"}
    for layer, ints in (("outlines", {"slice"}), ("bodies", {"body", "slices"})):
        info = pyogrio.read_info(path, layer=layer)
        assert pyproj.CRS.from_user_input(info["crs"]).to_epsg() == 32633
        assert info["geometry_type"] == "MultiPolygon" and info["features"] > 0
        types = dict(zip(info["fields"], info["dtypes"], strict=True))
        assert all(types[f] == "int32" for f in ints)
        assert all(t == "float64" for f, t in types.items() if f not in ints)


def test_cells_touching_at_a_corner_give_valid_polygons(tmp_path):
    # OGC Simple Features (ISO 19125-1): a polygon's ring may not touch itself. With eight
    # neighbours, a patch whose cells meet only at a corner is traced by rasterio as one ring
    # through that corner twice; GEOS (shapely.is_valid) refuses it, and so do GIS checks.
    import pyogrio.raw
    data = np.random.default_rng(1).normal(1.0, 0.1, (4, 30, 30)).astype(np.float32)
    data[1, 10:14, 10:14] = 9.0  # a 4 x 4 cell block
    data[1, 14:17, 14:17] = 9.0  # and a 3 x 3 one meeting it at one corner
    data[1, 5:8, 20:23] = 9.0  # and one alone
    cube = new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633",
                    top=TOPS[:4], bottom=TOPS[:4] + 0.1)
    found = outline(cube, min_area=0.05)  # five cells: no speck of noise
    path = write_outlines(found, tmp_path / "corner.gpkg")
    for layer in ("outlines", "bodies"):
        geometries = pyogrio.raw.read(path, layer=layer)[2]
        shapes = [shapely.from_wkb(g) for g in geometries]
        assert shapes and all(shapely.is_valid(g) for g in shapes), \
            [shapely.is_valid_reason(g) for g in shapes]
    areas = sorted(round(p["geometry"].area / CELL ** 2) for p in found.patches)
    assert areas == [9, 25]  # the cells unchanged: 3 x 3, and 16 + 9 meeting at a corner


def test_a_geopackage_needs_its_suffix_and_takes_the_users_file_mode(tmp_path):
    # GIS choose a reader by the suffix: a GeoPackage named .shp is opened as a shapefile.
    # File modes: POSIX open(2), mode & ~umask (GDAL recreates the file with 0644 itself).
    import os
    import stat

    from slicer.core.errors import OutputError
    found = outline(cube_with_anomalies())
    for name in ("a.shp", "a.txt", "a"):
        with pytest.raises(OutputError, match=r"must end in \.gpkg"):
            write_outlines(found, tmp_path / name)
        assert not (tmp_path / name).exists()
    old = os.umask(0o002)
    try:
        path = write_outlines(found, tmp_path / "a.GPKG")
    finally:
        os.umask(old)
    assert stat.S_IMODE(path.stat().st_mode) == 0o664
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.GPKG"]  # no temporary left


def test_bad_options():
    cube = cube_with_anomalies()
    with pytest.raises(SettingsError):
        outline(cube, threshold=0)
    with pytest.raises(SettingsError):
        outline(cube, min_area=-1.0)
    for bad in ({"fraction": 1.5}, {"floor": -0.1}, {"fraction": float("nan")}):
        with pytest.raises(SettingsError):
            outline(cube, **bad)


def test_a_weak_patch_on_a_strong_reflectors_echo_is_dropped_and_alone_kept():
    rng = np.random.default_rng(5)
    data = rng.normal(1.0, 0.05, (12, 100, 100)).astype(np.float32)
    data[3, 50:53, 20:23] = 10.0  # a strong reflector in the window 0.3-0.4 m
    # 0.4-0.5 m east of it in the window 0.6-0.7 m: slant distances from 0.3-0.4 m deep reach
    # sqrt(0.4² + 0.35²) = 0.53 m, within one slice of the window: where its limb lands
    data[6, 50:53, 26:28] = 3.0
    data[6, 80:83, 60:63] = 3.0  # the same patch with nothing above it
    cube = new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633", top=TOPS,
                    bottom=TOPS + 0.1)
    mask = anomaly_mask(cube)
    assert mask[3, 51, 21] and mask[6, 81, 61]
    assert not mask[6, 50:53, 26:28].any()
    # rule 3 off: both patches stand out (robust deviations alone)
    assert anomaly_mask(cube, fraction=0.0)[6, 50:53, 26:28].all()
