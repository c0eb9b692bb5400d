"""Gaps between survey lines (issue 12, item 1: "gaps are never bridged by smearing").

Every survey here is laid out by hand, so the distance from each line to the next line on
either side is known exactly; the expected grids are worked out from that layout (linear
interpolation across lines, analytic fields, a brute-force evaluation of the documented
weights) or taken from scipy.interpolate.griddata, never from the code under test.
"""

import math

import numpy as np
import pytest
import scipy.interpolate
import xarray as xr

import slicer
from slicer.core.errors import SettingsError
from slicer.gridding.grid import MAX_GAP_SPACINGS, grid_for, neighbour_weights, trace_frame
from slicer.gridding.neighbours import side_distances, survey_spacing

STEP = 0.05  # trace spacing along the lines (m)


def lines_at(across, *, length=4.0, direction="x", zigzag=True, start=0.0):
    """Straight parallel lines at the given across offsets: x, y, line id of every trace.

    ``direction="x"``: lines run west-east at northings ``across``; ``"y"``: south-north at
    eastings ``across``. Every other line runs backwards (a crew walking both ways).
    """
    xs, ys, ids = [], [], []
    along = start + np.arange(0.0, length + 1e-9, STEP)
    for k, c in enumerate(across):
        a = along[::-1] if zigzag and k % 2 else along
        xs.append(a if direction == "x" else np.full(a.size, c))
        ys.append(np.full(a.size, c) if direction == "x" else a)
        ids.append(np.full(a.size, k))
    return np.concatenate(xs), np.concatenate(ys), np.concatenate(ids)


def grid_of(x, y, ids, values, *, cell=0.1, **kw):
    g = grid_for(x, y, cell=cell)
    w = neighbour_weights(g, x, y, ids, **kw)
    out = w.apply(np.asarray(values, dtype=np.float64)[:, None])[0].reshape(g.ny, g.nx)
    gx, gy = np.meshgrid(g.x, g.y)
    return out, gx, gy, w


def brute_force(x, y, ids, values, cells_x, cells_y, *, sides, along, radius, bridged):
    """The documented weights, evaluated cell by cell from the hand-made layout.

    ``sides[k] = (left, right)``: the tent half-widths of line ``k`` (west-east lines: left is
    north for a line running east, south for one running west); ``bridged[k]`` the same pair
    of booleans. A cell is NaN when no weight reaches it, or when no trace is within ``radius``
    and no bridged tent reaches it.
    """
    out = np.full(cells_x.shape, np.nan)
    east = {k: x[ids == k][-1] > x[ids == k][0] for k in np.unique(ids)}
    sign = np.array([1.0 if east[k] else -1.0 for k in ids])
    left = np.array([sides[k][0] for k in ids])
    right = np.array([sides[k][1] for k in ids])
    b_left = np.array([bridged[k][0] for k in ids])
    b_right = np.array([bridged[k][1] for k in ids])
    for idx in np.ndindex(cells_x.shape):
        cx, cy = cells_x[idx], cells_y[idx]
        a = np.abs(cx - x)
        b = (cy - y) * sign  # left positive for a west-east line
        s = np.where(b >= 0, left, right)
        w = np.clip(1 - a / along, 0, None) * np.clip(1 - np.abs(b) / s, 0, None)
        near = np.hypot(cx - x, cy - y).min() <= radius
        via_bridge = (w[np.where(b >= 0, b_left, b_right)] > 0).any()
        if w.sum() > 0 and (near or via_bridge):
            out[idx] = (w @ values) / w.sum()
    return out


# --- the distances to the neighbours, side by side -----------------------------------------------


