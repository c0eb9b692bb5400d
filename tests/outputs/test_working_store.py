"""Tests of slicer.outputs.working_store: the cube held in memory or on disk while gridded.

References: the slice GeoTIFFs read back with rasterio against the cube that went in, and the
same sink writing through its Zarr store on disk.
"""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
from hypothesis import given, settings
from hypothesis import strategies as st

import slicer.outputs.zarr_store as zarr_store
from slicer.core.errors import OutputError, SettingsError
from slicer.outputs.cube import new_cube
from slicer.outputs.geotiff import tile_windows
from slicer.outputs.sink import CubeSink
from slicer.outputs.working_store import (
    MEMORY_STAGING_BYTES,
    FileStore,
    MemoryStore,
    stages_in_memory,
    working_kind,
)


def make_cube(shape=(3, 70, 90), seed=2):
    rng = np.random.default_rng(seed)
    values = rng.random(shape).astype(np.float32)
    values[:, :10, :7] = np.nan
    tops = 0.1 * np.arange(shape[0])
    return new_cube(values, west=500000.0, north=4650000.0, cell=0.1, crs="EPSG:32633",
                    top=tops, bottom=tops + 0.1, velocity=0.1)


def write(cube, out, formats, tile=32):
    with CubeSink(out, cube, tile=tile, progress=False, formats=formats) as sink:
        for row0, col0, h, w in tile_windows(cube.shape, tile):
            sink.write(row0, col0, cube.values[:, row0:row0 + h, col0:col0 + w])
    return sink.files


def slices_of(files):
    out = []
    for f in files:
        if f.suffix == ".tif":
            with rasterio.open(f) as src:
                out.append(src.read(1))
    return np.stack(out)


def test_geotiffs_alone_are_written_from_memory_with_the_values_that_went_in(tmp_path,
                                                                             monkeypatch):
    cube = make_cube()

    def no_store(*args, **kwargs):
        raise AssertionError("a Zarr store was made for GeoTIFFs alone")

    monkeypatch.setattr(zarr_store, "create_cube_store", no_store)
    files = write(cube, tmp_path / "out", ("tif",))
    # Reference: rasterio reads each slice back; NaN where no value went in
    np.testing.assert_array_equal(slices_of(files), cube.values)
    assert not any(p.name.startswith(".cube.zarr") or p.name == "cube.zarr"
                   for p in (tmp_path / "out").rglob("*"))


def test_memory_and_disk_give_the_same_geotiffs(tmp_path):
    cube = make_cube(seed=5)
    in_memory = slices_of(write(cube, tmp_path / "a", ("tif",)))
    on_disk = slices_of(write(cube, tmp_path / "b", ("tif", "zarr")))
    np.testing.assert_array_equal(in_memory, on_disk)


def test_the_zarr_and_netcdf_cubes_still_come_from_a_store_on_disk(tmp_path, monkeypatch):
    made = []
    create = zarr_store.create_cube_store

    def spy(*args, **kwargs):
        made.append(args[0])
        return create(*args, **kwargs)

    monkeypatch.setattr(zarr_store, "create_cube_store", spy)
    write(make_cube(), tmp_path / "out", ("tif", "nc"))
    assert len(made) == 1


def test_the_rule_and_its_limit():
    fits = MEMORY_STAGING_BYTES // 4
    assert stages_in_memory(fits, formats=("tif",), offload=False)
    assert not stages_in_memory(fits + 1, formats=("tif",), offload=False)
    assert not stages_in_memory(10, formats=("tif",), offload=True)  # workers read a file
    for formats in (("tif", "zarr"), ("tif", "nc"), ("nc",), ("zarr",)):
        assert not stages_in_memory(10, formats=formats, offload=False)


def test_a_memory_store_refuses_tiles_off_the_grid_and_work_after_discard():
    store = MemoryStore((2, 20, 30), "envelope")
    with pytest.raises(SettingsError):
        store.write_tile(10, 25, np.zeros((2, 16, 16), dtype=np.float32))
    with pytest.raises(OutputError):
        store.finalize()
    store.discard()
    with pytest.raises(OutputError):
        store.read(0)


@settings(max_examples=40, deadline=None)
@given(st.integers(1, 3), st.integers(1, 40), st.integers(1, 40), st.integers(1, 17),
       st.data())
def test_tiles_written_anywhere_read_back_as_written(n, ny, nx, size, data):
    rng = np.random.default_rng(0)
    store = MemoryStore((n, ny, nx), "envelope")
    expected = np.full((n, ny, nx), np.nan, dtype=np.float32)
    for _ in range(data.draw(st.integers(1, 4))):
        r = data.draw(st.integers(0, ny - 1))
        c = data.draw(st.integers(0, nx - 1))
        h, w = min(size, ny - r), min(size, nx - c)
        block = rng.random((n, h, w)).astype(np.float32)
        store.write_tile(r, c, block)
        expected[:, r:r + h, c:c + w] = block
    for i in range(n):
        np.testing.assert_array_equal(store.read(i), expected[i])


def test_each_build_gets_the_store_its_outputs_and_workers_need():
    assert working_kind(10, formats=("tif",), offload=False) == "memory"
    assert working_kind(MEMORY_STAGING_BYTES, formats=("tif",), offload=False) == "zarr"
    assert working_kind(10, formats=("tif",), offload=True) == "file"
    for formats in (("tif", "zarr"), ("tif", "nc"), ("nc",)):
        for offload in (False, True):
            assert working_kind(10, formats=formats, offload=offload) == "zarr"


def _write_in_another_process(store: FileStore, row0: int, col0: int, block) -> None:
    store.write_tile(row0, col0, block)


