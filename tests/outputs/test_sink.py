"""Tests of slicer.outputs.sink: every cube output written tile by tile and committed all at
once."""

from __future__ import annotations

from pathlib import Path

import dask.array as darray
import matplotlib.image
import numpy as np
import pyproj
import pytest
import rasterio
import xarray as xr

from slicer.core.errors import OutputError, SettingsError
from slicer.outputs.cube import empty_cube, new_cube, read_cube_netcdf, write_cube_netcdf
from slicer.outputs.geotiff import write_slice_geotiffs
from slicer.outputs.sink import CubeSink, cube_from_slices, write_cube
from slicer.outputs.zarr_store import CubeStore, open_cube_zarr

# Worked example of /work/shared/reference/check-values.md (OGC 19-008r4, GeoTIFF 1.1):
# EPSG:32633, upper-left corner (500000, 4649776), 0.05 m cells.
WEST, NORTH, CELL, EPSG = 500000.0, 4649776.0, 0.05, 32633
TILE = 32
TAGS = {"SURVEY": "north field", "LINES": ["a", "b"]}
GRID = {"west": WEST, "north": NORTH, "cell": CELL, "crs": f"EPSG:{EPSG}",
        "top": [0.3, 0.4, 0.5], "bottom": [0.4, 0.5, 0.6], "velocity": 0.1,
        "processing": "dewow; background removal; envelope"}


def make_cube(shape=(3, 70, 90), seed=0):
    data = np.random.default_rng(seed).random(shape).astype(np.float32)
    data[:, :5, :7] = np.nan
    return new_cube(data, **GRID)


def tiles(shape, tile=TILE):
    return [(r, c) for r in range(0, shape[1], tile) for c in range(0, shape[2], tile)]


def write_by_tiles(cube, out, order=None, skip=(), **options):
    """Drive a CubeSink as a build would: an empty template, then tile after tile."""
    data = cube.values
    with CubeSink(out, empty_cube(cube.shape, tile=TILE, **GRID), tags=TAGS, tile=TILE,
                  progress=False, **options) as sink:
        for r, c in order or tiles(cube.shape):
            if (r, c) not in skip:
                sink.write(r, c, data[:, r:r + TILE, c:c + TILE])
    return sink.files


def listing(folder):
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


def test_tile_by_tile_gives_the_files_of_the_whole_cube(tmp_path):
    cube = make_cube()
    # Tiles in reverse order, partial ones at the south and east edges (70 x 90 cells).
    files = write_by_tiles(cube, tmp_path / "tiled", order=tiles(cube.shape)[::-1])
    whole_tifs = write_slice_geotiffs(cube, tmp_path / "whole", tags=TAGS, progress=False)
    whole_nc = write_cube_netcdf(cube, tmp_path / "whole" / "cube.nc")
    out = tmp_path / "tiled"
    assert files == [out / "slices" / p.name for p in whole_tifs] + [
        out / "cube.zarr", out / "cube.nc", out / "overview.png"]
    for ours, theirs in zip(files[:3], whole_tifs, strict=True):
        with rasterio.open(ours) as a, rasterio.open(theirs) as b:
            np.testing.assert_array_equal(a.read(), b.read())
            assert a.tags() == b.tags()
            assert a.crs == b.crs and a.crs.to_epsg() == EPSG
            assert a.transform == b.transform
            assert a.descriptions == b.descriptions
            assert (a.dtypes, a.nodata is not None and np.isnan(a.nodata)) == (
                ("float32",), True)
            # Blocks divide the 32-cell tiles (TIFF 6.0: multiples of 16), so each tile
            # fills whole blocks.
            assert a.block_shapes == [(TILE, TILE)]
    xr.testing.assert_identical(read_cube_netcdf(files[4]), read_cube_netcdf(whole_nc))
    xr.testing.assert_identical(open_cube_zarr(files[3]), cube)
    assert matplotlib.image.imread(files[5]).std() > 0.05  # something was drawn
    # No temporary file is left beside any output.
    assert sorted(p.name for p in out.iterdir()) == ["cube.nc", "cube.zarr", "overview.png",
                                                     "slices"]
    assert sorted(p.name for p in (out / "slices").iterdir()) == [p.name for p in whole_tifs]