def test_side_distances_are_measured_on_each_side():
    # lines at 0, 0.25, 0.75, 1.75 and 2.0 m north; line 1 runs west (zigzag), so its left is
    # south. Hand-worked: the gap north of each line and the gap south of it.
    across = [0.0, 0.25, 0.75, 1.75, 2.0]
    x, y, ids = lines_at(across)
    left, right = side_distances(x, y, ids, limit=5.0)
    north = {0: 0.25, 1: 0.5, 2: 1.0, 3: 0.25, 4: np.nan}
    south = {0: np.nan, 1: 0.25, 2: 0.5, 3: 1.0, 4: 0.25}
    for k in range(5):
        eastward = k % 2 == 0
        got_north = (left if eastward else right)[ids == k]
        got_south = (right if eastward else left)[ids == k]
        np.testing.assert_allclose(got_north, north[k], atol=1e-9)
        np.testing.assert_allclose(got_south, south[k], atol=1e-9)
    # only lines within the limit are looked for
    left, right = side_distances(x, y, ids, limit=0.6)
    assert np.isnan(left[ids == 2]).all() and np.isnan(left[ids == 3]).all()  # the 1 m gap


def test_survey_spacing_is_the_median_gap():
    # Hand counts of the nearest-neighbour distances on each side of every line:
    # two pairs 0.5 m apart with 1.5 m between them: 0.5, 0.5, 1.5, 1.5, 0.5, 0.5 -> 0.5
    assert survey_spacing(*lines_at([0.0, 0.5, 2.0, 2.5])) == pytest.approx(0.5)
    # gaps 0.25, 0.5, 1.0, 0.25, 0.5, 1.0, 0.25, each seen twice: six 0.25, four 0.5, four 1.0
    across = np.cumsum([0.0, 0.25, 0.5, 1.0, 0.25, 0.5, 1.0, 0.25])
    assert survey_spacing(*lines_at(across)) == pytest.approx(0.5)
    # one line, or only orthogonal lines: none
    assert np.isnan(survey_spacing(*lines_at([0.0])))


def test_partial_lines_count_only_where_they_run():
    # a short line (1.5 m to 2.5 m east) 0.5 m north of a 4 m line: the long line's traces
    # beside it see it, the others see the line 1.0 m north
    x, y, ids = lines_at([0.0, 1.0], zigzag=False)
    a = np.arange(1.5, 2.5 + 1e-9, STEP)
    x, y = np.concatenate([x, a]), np.concatenate([y, np.full(a.size, 0.5)])
    ids = np.concatenate([ids, np.full(a.size, 2)])
    left, _ = side_distances(x, y, ids, limit=2.0, overhang=0.0)
    beside = (ids == 0) & (x >= 1.5 - 1e-9) & (x <= 2.5 + 1e-9)
    np.testing.assert_allclose(left[beside], 0.5, atol=1e-9)
    np.testing.assert_allclose(left[(ids == 0) & ~beside], 1.0, atol=1e-9)


# --- a full regular survey grids as before -------------------------------------------------------


def test_regular_survey_matches_the_rule_before_the_fix():
    # Before the fix every line used its spacing (0.5 m here) on both sides and cells farther
    # than the radius from every trace were NaN; on a regular survey the per-side rule must
    # give the same grid, cell for cell (brute force of the old rule on the known layout).
    across = 0.5 * np.arange(6)
    x, y, ids = lines_at(across, length=2.0)
    values = np.sin(1.7 * x) + np.cos(2.3 * y) + 0.1 * ids
    out, gx, gy, w = grid_of(x, y, ids, values)
    sides = {k: (0.5, 0.5) for k in range(6)}
    ref = brute_force(x, y, ids, values, gx, gy, sides=sides, along=w.along, radius=w.radius,
                      bridged={k: (False, False) for k in range(6)})
    assert np.array_equal(np.isnan(out), np.isnan(ref))
    np.testing.assert_allclose(out, ref, atol=1e-6)  # float32 output


