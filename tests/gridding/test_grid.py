"""Tests of slicer.gridding.grid: the grid of a survey and the gridding of scattered traces."""

import re

import numpy as np
import pytest
import scipy.interpolate
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import SettingsError
from slicer.gridding.grid import count_text, grid_for, line_spacings, neighbour_weights


def parallel_lines(n_lines=9, spacing=0.5, length=6.0, step=0.05, x0=512000.0, y0=4650000.0,
                   zigzag=True):
    xs, ys, ids = [], [], []
    for k in range(n_lines):
        y = y0 + np.arange(0, length + 1e-9, step)
        if zigzag and k % 2:
            y = y[::-1]
        xs.append(np.full(y.size, x0 + k * spacing))
        ys.append(y)
        ids.append(np.full(y.size, k))
    return np.concatenate(xs), np.concatenate(ys), np.concatenate(ids)


def test_grid_snaps_to_whole_cells():
    g = grid_for(np.array([512000.03, 512003.97]), np.array([4650000.07, 4650002.0]), cell=0.1)
    assert g.west == pytest.approx(512000.0) and g.north == pytest.approx(4650002.0)
    assert g.west / 0.1 == pytest.approx(round(g.west / 0.1))
    assert g.x[0] - 0.05 == pytest.approx(g.west) and g.x[-1] + 0.05 >= 512003.97
    assert g.y[-1] - 0.05 <= 4650000.07
    with pytest.raises(SettingsError, match="--cell"):
        grid_for(np.zeros(2), np.zeros(2), cell=0)
    with pytest.raises(SettingsError, match="--cell"):
        grid_for(np.zeros(2), np.zeros(2), cell=-1)


def test_line_spacing_of_a_regular_set():
    x, y, ids = parallel_lines(spacing=0.5)
    np.testing.assert_allclose(line_spacings(x, y, ids), 0.5)


def test_linear_field_is_reproduced_between_lines():
    # Linear interpolation across lines reproduces any linear field exactly (away from the
    # ends of the lines, where the along-line tent is cut off).
    x, y, ids = parallel_lines()
    f = lambda x, y: 2.0 + 0.3 * (x - 512000) - 0.7 * (y - 4650000)  # noqa: E731
    g = grid_for(x, y, cell=0.1)
    w = neighbour_weights(g, x, y, ids)
    out = w.apply(f(x, y)[:, None])[0].reshape(g.ny, g.nx)
    gx, gy = np.meshgrid(g.x, g.y)
    interior = (gy > 4650000.3) & (gy < 4650005.7) & (gx < x.max())
    assert np.isfinite(out[interior]).all()
    np.testing.assert_allclose(out[interior], f(gx, gy)[interior], atol=1e-5)
    rows = np.asarray(w.matrix.sum(axis=1)).ravel()
    np.testing.assert_allclose(rows[~w.empty], 1.0)


def test_no_stripes_compared_with_scipy_griddata():
    # scipy.interpolate.griddata (linear, Delaunay) is the reference interpolant; on a smooth
    # field both must agree closely, and ours must not copy the nearer line into the gap.
    x, y, ids = parallel_lines()
    field = np.sin((x - 512000) * 1.3) + np.cos((y - 4650000) * 0.9)
    g = grid_for(x, y, cell=0.1)
    ours = neighbour_weights(g, x, y, ids).apply(field[:, None])[0].reshape(g.ny, g.nx)
    gx, gy = np.meshgrid(g.x, g.y)
    ref = scipy.interpolate.griddata(np.column_stack([x - 512000, y - 4650000]), field,
                                     (gx - 512000, gy - 4650000), method="linear")
    both = np.isfinite(ref) & np.isfinite(ours)
    assert both.sum() > 0.8 * np.isfinite(ref).sum()
    assert np.sqrt(np.mean((ours[both] - ref[both]) ** 2)) < 0.01


def test_cells_far_from_traces_stay_empty():
    x, y, ids = parallel_lines(n_lines=9)
    gap = (ids == 3) | (ids == 4) | (ids == 5)  # three missing lines: a 2 m hole
    x, y, ids = x[~gap], y[~gap], ids[~gap]
    g = grid_for(x, y, cell=0.1)
    w = neighbour_weights(g, x, y, ids, radius=0.4)
    out = w.apply(np.ones((x.size, 1)))[0].reshape(g.ny, g.nx)
    gx, _ = np.meshgrid(g.x, g.y)
    middle = np.abs(gx - (512000 + 2.0)) < 0.55  # more than 0.4 m from lines at 1.0 and 3.0 m
    assert np.isnan(out[middle]).all()
    assert np.isfinite(out[np.abs(gx - 512000.0) < 0.05]).all()


