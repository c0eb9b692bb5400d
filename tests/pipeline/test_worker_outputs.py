"""Outputs written by worker processes (slicer.pipeline.worker_outputs) equal those of the threaded
sink."""

from __future__ import annotations

import builtins
import concurrent.futures
import errno
import io
import json
import os

import numpy as np
import pytest
import rasterio
import tifffile

import slicer
from slicer.core.errors import OutputError
from slicer.outputs.zarr_store import open_cube_zarr
from slicer.pipeline import worker_outputs as _worker_outputs


@pytest.fixture(scope="module")
def threaded(small_survey, tmp_path_factory):
    out = tmp_path_factory.mktemp("threads") / "o"
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, depths="0:2.4:0.1", cell=0.1,
                                    scheduler="threads", out=out, formats="tif,zarr,nc")
    slicer.build(settings, progress=False)
    return settings, out


def modes(folder):
    """The (kind, permission bits) of ``folder`` and everything in it."""
    return {("dir" if p.is_dir() else "file", p.stat().st_mode & 0o777)
            for p in [folder, *folder.rglob("*")]}


def _tiffs(folder):
    return sorted((folder / "slices").glob("*.tif"))


@pytest.mark.parametrize("scheduler", ["processes", "local:2"])
def test_worker_written_outputs_equal_the_threaded_ones(threaded, tmp_path, scheduler):
    settings, reference = threaded
    out = tmp_path / "o"
    umask = os.umask(0o027)  # the workers' files get the user's normal mode too
    try:
        result = slicer.build(settings.replace(scheduler=scheduler, out=out), progress=False)
    finally:
        os.umask(umask)
    assert modes(out) == {("dir", 0o750), ("file", 0o640)}
    assert result.record["engine"].startswith(scheduler.split(":")[0])
    names = [p.name for p in _tiffs(out)]
    assert names == [p.name for p in _tiffs(reference)] and len(names) == 24
    for mine, theirs in zip(_tiffs(out), _tiffs(reference), strict=True):
        with rasterio.open(mine) as a, rasterio.open(theirs) as b:
            np.testing.assert_allclose(a.read(1), b.read(1), rtol=1e-6, equal_nan=True)
            assert a.transform == b.transform and a.crs == b.crs
            assert a.descriptions == b.descriptions and a.units == b.units
        # tifffile, an independent TIFF reader: the same metadata and tile layout
        with tifffile.TiffFile(mine) as a, tifffile.TiffFile(theirs) as b:
            assert a.pages[0].tags["GDAL_METADATA"].value == \
                b.pages[0].tags["GDAL_METADATA"].value
            assert a.pages[0].tilewidth == b.pages[0].tilewidth
    for name in ("cube.nc", "cube.zarr"):
        read = (slicer.read_cube_netcdf if name.endswith(".nc")
                else open_cube_zarr)
        np.testing.assert_allclose(read(out / name).values, read(reference / name).values,
                                   rtol=1e-6, equal_nan=True)
    for page in ("overview-01.png", "overview-02.png"):  # 24 slices, 12 to a page
        assert (out / page).stat().st_size > 10_000
    assert not [p for p in out.rglob(".*") if p.name != ".zattrs" and ".zarr" not in str(p)
                and p.suffix != ".zgroup"]  # no temporary file left behind
    record = json.loads((out / "record.json").read_text())
    assert record["outputs"] == json.loads((reference / "record.json").read_text())["outputs"]
    # the page's slices, taken by the workers as they wrote the slices, as in the threaded build
    assert (out / "viewer.html").read_text() == (reference / "viewer.html").read_text()


@pytest.mark.parametrize(("formats", "scheduler"), [("tif", "processes"), ("nc", "processes"),
                                                    ("tif", "local:2")])
def test_workers_write_only_the_formats_asked_for(threaded, tmp_path, formats, scheduler):
    # GeoTIFFs alone: the workers (a process pool, or a LocalCluster's) share the cube through
    # one raw file in the stage folder; the NetCDF cube through a Zarr store
    settings, reference = threaded
    out = tmp_path / "o"
    result = slicer.build(settings.replace(scheduler=scheduler, out=out, formats=formats),
                          progress=False)
    pictures = [f"radargrams/{p.name}" for p in (out / "radargrams").iterdir()]
    assert len(pictures) == 6  # one per line of the small survey
    expected = {"overview-01.png", "overview-02.png", "record.json", "viewer.html", "radargrams",
                *pictures}
    if formats == "tif":
        expected |= {"slices", *(f"slices/{p.name}" for p in _tiffs(reference))}
    else:
        expected.add("cube.nc")
    # nothing else: no cube.zarr (the working store is deleted), no temporary file
    assert {p.relative_to(out).as_posix() for p in out.rglob("*")} == expected
    assert not list(tmp_path.glob("o.slicer-*"))
    # the returned cube (from the GeoTIFFs, or cube.nc) is the threaded build's Zarr cube
    np.testing.assert_allclose(result.cube.values, open_cube_zarr(reference / "cube.zarr").values,
                               rtol=1e-6, equal_nan=True)
    assert result.record["grid"]["empty_cells"] == json.loads(
        (reference / "record.json").read_text())["grid"]["empty_cells"]