def test_regular_survey_agrees_with_scipy_griddata():
    # scipy.interpolate.griddata(method="linear") is the outside reference. Both interpolants
    # are weighted means of trace values that reproduce linear fields, so each one's error at
    # a point p is at most 1/2 sum_i w_i (v_i - p)' H (v_i - p) (Taylor's theorem; H the
    # Hessian, diagonal here). For f = sin(1.3 x) + cos(0.9 y), |f_xx| <= 1.69, |f_yy| <= 0.81:
    # ours interpolates linearly across lines 0.5 m apart (sum w dy^2 <= 0.5^2 / 4) and, along
    # them, averages with tent weights 1/2, 1/4, 1/4 at 0, +-0.05 m (sum w dx^2 = 0.00125);
    # each Delaunay triangle has its corners on two neighbouring lines within 0.1 m along.
    x, y, ids = lines_at(0.5 * np.arange(9), length=6.0)
    field = np.sin(1.3 * x) + np.cos(0.9 * y)
    out, gx, gy, _ = grid_of(x, y, ids, field)
    ref = scipy.interpolate.griddata(np.column_stack([x, y]), field, (gx, gy), method="linear")
    both = np.isfinite(ref) & np.isfinite(out)
    assert both.sum() > 0.9 * np.isfinite(ref).sum()
    ours = 0.5 * (0.5**2 / 4 * 0.81 + 0.00125 * 1.69)  # 0.0264
    delaunay = 0.5 * (0.5**2 / 4 * 0.81 + 0.1**2 * 1.69)  # 0.0338
    bound = ours + delaunay
    assert np.abs(out[both] - ref[both]).max() <= bound
    assert np.sqrt(np.mean((out[both] - ref[both]) ** 2)) < 0.01


# --- uneven spacing ------------------------------------------------------------------------------


def test_uneven_spacing_reproduces_a_linear_field():
    # gaps of 0.25, 0.5 and 1.0 m in turn (line spacing 0.5 m, the median of the gaps seen
    # from both sides, so max_gap is 1.25 m and all are bridged). Linear interpolation between
    # each pair of neighbours reproduces a linear field exactly; weights spanning the wider
    # gap on the narrow side (the rule before the fix) do not (errors up to 0.14 here).
    across = np.cumsum([0.0, 0.25, 0.5, 1.0, 0.25, 0.5, 1.0, 0.25])
    x, y, ids = lines_at(across)
    f = lambda x, y: 1.0 + 0.3 * x - 0.8 * y  # noqa: E731
    out, gx, gy, _ = grid_of(x, y, ids, f(x, y))
    inner = (gx > 0.15) & (gx < 3.85) & (gy > across[0]) & (gy < across[-1])
    assert np.isfinite(out[inner]).all()
    np.testing.assert_allclose(out[inner], f(gx, gy)[inner], atol=1e-5)


# --- one dropped line ----------------------------------------------------------------------------


def line_constants(n, seed=0):
    return np.random.default_rng(seed).uniform(-3.0, 3.0, n)


def test_one_dropped_line_is_bridged_between_its_neighbours():
    # Nine lines 0.5 m apart, each reading one constant c_k; line 4 (at 2.0 m) is dropped.
    # Ground truth: between lines 3 and 5 the grid is (1 - t) c3 + t c5, t = (y - 1.5) / 1.0;
    # everywhere else it is what the full survey gives (the dropped line's tents reached only
    # its neighbours, so nothing at or beyond them may change).
    across = 0.5 * np.arange(9)
    c = line_constants(9)
    x, y, ids = lines_at(across)
    full, gx, gy, _ = grid_of(x, y, ids, c[ids])
    keep = ids != 4
    out, _, _, w = grid_of(x[keep], y[keep], ids[keep], c[ids[keep]])
    assert w.max_gap == pytest.approx(MAX_GAP_SPACINGS * 0.5)
    band = (gy > 1.5 + 1e-9) & (gy < 2.5 - 1e-9)
    t = (gy - 1.5) / 1.0
    np.testing.assert_allclose(out[band], ((1 - t) * c[3] + t * c[5])[band], atol=1e-5)
    outside = ~band
    assert np.array_equal(np.isnan(out[outside]), np.isnan(full[outside]))
    np.testing.assert_allclose(out[outside], full[outside], atol=1e-6)


