"""Tests of slicer.outputs.cube_index: ``cube.sel(depth=v)`` picks the slice whose window holds v.

The oracle is the definition of a window, written out with plain comparisons: the half-open
interval ``[top, bottom)`` (common practice; the same windows slicer.gridding.windows averages
over), independent of the pandas IntervalIndex the index uses.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from slicer.core.errors import SlicerError
from slicer.outputs.cube import new_cube, read_cube_netcdf, write_cube_netcdf
from slicer.outputs.cube_index import WindowIndex
from slicer.outputs.zarr_store import create_cube_store, open_cube_zarr


def cube_of(tops, bottoms, *, axis="depth"):
    n = len(tops)
    data = np.arange(n, dtype=np.float32)[:, None, None] * np.ones((n, 2, 3), np.float32)
    return new_cube(data, west=0.0, north=2.0, cell=1.0, crs=None, top=tops, bottom=bottoms,
                    axis=axis)


def expected(tops, bottoms, v):
    """The window for v by the documented rules, from plain comparisons."""
    tops, bottoms = np.asarray(tops), np.asarray(bottoms)
    centres = (tops + bottoms) / 2
    inside = [i for i in range(len(tops)) if tops[i] <= v < bottoms[i]]
    if inside:
        return min(inside, key=lambda i: (abs(v - centres[i]), i))
    distance = [max(tops[i] - v, v - bottoms[i]) for i in range(len(tops))]
    return min(range(len(tops)), key=lambda i: (distance[i], i))


@st.composite
def layouts(draw):
    """Window layouts: contiguous, with gaps or overlapping; centres strictly increasing."""
    n = draw(st.integers(1, 8))
    tops = draw(st.lists(st.floats(0, 20, allow_subnormal=False), min_size=n, max_size=n))
    thick = draw(st.lists(st.floats(0.01, 5), min_size=n, max_size=n))
    if draw(st.booleans()):  # contiguous: each window starts where the last one ended
        tops = list(np.cumsum([tops[0], *thick[:-1]]))
    pairs = sorted(zip(tops, (t + h for t, h in zip(tops, thick, strict=True)), strict=True),
                   key=lambda p: p[0] + p[1])
    t, b = np.array([p[0] for p in pairs]), np.array([p[1] for p in pairs])
    assume(np.all(np.diff((t + b) / 2) > 0) and np.all(t < b))
    return t, b


@settings(max_examples=150, deadline=None)
@given(layout=layouts(), which=st.integers(0, 7), u=st.floats(0, 1, exclude_max=True))
def test_a_depth_inside_a_window_selects_that_window(layout, which, u):
    tops, bottoms = layout
    j = which % len(tops)
    v = float(tops[j] + u * (bottoms[j] - tops[j]))
    assume(tops[j] <= v < bottoms[j])
    cube = cube_of(tops, bottoms)
    for picked in (cube.sel(depth=v), cube.sel(depth=v, method="nearest")):
        k = int(picked.values[0, 0])  # each slice holds its own number
        assert tops[k] <= v < bottoms[k]
        assert k == expected(tops, bottoms, v)
        assert picked.depth_top.item() == tops[k]
    if not any(tops[i] <= v < bottoms[i] for i in range(len(tops)) if i != j):
        assert int(cube.sel(depth=v).values[0, 0]) == j  # no overlap there: exactly j


@settings(max_examples=100, deadline=None)
@given(layout=layouts(), v=st.floats(-5, 30))
def test_outside_every_window_only_nearest_finds_a_slice(layout, v):
    tops, bottoms = layout
    assume(not any(tops[i] <= v < bottoms[i] for i in range(len(tops))))
    cube = cube_of(tops, bottoms)
    with pytest.raises(KeyError) as info:  # xarray's convention for a label not found
        cube.sel(depth=v)
    assert isinstance(info.value, SlicerError)
    assert int(cube.sel(depth=v, method="nearest").values[0, 0]) == expected(tops, bottoms, v)


def test_a_shared_boundary_belongs_to_the_deeper_window():
    cube = cube_of([0.0, 0.5], [0.5, 1.0])
    assert cube.sel(depth=0.5).depth_top.item() == 0.5  # [top, bottom): common practice
    assert cube.sel(depth=0.4999).depth_top.item() == 0.0
    with pytest.raises(KeyError):
        cube.sel(depth=1.0)  # the last bottom is outside
    assert cube.sel(depth=1.0, method="nearest").depth_top.item() == 0.5


def test_nearest_centre_is_not_the_window_it_lies_in():
    # Windows of unequal thickness: 0.19 m lies in [0, 0.2) but nearer the next centre.
    tops, bottoms = [0.0, 0.2], [0.2, 0.3]
    cube = cube_of(tops, bottoms)
    assert cube.sel(depth=0.19, method="nearest").depth_top.item() == 0.0
    # xarray's default index (window centres) gives the other one: what this index fixes.
    plain = cube.drop_indexes("depth").set_xindex("depth")
    assert plain.sel(depth=0.19, method="nearest").depth_top.item() == 0.2


def test_tolerance_and_unsupported_methods():
    cube = cube_of([0.0, 1.0], [0.5, 1.5])
    assert cube.sel(depth=0.7, method="nearest", tolerance=0.3).depth_top.item() == 0.0
    with pytest.raises(KeyError):
        cube.sel(depth=0.8, method="nearest", tolerance=0.1)
    with pytest.raises(SlicerError, match="nearest"):
        cube.sel(depth=0.7, method="pad")


def test_lists_arrays_and_dataarrays_select_slice_by_slice():
    cube = cube_of([0.0, 0.1, 0.2], [0.1, 0.2, 0.3])
    assert cube.sel(depth=[0.25, 0.0, 0.1]).depth_top.values.tolist() == [0.2, 0.0, 0.1]
    points = xr.DataArray([0.05, 0.15], dims="pick")
    picked = cube.sel(depth=points)  # vectorised indexing (xarray's rules)
    assert picked.dims == ("pick", "y", "x")
    assert picked.depth_top.values.tolist() == [0.0, 0.1]
    # a slice keeps the windows whose centres lie in it, as xarray's default index did
    assert cube.sel(depth=slice(0.1, 0.3)).depth.values.tolist() == pytest.approx([0.15, 0.25])


def test_the_index_follows_isel_concat_and_alignment():
    cube = cube_of([0.0, 0.1, 0.2, 0.3], [0.1, 0.2, 0.3, 0.4])
    part = cube.isel(depth=[1, 3])
    assert isinstance(part.xindexes["depth"], WindowIndex)
    assert part.sel(depth=0.35).depth_top.item() == 0.3
    with pytest.raises(KeyError):
        part.sel(depth=0.25)  # that window was left out
    whole = xr.concat([cube.isel(depth=[0, 1]), cube.isel(depth=[2, 3])], "depth")
    assert whole.xindexes["depth"].equals(cube.xindexes["depth"])
    difference = cube - part  # aligned on windows: the two in common
    assert difference.depth_top.values.tolist() == [0.1, 0.3]
    assert float(np.abs(difference).max()) == 0
    assert cube.isel(depth=0).sel(x=0.5).dims == ("y",)  # a scalar slice drops the index


@pytest.mark.parametrize("axis", ["depth", "twt"])
def test_files_store_centres_and_readers_rebuild_the_index(tmp_path, axis):
    tops, bottoms = np.array([0.0, 0.2, 0.25]), np.array([0.2, 0.3, 0.6])  # overlap
    cube = cube_of(tops, bottoms, axis=axis)
    nc = read_cube_netcdf(write_cube_netcdf(cube, tmp_path / "c.nc"))
    with create_cube_store(tmp_path / "c.zarr", cube, tile=16) as store:
        store.write_tile(0, 0, cube.values)
    for back in (nc, open_cube_zarr(tmp_path / "c.zarr")):
        assert isinstance(back.xindexes[axis], WindowIndex)
        assert back[axis].dtype == np.float64  # centres, not interval objects
        np.testing.assert_array_equal(back[axis].values, (tops + bottoms) / 2)
        for v in (0.1, 0.22, 0.27, 0.5):
            assert int(back.sel({axis: v}).values[0, 0]) == expected(tops, bottoms, v)