def test_write_cube_takes_the_same_path_for_memory_and_dask_cubes(tmp_path):
    cube = make_cube()
    files = write_cube(cube, tmp_path / "memory", tags=TAGS, progress=False, tile=TILE)
    lazy = cube.copy(data=darray.from_array(cube.values, chunks=(1, 40, 40)))
    lazy_files = write_cube(lazy, tmp_path / "dask", tags=TAGS, progress=False, tile=TILE)
    assert [p.relative_to(tmp_path / "memory") for p in files] == [
        p.relative_to(tmp_path / "dask") for p in lazy_files]
    for a, b in zip(files[:3], lazy_files[:3], strict=True):
        with rasterio.open(a) as x, rasterio.open(b) as y:
            np.testing.assert_array_equal(x.read(), y.read())
            assert x.tags() == y.tags()
    xr.testing.assert_identical(read_cube_netcdf(files[4]), cube)
    xr.testing.assert_identical(read_cube_netcdf(lazy_files[4]), cube)


def test_netcdf_written_from_the_store_follows_cf_and_keeps_holes(tmp_path):
    cube = make_cube()
    files = write_by_tiles(cube, tmp_path, skip={(32, 32)})
    with xr.open_dataset(files[4], engine="h5netcdf") as ds:
        assert ds.attrs["Conventions"] == "CF-1.8"
        da = ds["envelope"]
        # CF 1.8 section 5.6 / Appendix F: pyproj.CRS.from_cf must give the CRS back.
        assert pyproj.CRS.from_cf(ds[da.attrs["grid_mapping"]].attrs) == \
            pyproj.CRS.from_epsg(EPSG)
        # CF 1.8 section 7.1: cell boundaries in a (depth, 2) variable named by `bounds`.
        bnds = ds[ds.depth.attrs["bounds"]]
        np.testing.assert_array_equal(bnds.values[:, 0], GRID["top"])
        np.testing.assert_array_equal(bnds.values[:, 1], GRID["bottom"])
        # Written chunk by chunk from the Zarr store: one NetCDF chunk per Zarr chunk.
        assert da.encoding["chunksizes"] == (1, TILE, TILE)
        assert da.encoding["zlib"] is True and np.isnan(da.encoding["_FillValue"])
    # The tile never written is NaN (nodata) in every output, and only that tile.
    hole = (slice(None), slice(32, 64), slice(32, 64))
    expected = cube.values.copy()
    expected[hole] = np.nan
    with rasterio.open(files[1]) as src:
        np.testing.assert_array_equal(src.read(1), expected[1])
    np.testing.assert_array_equal(open_cube_zarr(files[3]).values, expected)
    np.testing.assert_array_equal(read_cube_netcdf(files[4]).values, expected)


def test_an_error_inside_the_with_leaves_nothing_behind(tmp_path):
    cube = make_cube()
    out = tmp_path / "new" / "out"
    with pytest.raises(RuntimeError, match="killed"), \
            CubeSink(out, cube, tile=TILE, progress=False) as sink:
        sink.write(0, 0, cube.values[:, :TILE, :TILE])
        raise RuntimeError("killed mid-way")
    # The folders the sink made are gone too: nothing at all was left.
    assert list(tmp_path.iterdir()) == []


def test_an_error_keeps_an_earlier_build_intact(tmp_path):
    first = write_cube(make_cube(seed=1), tmp_path, tags=TAGS, progress=False, tile=TILE)
    before = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    cube = make_cube(seed=2)
    with pytest.raises(RuntimeError), CubeSink(tmp_path, cube, tile=TILE,
                                               progress=False) as sink:
        for r, c in tiles(cube.shape)[:3]:
            sink.write(r, c, cube.values[:, r:r + TILE, c:c + TILE])
        raise RuntimeError("killed mid-way")
    after = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    assert after == before
    assert all(p.exists() for p in first)