class _InThread:
    """An engine stand-in whose 'workers' are threads of this process (for a failure test)."""

    def __init__(self):
        self._pool = concurrent.futures.ThreadPoolExecutor(max_workers=2)

    def offloader(self):
        return self._pool.submit

    def map(self, func, items, **_):
        return map(func, items)


def test_a_failing_slice_leaves_nothing_behind(threaded, tmp_path, monkeypatch):
    settings, reference = threaded
    cube = open_cube_zarr(reference / "cube.zarr")

    def broken(job, values=None):
        raise OutputError("disk full (simulated)", where=job.final)

    monkeypatch.setattr(_worker_outputs, "write_slice_file", broken)
    out = tmp_path / "o"
    layout_jobs = []  # the tiles are written by hand below; no gridding needed
    with pytest.raises(OutputError, match="disk full"):
        with _worker_outputs.WorkerSink(out, cube, engine=_InThread(), progress=False) as sink:
            sink.grid(layout_jobs, count=0)
            sink._store.write_tile(0, 0, cube.values)
    assert not out.exists() or not any(out.rglob("*"))


class _FillingDisk(io.FileIO):
    """A file on a disk that fills once it has grown by ``room`` bytes (errno 28)."""

    room = 10_000

    def __init__(self, *args):
        super().__init__(*args)
        self._full_at = os.fstat(self.fileno()).st_size + self.room

    def write(self, data):
        if self.tell() + len(data) > self._full_at:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return super().write(data)


def test_a_full_disk_while_the_chunks_are_stored_ends_in_one_error(threaded, tmp_path,
                                                                    monkeypatch):
    # The NetCDF file made by a worker is filled with the slices' chunks by this process
    # (h5py): HDF5 must not meet the full disk, or it crashed closing the file again at exit.
    import slicer.core.atomic
    settings, reference = threaded
    cube = open_cube_zarr(reference / "cube.zarr")

    def on_a_small_disk(file, mode="r", *args, **kwargs):
        if mode == "r+b":  # the chunks, stored into the file made whole beforehand
            return _FillingDisk(file, "r+")
        return builtins.open(file, mode, *args, **kwargs)

    monkeypatch.setattr(slicer.core.atomic, "open", on_a_small_disk, raising=False)
    out = tmp_path / "o"
    with pytest.raises(OutputError, match="cannot write NetCDF.*No space left") as info:
        with _worker_outputs.WorkerSink(out, cube, engine=_InThread(), progress=False) as sink:
            sink.grid([], count=0)
            sink._store.write_tile(0, 0, cube.values)
    assert info.value.where == str(out / "cube.nc")
    assert not out.exists() or not any(out.rglob("*"))
    import h5py
    assert [i for i in h5py.h5f.get_obj_ids(types=h5py.h5f.OBJ_FILE)
            if str(tmp_path) in i.name.decode()] == []


#: Run as a fresh process's main script: every worker imports it again as ``__mp_main__``
#: (multiprocessing prepares a forked-server worker so) and from then on notes each import of
#: the array libraries in the log.
PROBE = '''
import os, sys
LOG = sys.argv[2]
WATCHED = ("xarray", "pandas", "dask", "pyproj", "matplotlib")

class Note:
    def find_spec(self, name, path=None, target=None):
        if name in WATCHED and name not in sys.modules:
            with open(LOG, "a") as f:
                f.write(f"{os.getpid()} import {name}\\n")
        return None

if __name__ == "__mp_main__":  # a worker
    with open(LOG, "a") as f:
        f.write(f"{os.getpid()} worker " + " ".join(m for m in WATCHED if m in sys.modules)
                + "\\n")
    sys.meta_path.insert(0, Note())

if __name__ == "__main__":
    import slicer
    settings = slicer.load_settings(sys.argv[1], sample_interval=0.1, time_zero=3.0,
                                    velocity=0.1, depths="0:2.4:0.1", cell=0.1,
                                    scheduler="processes", out=sys.argv[3])
    slicer.build(settings, progress=False)
'''


def test_a_builds_workers_never_import_the_array_or_drawing_libraries(small_survey, tmp_path):
    """A GeoTIFF build's workers grid the tiles and write the slices without xarray, pandas,
    dask, pyproj or matplotlib: the fork server does not import them (0.3-0.4 s of its CPU)
    and no task does; the overview, drawn from the cube's DataArray template, is drawn by the
    calling process. Every worker notes what it finds loaded as it starts and each import
    after (a meta path finder, PROBE); the check fails with the overview drawn on a worker
    (checked)."""
    import subprocess
    import sys
    probe, log, out = tmp_path / "probe.py", tmp_path / "imports.log", tmp_path / "out"
    probe.write_text(PROBE)
    done = subprocess.run([sys.executable, str(probe), str(small_survey.line_table), str(log),
                           str(out)], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    notes = log.read_text().splitlines()
    started = [n for n in notes if n.split()[1] == "worker"]
    assert started and all(n.split()[2:] == [] for n in started), notes
    assert [n for n in notes if n.split()[1] == "import"] == []
    assert list(out.glob("overview*.png")) and len(list((out / "slices").glob("*.tif"))) == 24
