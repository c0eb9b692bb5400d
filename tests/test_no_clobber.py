"""Every public file writer leaves an existing file alone unless asked to replace it.

DEVELOPERS.md: "nothing on disk is lost without an explicit flag". A user's file that happens to
carry the name (a colleague's notes, last week's cube) must survive byte for byte, with one
OutputError naming it, and no temporary file may be left beside it; with ``overwrite=True`` the
same call replaces it.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from slicer.core.errors import OutputError
from slicer.io.linefile import read_line_netcdf, write_line_netcdf
from slicer.io.segy import read_segy_line, write_segy_line
from slicer.outputs.cube import new_cube, read_cube_netcdf, write_cube_netcdf
from slicer.outputs.geotiff import write_slice_geotiffs
from slicer.outputs.outlines import outline, write_outlines
from slicer.velocity.model_file import read_velocity_model, write_velocity_model
from slicer.velocity.models import ConstantVelocity

USER_TEXT = b"a colleague's field notes, not ours\n"


def _line():
    rng = np.random.default_rng(5)
    return xr.DataArray(rng.normal(size=(6, 16)).astype(np.float32), dims=("trace", "twt"),
                        coords={"twt": ("twt", 0.1 * np.arange(16), {"units": "ns"}),
                                "x": ("trace", 500000.0 + 0.05 * np.arange(6)),
                                "y": ("trace", np.full(6, 4649000.0))})


def _cube():
    data = np.ones((2, 40, 40), np.float32)
    data[:, 10:25, 10:25] = 4.0  # one clear anomaly for the outlines
    return new_cube(data, west=500000.0, north=4649002.0, cell=0.05, crs="EPSG:32633",
                    top=np.array([0.2, 0.3]), bottom=np.array([0.3, 0.4]))


WRITERS = {
    "segy": ("line.sgy", lambda p, **kw: write_segy_line(_line(), p, **kw),
             lambda p: read_segy_line(p).shape == (6, 16)),
    "line-netcdf": ("line.nc", lambda p, **kw: write_line_netcdf(_line(), p, **kw),
                    lambda p: read_line_netcdf(p).shape == (6, 16)),
    "cube-netcdf": ("cube.nc", lambda p, **kw: write_cube_netcdf(_cube(), p, **kw),
                    lambda p: read_cube_netcdf(p).shape == (2, 40, 40)),
    "outlines": ("outlines.gpkg",
                 lambda p, **kw: write_outlines(outline(_cube(), min_area=0.01), p, **kw),
                 lambda p: p.read_bytes()[:16] == b"SQLite format 3\x00"),
    "velocity": ("v.toml",
                 lambda p, **kw: write_velocity_model(ConstantVelocity(0.1, 0.005), p, **kw),
                 lambda p: read_velocity_model(p).velocity == 0.1),
}


@pytest.mark.parametrize("kind", sorted(WRITERS))
def test_an_existing_file_survives_unless_overwrite(tmp_path, kind):
    name, write, reads_back = WRITERS[kind]
    path = tmp_path / name
    path.write_bytes(USER_TEXT)
    with pytest.raises(OutputError, match="already exists.*overwrite=True") as info:
        write(path)
    assert info.value.where == str(path)
    assert path.read_bytes() == USER_TEXT
    assert [p.name for p in tmp_path.iterdir()] == [name]  # no temporary left behind
    assert write(path, overwrite=True) == path
    assert reads_back(path)


def test_slices_refuse_a_file_of_a_slice_name_before_writing_any(tmp_path):
    first = write_slice_geotiffs(_cube(), tmp_path, progress=False)
    first[1].write_bytes(USER_TEXT)  # the second slice's name now holds the user's file
    kept = first[0].read_bytes()
    with pytest.raises(OutputError, match="already exists") as info:
        write_slice_geotiffs(_cube() * 2, tmp_path, progress=False)
    assert info.value.where == str(first[0])  # the first name met is named
    assert first[0].read_bytes() == kept and first[1].read_bytes() == USER_TEXT
    assert sorted(tmp_path.iterdir()) == sorted(first)


def test_a_slice_file_that_appears_during_the_write_is_not_replaced(tmp_path, monkeypatch):
    # the names are checked before writing; one created meanwhile (another program) is met by
    # the hard link that puts each slice in place, which cannot replace it (POSIX link(2))
    from slicer.outputs import geotiff
    original = geotiff.SliceTiffWriter.write_slice

    def write_then_intrude(self, index, values):
        original(self, index, values)
        if index == 0:
            self.paths[1].write_bytes(USER_TEXT)

    monkeypatch.setattr(geotiff.SliceTiffWriter, "write_slice", write_then_intrude)
    with pytest.raises(OutputError, match="already exists") as info:
        write_slice_geotiffs(_cube(), tmp_path, progress=False)
    assert info.value.where.endswith(".tif") and "001" in info.value.where
    intruder = next(p for p in tmp_path.iterdir() if p.read_bytes() == USER_TEXT)
    assert intruder.read_bytes() == USER_TEXT
    assert not [p for p in tmp_path.iterdir() if ".tmp" in p.name]  # no temporary left


@pytest.mark.parametrize(("write", "data"), [
    (write_segy_line, _line), (write_line_netcdf, _line),
    (write_velocity_model, lambda: ConstantVelocity(0.1, 0.005))])
def test_a_path_given_before_the_data_is_refused_by_name(tmp_path, write, data):
    # every writer takes the data first (DEVELOPERS.md: "data first"); the order three of
    # them took before 2026-12-04 gets one SettingsError naming the writer, and writes nothing
    from slicer.core.errors import SettingsError
    with pytest.raises(SettingsError, match="comes first and then the path") as info:
        write(tmp_path / "out.file", data())
    assert info.value.where == write.__name__
    assert list(tmp_path.iterdir()) == []