def test_one_dropped_line_with_a_smaller_max_gap_stays_open():
    # With max_gap below the 1 m gap it is not bridged: cells farther than the radius
    # (0.375 m) from both neighbours are NaN, and the others read the nearer line's constant
    # only (the farther line's tent stops at the radius).
    across = 0.5 * np.arange(9)
    c = line_constants(9, seed=1)
    x, y, ids = lines_at(across)
    keep = ids != 4
    out, gx, gy, w = grid_of(x[keep], y[keep], ids[keep], c[ids[keep]], max_gap=0.9)
    assert w.radius == pytest.approx(0.375)
    inner = (gx > 0.15) & (gx < 3.85)
    mid = inner & (np.abs(gy - 2.0) < 0.5 - 0.375 - 1e-9)
    assert mid.any() and np.isnan(out[mid]).all()
    south = inner & (gy > 1.5) & (gy <= 1.5 + 0.375)
    north = inner & (gy < 2.5) & (gy >= 2.5 - 0.375)
    np.testing.assert_allclose(out[south], c[3], atol=1e-5)
    np.testing.assert_allclose(out[north], c[5], atol=1e-5)


# --- ten dropped lines: a wide gap ---------------------------------------------------------------


@pytest.fixture(scope="module")
def wide_gap():
    across = 0.5 * np.arange(29)
    x, y, ids = lines_at(across, length=3.0)
    keep = (ids < 10) | (ids > 19)  # a 5.5 m gap between 4.5 m and 10.0 m
    return x[keep], y[keep], ids[keep]


def test_a_wide_gap_stays_nodata_beyond_the_radius(wide_gap):
    x, y, ids = wide_gap
    out, gx, gy, w = grid_of(x, y, ids, np.ones(x.size))
    inner = (gx > 0.1) & (gx < 2.9)
    into = np.minimum(gy - 4.5, 10.0 - gy)  # distance into the gap
    assert np.isnan(out[inner & (into > w.radius)]).all()
    assert np.isfinite(out[inner & (into > 0) & (into < w.radius - 0.01)]).all()
    assert np.isfinite(out[inner & (into < 0)]).all()  # surveyed ground fully covered


def test_a_feature_beside_a_wide_gap_stays_in_place(wide_gap):
    # A bright value (100) on five traces of line 9 (at 4.5 m, beside the gap), zero elsewhere.
    # It may appear across the lines only up to the next line south (4.0 m) and the search
    # radius north into the gap, and along the line only within the along-line tent; before
    # the fix it reached 5.5 m south, over lines 0 to 8.
    x, y, ids = wide_gap
    bright = (ids == 9) & (x > 1.38) & (x < 1.62)
    out, gx, gy, w = grid_of(x, y, ids, np.where(bright, 100.0, 0.0))
    lit = np.nan_to_num(out) > 1e-6
    assert lit.any()
    assert gy[lit].min() > 4.0 and gy[lit].max() < 4.5 + w.radius
    assert gx[lit].min() > x[bright].min() - w.along and gx[lit].max() < x[bright].max() + w.along
    # and the lines beside the gap do not move any cell of the surveyed ground beyond them
    full_x, full_y, full_ids = lines_at(0.5 * np.arange(29), length=3.0)
    c = line_constants(29, seed=2)
    full, *_ = grid_of(full_x, full_y, full_ids, c[full_ids])
    part, *_ = grid_of(x, y, ids, c[ids])
    surveyed = (gy <= 4.5) | (gy >= 10.0)
    np.testing.assert_allclose(part[surveyed], full[surveyed], atol=1e-6)


def test_a_wide_gap_is_bridged_when_max_gap_allows(wide_gap):
    x, y, ids = wide_gap
    c = line_constants(29, seed=3)
    out, gx, gy, _ = grid_of(x, y, ids, c[ids], max_gap=6.0)
    band = (gx > 0.1) & (gx < 2.9) & (gy > 4.5) & (gy < 10.0)
    t = (gy - 4.5) / 5.5
    np.testing.assert_allclose(out[band], ((1 - t) * c[9] + t * c[20])[band], atol=1e-5)