def test_orthogonal_sets_share_the_grid():
    xa, ya, ia = parallel_lines(n_lines=7, spacing=1.0, length=6.0)
    yb, xb, ib = parallel_lines(n_lines=7, spacing=1.0, length=6.0, x0=4650000.0,
                                y0=512000.0)
    x, y = np.concatenate([xa, xb]), np.concatenate([ya, yb])
    ids = np.concatenate([ia, ib + 100])
    f = 1.0 + 0.2 * (x - 512000) + 0.1 * (y - 4650000)
    g = grid_for(x, y, cell=0.25)
    out = neighbour_weights(g, x, y, ids).apply(f[:, None])[0].reshape(g.ny, g.nx)
    gx, gy = np.meshgrid(g.x, g.y)
    inner = (gx > 512000.5) & (gx < 512005.5) & (gy > 4650000.5) & (gy < 4650005.5)
    expected = 1.0 + 0.2 * (gx - 512000) + 0.1 * (gy - 4650000)
    np.testing.assert_allclose(out[inner], expected[inner], atol=1e-4)


@settings(max_examples=25, deadline=None)
@given(st.integers(2, 6), st.floats(0.2, 1.5), st.integers(0, 10_000))
def test_gridded_values_are_convex_combinations(n_lines, spacing, seed):
    x, y, ids = parallel_lines(n_lines=n_lines, spacing=spacing, length=2.0, step=0.1)
    values = np.random.default_rng(seed).normal(size=x.size)
    g = grid_for(x, y, cell=0.2)
    out = neighbour_weights(g, x, y, ids).apply(values[:, None])[0]
    finite = out[np.isfinite(out)]
    assert finite.size > 0
    assert finite.min() >= values.min() - 1e-5 and finite.max() <= values.max() + 1e-5


def test_nan_values_are_left_out():
    x, y, ids = parallel_lines(n_lines=3)
    values = np.ones((x.size, 2))
    values[ids == 1, 1] = np.nan
    g = grid_for(x, y, cell=0.1)
    out = neighbour_weights(g, x, y, ids).apply(values)
    np.testing.assert_allclose(out[0][np.isfinite(out[0])], 1.0)
    assert np.nanmax(np.abs(out[1] - 1.0)) < 1e-6


def test_bad_radius():
    x, y, ids = parallel_lines(n_lines=3)
    with pytest.raises(SettingsError, match="--radius"):
        neighbour_weights(grid_for(x, y, cell=0.1), x, y, ids, radius=-1.0)


def test_tiles_give_the_same_grid_as_one_pass():
    from slicer.gridding.grid import grid_tile, tile_count, tile_jobs, trace_frame
    x, y, ids = parallel_lines(n_lines=9)
    values = np.column_stack([np.sin(x - 512000), np.cos(y - 4650000)])
    g = grid_for(x, y, cell=0.1)
    whole = neighbour_weights(g, x, y, ids).apply(values).reshape(2, g.ny, g.nx)
    frame = trace_frame(x, y, ids, cell=g.cell)
    tiled = np.full_like(whole, -999.0)
    jobs = list(tile_jobs(g, frame, values, tile=16))
    assert len(jobs) == tile_count(g, 16) > 4
    assert max(j.frame.x.size for j in jobs) < x.size  # each tile sees only nearby traces
    for job in jobs:
        r, c, block = grid_tile(job)
        tiled[:, r:r + block.shape[1], c:c + block.shape[2]] = block
    np.testing.assert_allclose(tiled, whole, rtol=1e-6, atol=1e-7)