def test_a_failure_while_finishing_commits_nothing(tmp_path, monkeypatch):
    cube = make_cube()

    write_bytes = Path.write_bytes

    def broken(self, data):  # the overview's page: half written, then the disk is full
        if self.suffix != ".png":
            return write_bytes(self, data)
        write_bytes(self, data[:100])
        raise OSError("disk full")

    monkeypatch.setattr(Path, "write_bytes", broken)
    with pytest.raises(OutputError, match="disk full") as info:
        write_by_tiles(cube, tmp_path)
    assert info.value.where == str(tmp_path / "overview.png")
    # The GeoTIFFs and the store were complete but not yet renamed: none is left.
    assert listing(tmp_path) == []


def test_a_failing_netcdf_write_names_the_file_and_commits_nothing(tmp_path, monkeypatch):
    import slicer.outputs.sink as sink_module
    cube = make_cube()
    first = write_cube(make_cube(seed=1), tmp_path, tags=TAGS, progress=False, tile=TILE)
    before = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}

    def full_disk(cube, target, **kwargs):
        with open(target, "wb") as fh:
            fh.write(b"\x89HDF partial")
        raise OSError("No space left on device")

    monkeypatch.setattr(sink_module, "_write_netcdf", full_disk)
    with pytest.raises(OutputError, match="No space left") as info:
        write_by_tiles(cube, tmp_path)
    assert info.value.where == str(tmp_path / "cube.nc")
    # The earlier build is intact and no temporary file is left beside it.
    after = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    assert after == before
    assert all(p.exists() for p in first)


def test_a_failing_tile_write_names_the_file(tmp_path, monkeypatch):
    cube = make_cube()

    def full_disk(self, row0, col0, block):
        raise OutputError("cannot write Zarr chunk (No space left on device)",
                          where=str(self.target))

    monkeypatch.setattr(CubeStore, "write_tile", full_disk)
    with pytest.raises(OutputError, match="No space left") as info:
        write_by_tiles(cube, tmp_path / "out")
    assert info.value.where == str(tmp_path / "out" / "cube.zarr")
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize(("row0", "col0", "shape"), [
    (0, 0, (2, TILE, TILE)),  # wrong number of slices
    (64, 0, (3, TILE, TILE)),  # south of the grid
    (0, -TILE, (3, TILE, TILE)),
    (0, 0, (TILE, TILE)),
])
def test_bad_tiles_are_refused(tmp_path, row0, col0, shape):
    cube = make_cube()
    with pytest.raises(SettingsError) as info, \
            CubeSink(tmp_path / "out", cube, tile=TILE, progress=False) as sink:
        sink.write(row0, col0, np.zeros(shape, dtype=np.float32))
    assert info.value.where == "tile"
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("tile", [0, 20, 2.5])
def test_tile_size_must_be_a_multiple_of_16(tmp_path, tile):
    with pytest.raises(SettingsError) as info:
        CubeSink(tmp_path, make_cube(), tile=tile)
    assert info.value.where == "tile"


def test_output_path_that_is_a_file_is_refused(tmp_path):
    target = tmp_path / "out"
    target.write_text("")
    with pytest.raises(OutputError) as info:
        write_cube(make_cube(), target, progress=False, tile=TILE)
    assert info.value.where == str(target)
    assert target.read_text() == ""