def test_brute_force_of_the_per_side_rule():
    # Lines at 0, 0.5, 1.0, 3.0, 3.5 m: the 2 m gap is wider than max_gap = 1.25 m. From the
    # layout: line 2 has 0.5 m south and an open side (the radius) north; line 3 the reverse.
    across = [0.0, 0.5, 1.0, 3.0, 3.5]
    x, y, ids = lines_at(across, length=1.5)
    values = np.cos(3.0 * x) + y
    out, gx, gy, w = grid_of(x, y, ids, values, max_gap=1.25)
    r = w.radius
    north_south = {0: (0.5, r), 1: (0.5, 0.5), 2: (r, 0.5), 3: (0.5, r), 4: (r, 0.5)}
    open_ns = {0: (False, True), 1: (False, False), 2: (True, False), 3: (False, True),
               4: (True, False)}
    # left is north for eastward lines (even k), south for westward ones (odd k)
    sides = {k: v if k % 2 == 0 else v[::-1] for k, v in north_south.items()}
    bridged = {k: tuple(not o for o in (v if k % 2 == 0 else v[::-1]))
               for k, v in open_ns.items()}
    ref = brute_force(x, y, ids, values, gx, gy, sides=sides, along=w.along, radius=r,
                      bridged=bridged)
    assert np.array_equal(np.isnan(out), np.isnan(ref))
    np.testing.assert_allclose(out, ref, atol=1e-5)


# --- two blocks ----------------------------------------------------------------------------------


def test_two_blocks_grid_as_if_alone():
    # Two blocks of south-north lines 0.5 m apart with a 3 m gap between them (east-west).
    # Ground truth: each block's cells are those of the block gridded alone (no streaks
    # across the gap), and the gap is NaN beyond the radius from the blocks' edge lines.
    x1, y1, i1 = lines_at(0.5 * np.arange(5), direction="y", length=3.0)
    x2, y2, i2 = lines_at(5.0 + 0.5 * np.arange(5), direction="y", length=3.0)
    x, y, ids = np.concatenate([x1, x2]), np.concatenate([y1, y2]), np.concatenate([i1, i2 + 5])
    values = np.sin(2.0 * y) + 0.2 * ids
    out, gx, gy, w = grid_of(x, y, ids, values)
    alone, ax, ay, _ = grid_of(x1, y1, i1, values[: x1.size], radius=w.radius)
    cols = gx[0] <= ax[0].max() + 1e-9
    np.testing.assert_allclose(out[:, cols], alone, atol=1e-6)
    into = np.minimum(gx - 2.0, 5.0 - gx)
    assert np.isnan(out[(into > w.radius)]).all()


def test_blocks_far_apart_keep_the_box_small():
    # Two blocks 1 km apart across their lines: before the fix the edge lines' spacing was
    # ~1 km and every trace visited a box of (2 k + 1)^2 cells with k = 1 km / cell. Now no
    # tent is wider than max(max_gap, radius), on either side of any trace.
    x1, y1, i1 = lines_at(0.5 * np.arange(4), direction="y", length=1.0)
    x, y = np.concatenate([x1, x1 + 1000.0]), np.concatenate([y1, y1])
    ids = np.concatenate([i1, i1 + 4])
    frame = trace_frame(x, y, ids, cell=0.1)
    widest = max(frame.max_gap, frame.radius)
    assert frame.max_gap == pytest.approx(1.25)
    assert max(frame.left.max(), frame.right.max()) <= widest
    assert frame.reach <= math.hypot(frame.along, widest) + 1e-12
    g = grid_for(x, y, cell=0.1)
    w = neighbour_weights(g, x, y, ids)
    values = w.apply(np.ones((x.size, 1)))[0].reshape(g.ny, g.nx)
    gx = np.broadcast_to(g.x, (g.ny, g.nx))
    assert np.isnan(values[(gx > 10.0) & (gx < 990.0)]).all()
    assert w.matrix.nnz < 40 * x.size  # each trace reaches a few dozen cells, not millions


# --- orthogonal sets -----------------------------------------------------------------------------