def test_a_corner_tile_of_one_cell_grids_like_one_pass():
    # A tile of one cell cannot tell the cell size from its coordinates; the grid's corner cell
    # came out of a one-cell tile gridded as if cells were 1 m (cells over 1 m then missed
    # traces; a 1e6 m cell asked for terabytes). Reference: the same grid in one pass
    # (neighbour_weights), cells 1.25 m.
    import dataclasses

    from slicer.gridding.grid import Grid, grid_tile, tile_jobs, trace_frame
    x, y, ids = parallel_lines(n_lines=9)
    values = np.column_stack([np.sin(x - 512000), np.cos(y - 4650000)])
    g = grid_for(x, y, cell=1.25)  # coarser than the 1 m taken
    t = 2
    g = dataclasses.replace(g, nx=(g.nx // t - 1) * t + 1, ny=(g.ny // t - 1) * t + 1)
    assert isinstance(g, Grid) and g.nx % t == 1 and g.ny % t == 1
    whole = neighbour_weights(g, x, y, ids).apply(values).reshape(2, g.ny, g.nx)
    assert np.isfinite(whole[:, -1, -1]).all()  # the corner cell has traces near it
    tiled = np.full_like(whole, -999.0)
    for job in tile_jobs(g, trace_frame(x, y, ids, cell=g.cell), values, tile=t):
        r, c, block = grid_tile(job)
        tiled[:, r:r + block.shape[1], c:c + block.shape[2]] = block
    np.testing.assert_allclose(tiled, whole, rtol=1e-6, atol=1e-7)
    # one cell of 1000 km: every trace in it, equal values average to themselves (the 1 m
    # taken had asked for a 10 TiB array)
    huge = grid_for(x, y, cell=1e6)
    out = neighbour_weights(huge, x, y, ids).apply(np.full((x.size, 1), 2.5))
    assert (huge.nx, huge.ny) == (1, 1) and out.ravel().tolist() == [2.5]


# --- the grid's size is counted before it is laid out ------------------------------------------


@pytest.mark.parametrize("far", [1e300, 1e308, 5120040.0])
def test_huge_extent_is_refused_in_one_short_line(far):
    with pytest.raises(SettingsError, match="--cell: a 0.1 m cell gives") as info:
        grid_for(np.array([512000.0, far]), np.array([4650000.0, 4650002.0]), cell=0.1)
    message = str(info.value)
    assert "\n" not in message and not re.search(r"\d{13}", message)
    assert f"extent of {far - 512000.0:.4g} x 2 m" in message


def test_non_finite_positions_are_refused():
    for bad in (np.nan, np.inf):
        with pytest.raises(SettingsError, match="NaN or infinite"):
            grid_for(np.array([0.0, bad]), np.array([0.0, 1.0]), cell=0.1)
    with pytest.raises(SettingsError, match="no trace positions"):
        grid_for(np.array([]), np.array([]), cell=0.1)


def test_max_cells_is_exact():
    x, y = np.array([0.0, 10.0]), np.array([0.0, 5.0])  # 100 x 50 cells of 0.1 m
    assert grid_for(x, y, cell=0.1, max_cells=5000).size == 5000
    with pytest.raises(SettingsError, match="100 x 50 cells .* more than 4999"):
        grid_for(x, y, cell=0.1, max_cells=4999)


def test_count_text():
    assert count_text(4097) == "4097" and count_text(4096.2) == "4097"
    assert count_text(1e301) == "1e+301" and count_text(float("inf")) == "countless"


@settings(max_examples=60, deadline=None)
@given(n_lines=st.integers(1, 6), spacing=st.floats(0.2, 1.5), step=st.floats(0.03, 0.3),
       radius=st.floats(0.12, 1.2), cell=st.sampled_from([0.05, 0.1, 0.25]),
       seed=st.integers(0, 2**16))
def test_a_cell_is_empty_when_it_has_no_weight_or_no_trace_within_the_radius(
        n_lines, spacing, step, radius, cell, seed):
    # With no gap bridged (max_gap 0), a cell is NaN exactly when no weight reaches it or no
    # trace lies within the radius: checked against every cell-trace distance (brute force).
    rng = np.random.default_rng(seed)
    x, y, ids = parallel_lines(n_lines=n_lines, spacing=spacing, length=3.0, step=step,
                               x0=512000.0 + rng.random(), y0=4650000.0 + rng.random())
    drop = rng.random(x.size) < 0.2  # holes along the lines too
    if drop.all():
        drop[0] = False
    x, y, ids = x[~drop], y[~drop], ids[~drop]
    g = grid_for(x, y, cell=cell)
    w = neighbour_weights(g, x, y, ids, radius=radius, max_gap=0.0)
    gx, gy = (a.ravel() for a in np.meshgrid(g.x, g.y))
    nearest = np.sqrt(((gx[:, None] - x) ** 2 + (gy[:, None] - y) ** 2).min(axis=1))
    weight = np.asarray(w.matrix.sum(axis=1)).ravel()
    expected = (weight <= 0) | (nearest > radius)
    tie = np.abs(nearest - radius) < 1e-9  # the tree's bound at exactly the radius
    np.testing.assert_array_equal(w.empty[~tie], expected[~tie])