def test_overview_from_the_kept_panels_equals_one_drawn_from_the_cube(tmp_path, monkeypatch):
    # 1900 rows at 150 dpi: every 3rd cell is drawn, and 256-cell tiles do not start on a
    # multiple of 3, so the panels kept tile by tile must pick the same cells as the strided
    # read of the finished cube that an overview drawn without them does.
    import slicer.outputs.overview_plan as plan_module
    import slicer.outputs.sink as sink_module
    from slicer.outputs.display import Display
    from slicer.outputs.figures import panel_stride
    from slicer.outputs.sheet_png import page_png
    cube = make_cube(shape=(3, 1900, 40), seed=5)
    assert panel_stride(cube, dpi=sink_module.OVERVIEW_DPI) == 3
    seen = {}
    original = plan_module.OverviewPlan

    def spy(cube, display, **kwargs):
        seen["panels"] = kwargs["panels"]
        return original(cube, display, **kwargs)

    monkeypatch.setattr(plan_module, "OverviewPlan", spy)  # sink imports it when drawing
    write_cube(cube, tmp_path / "out", progress=False, tile=256)
    for i, panel in enumerate(seen["panels"]):
        np.testing.assert_array_equal(panel, cube.values[i, ::3, ::3])
    ours = matplotlib.image.imread(tmp_path / "out" / "overview.png")
    plan = original(open_cube_zarr(tmp_path / "out" / "cube.zarr"), Display(), title=None,
                    dpi=sink_module.OVERVIEW_DPI, panels=None)
    ncols, nrows, [(start, stop, page)] = plan.pages(99)
    (tmp_path / "ref.png").write_bytes(page_png(plan.drawn, **plan.page(start, stop, page=page),
                                                ncols=ncols, nrows=nrows))
    np.testing.assert_array_equal(ours, matplotlib.image.imread(tmp_path / "ref.png"))


def test_netcdf_written_by_another_process_equals_the_cube(tmp_path):
    # offload: the NetCDF cube is written by a worker process (as on a process pool or a
    # LocalCluster) from the finished Zarr store; it must hold the same values.
    import concurrent.futures
    import multiprocessing
    cube = make_cube(shape=(3, 70, 90), seed=9)
    context = multiprocessing.get_context("spawn")
    with concurrent.futures.ProcessPoolExecutor(max_workers=1, mp_context=context) as pool, \
            CubeSink(tmp_path / "out", cube, tile=32, progress=False,
                     offload=pool.submit) as sink:
        for row0, col0, block in write_by_tiles_blocks(cube, 32):
            sink.write(row0, col0, block)
    back = read_cube_netcdf(tmp_path / "out" / "cube.nc")
    np.testing.assert_array_equal(back.values, cube.values)
    assert (tmp_path / "out" / "cube.nc") in sink.files


def write_by_tiles_blocks(cube, tile):
    for row0 in range(0, cube.shape[1], tile):
        for col0 in range(0, cube.shape[2], tile):
            yield row0, col0, cube.values[:, row0:row0 + tile, col0:col0 + tile]


@pytest.mark.parametrize("formats", [("tif",), ("zarr",), ("nc",), ("tif", "nc")])
def test_only_the_formats_asked_for_are_written_and_the_working_store_goes(tmp_path, formats):
    cube = make_cube()
    out = tmp_path / "out"
    template = empty_cube(cube.shape, tile=TILE, **GRID)
    with CubeSink(out, template, tags=TAGS, tile=TILE, progress=False,
                  formats=formats) as sink:
        for r, c in tiles(cube.shape):
            sink.write(r, c, cube.values[:, r:r + TILE, c:c + TILE])
    expected = {"overview.png"}
    if "tif" in formats:
        expected |= {"slices", *(f"slices/{p.name}" for p in sink.files if p.suffix == ".tif")}
    expected |= {"zarr": {"cube.zarr"}, "nc": {"cube.nc"}}.get(formats[-1], set())
    if "nc" in formats:
        expected.add("cube.nc")
    # no working store nor any temporary file left: top-level entries and the slices only
    assert {e for e in listing(out) if not e.startswith("cube.zarr/")} == expected
    assert [p.name for p in sink.files][-1] == "overview.png"
    assert sink.empty_cells == 5 * 7  # the NaN corner of make_cube
    if "tif" in formats:
        tifs = [p for p in sink.files if p.suffix == ".tif"]
        assert len(tifs) == 3
        # the slices read back lazily by rioxarray equal the cube, on its coordinates
        back = cube_from_slices(template, tifs)
        assert back.chunks is not None
        np.testing.assert_array_equal(back.values, cube.values)
        xr.testing.assert_identical(back.compute(), cube)
        with rasterio.open(tifs[2]) as src:  # and as GDAL reads the file
            np.testing.assert_array_equal(src.read(1), cube.values[2])