def test_orthogonal_sets_with_a_hole():
    # West-east and south-north lines 0.5 m apart over 6 x 6 m, each set missing the lines
    # through 2.5-3.5 m: a square hole of 2 x 2 m between 2.0 and 4.0 m. A linear field is
    # reproduced away from the hole; the hole is NaN beyond the radius; a bright value on
    # line y = 2.0 m (beside the hole) appears at most the radius into the hole.
    kept = [c for c in 0.5 * np.arange(13) if not 2.25 < c < 3.75]
    xa, ya, ia = lines_at(kept, length=6.0)
    xb, yb, ib = lines_at(kept, length=6.0, direction="y")
    x, y = np.concatenate([xa, xb]), np.concatenate([ya, yb])
    ids = np.concatenate([ia, ib + 100])
    f = 1.0 + 0.2 * x - 0.3 * y
    out, gx, gy, w = grid_of(x, y, ids, f, cell=0.25)
    # cells beyond the radius of the lines around the hole, in both directions, see only
    # bridged lines
    hole_in = np.maximum(np.abs(gx - 3.0), np.abs(gy - 3.0))  # square distance to the centre
    far = ((np.abs(gx - 3.0) > 1.0 + w.radius) & (np.abs(gy - 3.0) > 1.0 + w.radius)
           & (gx > 0.3) & (gx < 5.7) & (gy > 0.3) & (gy < 5.7))
    np.testing.assert_allclose(out[far], (1.0 + 0.2 * gx - 0.3 * gy)[far], atol=1e-4)
    deep = hole_in < 1.0 - w.radius - 1e-9
    assert deep.any() and np.isnan(out[deep]).all()
    row = ids == np.flatnonzero(np.isclose(kept, 2.0))[0]
    bright = row & (np.abs(x - 3.0) < 0.12)
    lit, *_ = grid_of(x, y, ids, np.where(bright, 100.0, 0.0), cell=0.25)
    on = np.nan_to_num(lit) > 1e-6
    assert on.any() and gy[on].max() < 2.0 + w.radius


# --- the option ----------------------------------------------------------------------------------


def test_bad_max_gap():
    x, y, ids = lines_at([0.0, 0.5, 1.0])
    with pytest.raises(SettingsError, match="--max-gap"):
        trace_frame(x, y, ids, cell=0.1, max_gap=-1.0)
    with pytest.raises(SettingsError, match="--max-gap"):
        trace_frame(x, y, ids, cell=0.1, max_gap=math.inf)


def test_grid_slices_passes_max_gap_on():
    x, y, ids = lines_at([0.0, 0.5, 1.0, 2.0, 2.5], length=2.0)
    c = line_constants(5, seed=4)
    table = xr.DataArray(c[ids][:, None].astype(np.float32), dims=("trace", "slice"),
                         coords={"x": ("trace", x), "y": ("trace", y), "line": ("trace", ids),
                                 "top": ("slice", [0.0], {"axis": "depth", "units": "m"}),
                                 "bottom": ("slice", [0.1], {"axis": "depth", "units": "m"})})
    shut, info = slicer.grid_slices(table, cell=0.1, max_gap=0.8, progress=False)
    bridged, info_b = slicer.grid_slices(table, cell=0.1, max_gap=1.0, progress=False)
    assert info["max_gap_m"] == 0.8 and info_b["max_gap_m"] == 1.0
    mid = shut.isel(depth=0).sel(y=1.5, x=1.05, method="nearest")
    assert np.isnan(float(mid))
    mid_b = bridged.isel(depth=0).sel(y=1.55, x=1.05, method="nearest")
    assert float(mid_b) == pytest.approx(0.45 * c[2] + 0.55 * c[3], abs=1e-5)
    for tile in (0, -5, 2.5, True):  # a tile of no cells had given a cube of NaN, or 1 / 0
        with pytest.raises(slicer.SettingsError, match="tile edge must be a whole number"):
            slicer.grid_slices(table, cell=0.1, tile=tile, progress=False)