def test_a_raw_file_store_takes_tiles_from_other_processes(tmp_path):
    # as a build's workers use it: pickled to a spawned process, which writes a tile that
    # this process then reads; tiles never written are marked as having no data
    import concurrent.futures
    import multiprocessing
    store = FileStore.create(tmp_path, (3, 40, 50), "envelope", tile=32)
    assert store.path.parent == tmp_path.resolve() and store.path.name.startswith(".cube.")
    block = np.random.default_rng(3).random((3, 32, 32)).astype(np.float32)
    context = multiprocessing.get_context("spawn")
    with concurrent.futures.ProcessPoolExecutor(1, mp_context=context) as pool:
        pool.submit(_write_in_another_process, store, 0, 32, block[:, :, :18]).result()
    store.write_tile(32, 0, block[:, :8, :])
    store.fill_nan(0, 0, 32, 32)
    store.fill_nan(32, 32, 8, 18)
    expected = np.full((3, 40, 50), np.nan, dtype=np.float32)
    expected[:, 0:32, 32:50] = block[:, :, :18]
    expected[:, 32:40, 0:32] = block[:, :8, :]
    for i in range(3):
        np.testing.assert_array_equal(store.read(i), expected[i])
    store.discard()
    assert not store.path.exists()
    store.discard()  # twice: nothing to remove, no error


def test_a_raw_file_store_cut_short_is_an_output_error(tmp_path):
    store = FileStore.create(tmp_path, (2, 10, 10), "envelope", tile=8)
    with open(store.path, "r+b") as f:
        f.truncate(100)
    with pytest.raises(OutputError, match="shorter"):
        store.read(1)
    with pytest.raises(SettingsError):
        store.write_tile(5, 5, np.zeros((2, 16, 16), dtype=np.float32))


def test_geotiffs_through_a_raw_file_store_equal_those_through_zarr(tmp_path, monkeypatch):
    import slicer.outputs.sink as sink_module
    cube = make_cube(seed=7)
    monkeypatch.setattr(sink_module, "working_kind", lambda *a, **k: "file")
    through_file = slices_of(write(cube, tmp_path / "a", ("tif",)))
    assert not list((tmp_path / "a").glob(".cube.*"))  # the raw file is removed
    monkeypatch.setattr(sink_module, "working_kind", lambda *a, **k: "zarr")
    through_zarr = slices_of(write(cube, tmp_path / "b", ("tif",)))
    np.testing.assert_array_equal(through_file, through_zarr)
    np.testing.assert_array_equal(through_file, cube.values)


def test_a_disk_without_room_for_the_raw_file_is_one_output_error(tmp_path, monkeypatch):
    # the space is reserved when the file is made (a memory-mapped write into a file the disk
    # cannot hold would kill the writer with SIGBUS); ENOSPC there names the folder
    import errno
    import os

    def full(fd, offset, length):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "posix_fallocate", full)
    with pytest.raises(OutputError, match="No space left") as info:
        FileStore.create(tmp_path, (2, 10, 10), "envelope", tile=8)
    assert info.value.where == str(tmp_path)
    assert list(tmp_path.iterdir()) == []  # nothing left behind


def test_a_file_system_that_cannot_reserve_gets_a_sparse_file(tmp_path, monkeypatch):
    import errno
    import os

    def unsupported(fd, offset, length):
        raise OSError(errno.EOPNOTSUPP, os.strerror(errno.EOPNOTSUPP))

    monkeypatch.setattr(os, "posix_fallocate", unsupported)
    store = FileStore.create(tmp_path, (2, 10, 12), "envelope", tile=16)
    assert store.path.stat().st_size == 4 * 2 * 10 * 12
    store.write_tile(0, 0, np.ones((2, 10, 12), dtype=np.float32))
    np.testing.assert_array_equal(store.read(1), np.ones((10, 12), dtype=np.float32))


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 4), ny=st.integers(1, 70), nx=st.integers(1, 70),
       tile=st.sampled_from([16, 32, 48]), seed=st.integers(0, 2**16))
def test_a_raw_file_store_gives_back_every_slice_from_tiles_in_any_order(n, ny, nx, tile, seed):
    # the file holds whole tiles one after another; a slice is gathered from all of them
    import tempfile
    from pathlib import Path
    rng = np.random.default_rng(seed)
    cube = rng.standard_normal((n, ny, nx)).astype(np.float32)
    windows = list(tile_windows(cube.shape, tile))
    with tempfile.TemporaryDirectory() as folder:
        store = FileStore.create(Path(folder), cube.shape, "envelope", tile=tile)
        for k in rng.permutation(len(windows)):
            row0, col0, h, w = windows[k]
            store.write_tile(row0, col0, cube[:, row0:row0 + h, col0:col0 + w])
        assert store.path.stat().st_size == cube.nbytes  # the cells and nothing else
        for i in range(n):
            np.testing.assert_array_equal(store.read(i), cube[i])


def test_a_raw_file_store_takes_only_tiles_of_its_grid(tmp_path):
    store = FileStore.create(tmp_path, (2, 40, 40), "envelope", tile=16)
    for row0, col0, h, w in [(8, 0, 16, 16), (0, 16, 16, 8), (32, 32, 4, 8)]:
        with pytest.raises(SettingsError, match="not a tile"):
            store.write_tile(row0, col0, np.zeros((2, h, w), dtype=np.float32))
    store.write_tile(32, 32, np.ones((2, 8, 8), dtype=np.float32))  # the corner tile
    assert store.read(1)[32:, 32:].tolist() == np.ones((8, 8)).tolist()