def test_slices_streamed_tile_by_tile_equal_those_written_whole(tmp_path):
    cube = make_cube(seed=4)
    whole = write_by_tiles(cube, tmp_path / "whole", formats=("tif",))
    streamed = write_by_tiles(cube, tmp_path / "streamed", formats=("tif",),
                              stream_slices=True)
    assert [p.name for p in whole] == [p.name for p in streamed]
    for a, b in zip(whole[:3], streamed[:3], strict=True):
        with rasterio.open(a) as x, rasterio.open(b) as y:
            np.testing.assert_array_equal(x.read(), y.read())
            assert x.tags() == y.tags() and x.overviews(1) == y.overviews(1)
            px, py = dict(x.profile), dict(y.profile)
            assert np.isnan(px.pop("nodata")) and np.isnan(py.pop("nodata")) and px == py


def test_a_failing_whole_slice_leaves_nothing_behind(tmp_path, monkeypatch):
    import slicer.outputs.geotiff as geotiff
    cube = make_cube()
    calls = []

    def full_disk(job, values=None):
        calls.append(job.index)
        raise OutputError("cannot write GeoTIFF (No space left on device)", where=job.final)

    monkeypatch.setattr(geotiff, "write_slice_file", full_disk)
    with pytest.raises(OutputError, match="No space left"):
        write_by_tiles(cube, tmp_path / "out", formats=("tif",))
    assert calls and not (tmp_path / "out").exists()  # nor the working store


def test_slices_of_another_grid_are_refused(tmp_path):
    cube = make_cube()
    tifs = write_by_tiles(cube, tmp_path / "out", formats=("tif",))[:3]
    other = empty_cube((3, 70, 90), tile=TILE, **{**GRID, "west": WEST + 1.0})
    with pytest.raises(OutputError, match="does not hold the cube's grid") as info:
        cube_from_slices(other, tifs)
    assert info.value.where == str(tifs[0])
    with pytest.raises(OutputError, match="2 slice files for 3 slices"):
        cube_from_slices(cube, tifs[:2])


def test_unknown_formats_are_refused(tmp_path):
    with pytest.raises(SettingsError, match="formats") as info:
        CubeSink(tmp_path / "out", make_cube(), tile=TILE, formats=("tif", "png"))
    assert info.value.where == "formats" and not (tmp_path / "out").exists()


def test_page_slices_taken_while_writing_equal_those_of_the_geotiffs_read_back(tmp_path):
    from slicer.outputs.viewer import page_slice, page_step
    cube = make_cube(shape=(3, 70, 1300))  # wider than the page: decimated by 3
    data = cube.values
    with CubeSink(tmp_path / "o", empty_cube(cube.shape, tile=TILE, **GRID), tile=TILE,
                  progress=False, page_slices=True) as sink:
        for r, c in tiles(cube.shape):
            sink.write(r, c, data[:, r:r + TILE, c:c + TILE])
    step = page_step(*cube.shape[1:])
    assert step == 3 and len(sink.page_slices) == 3
    for tif, page in zip(sink.files[:3], sink.page_slices, strict=True):
        with rasterio.open(tif) as f:  # the slice as GDAL reads it from the written file
            assert page == page_slice(f.read(1), step)
    assert page.shape == (24, 434)


def test_page_slices_are_not_taken_unless_asked_or_when_streamed(tmp_path):
    cube = make_cube()
    for name, options in (("plain", {}), ("streamed", {"stream_slices": True,
                                                       "page_slices": True})):
        with CubeSink(tmp_path / name, empty_cube(cube.shape, tile=TILE, **GRID), tile=TILE,
                      progress=False, **options) as sink:
            for r, c in tiles(cube.shape):
                sink.write(r, c, cube.values[:, r:r + TILE, c:c + TILE])
        assert sink.page_slices is None
