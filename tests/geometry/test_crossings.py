"""Tests of slicer.geometry.crossings: where lines cross."""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr

from slicer.core.errors import SettingsError, SlicerWarning
from slicer.geometry.crossings import find_crossings
from slicer.synthetic import grid_lines

W, S = 1000.0, 2000.0


def _line(name, x, y):
    """A line of positions only (no samples are needed to find crossings)."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    return xr.DataArray(np.zeros((x.size, 0), np.float32), dims=("trace", "twt"),
                        coords={"trace": np.arange(x.size), "x": ("trace", x),
                                "y": ("trace", y)}, attrs={"line": name})


@pytest.fixture(scope="module")
def network():
    """Five west-east and five south-north lines, the sets offset by part of a trace spacing
    (the geometry of the tie network in tests/test_ties.py)."""
    plans = (grid_lines(west=W - 0.2, south=S + 0.013, length=4.4, width=4.0, line_spacing=1.0,
                        trace_spacing=0.05, direction="x", prefix="E")
             + grid_lines(west=W + 0.025, south=S - 0.2, length=4.4, width=4.0,
                          line_spacing=1.0, trace_spacing=0.05, direction="y", prefix="N"))
    lines = [_line(p.name, *p.positions()) for p in plans]
    return {"lines": lines, "crossings": find_crossings(lines)}


def test_crossings_lie_at_the_analytic_intersections(network):
    lines, cr = network["lines"], network["crossings"]
    assert cr.sizes["crossing"] == 25  # every west-east line crosses every south-north line
    by_name = {line.attrs["line"]: line for line in lines}
    for c in range(25):
        a, b = by_name[str(cr.line_a[c].values)], by_name[str(cr.line_b[c].values)]
        # analytic: a west-east line y = const meets a south-north line x = const at (x_b, y_a)
        assert float(cr.x[c]) == pytest.approx(float(b.x[0]), abs=1e-9)
        assert float(cr.y[c]) == pytest.approx(float(a.y[0]), abs=1e-9)
        # the crossing's traces are the nearest of each line (brute force over all traces)
        for line, trace in ((a, int(cr.trace_a[c])), (b, int(cr.trace_b[c]))):
            d = np.hypot(line.x.values - float(cr.x[c]), line.y.values - float(cr.y[c]))
            assert d[trace] == pytest.approx(d.min(), abs=1e-9)  # halfway: either is nearest
        assert 0 < float(cr.gap_m[c]) <= 0.05
        assert float(cr.angle[c]) == pytest.approx(90.0)


def test_oblique_crossing_matches_solved_intersection():
    # two straight oblique lines; the intersection of their supporting lines from
    # numpy.linalg.solve is the reference
    t = np.linspace(0, 1, 101)
    a = _line("A", 0 + 4 * t, 0 + 3 * t)
    b = _line("B", 0.3 + 3.4 * t, 3.1 - 3.0 * t)
    cr = find_crossings([a, b])
    assert cr.sizes["crossing"] == 1
    da, db = np.array([4.0, 3.0]), np.array([3.4, -3.0])
    s, _ = np.linalg.solve(np.column_stack([da, -db]), np.array([0.3, 3.1]))
    np.testing.assert_allclose([float(cr.x[0]), float(cr.y[0])], s * da, atol=1e-9)
    assert float(cr.position_a[0]) == pytest.approx(100 * s, abs=1e-9)
    # angle between the directions (4, 3) and (3.4, -3)
    angle = math.degrees(math.acos(abs(da @ db) / (np.hypot(*da) * np.hypot(*db))))
    assert float(cr.angle[0]) == pytest.approx(angle, abs=1e-6)


def test_near_miss_counts_within_max_distance_only():
    a = _line("A", np.linspace(0, 1, 21), np.zeros(21))          # ends at (1, 0)
    b = _line("B", np.full(21, 1.02), np.linspace(0, 1, 21))     # starts 2 cm east of it
    cr = find_crossings([a, b])
    assert cr.sizes["crossing"] == 1
    assert (int(cr.trace_a[0]), int(cr.trace_b[0])) == (20, 0)
    assert float(cr.gap_m[0]) == pytest.approx(0.02)
    with pytest.warns(SlicerWarning, match="no crossings"):
        assert find_crossings([a, b], max_distance=0.01).sizes["crossing"] == 0


def test_parallel_lines_do_not_tie():
    a = _line("A", np.linspace(0, 1, 21), np.zeros(21))
    b = _line("B", np.linspace(0, 1, 21), np.full(21, 0.03))  # closer than a trace spacing
    with pytest.warns(SlicerWarning, match="no crossings"):
        assert find_crossings([a, b]).sizes["crossing"] == 0


@pytest.mark.parametrize("kwargs, where", [({"max_distance": -1.0}, "max_distance"),
                                           ({"min_angle": 0.0}, "min_angle")])
def test_crossing_options_are_checked(kwargs, where):
    a = _line("A", np.linspace(0, 1, 5), np.zeros(5))
    with pytest.raises(SettingsError, match=where):
        find_crossings([a], **kwargs)


def test_repeated_names_and_missing_positions_are_refused():
    a = _line("A", np.linspace(0, 1, 5), np.zeros(5))
    with pytest.raises(SettingsError, match="unique"):
        find_crossings([a, a.copy()])
    with pytest.raises(SettingsError, match="B"):
        find_crossings([a, _line("B", [0, 1], [0, 1]).drop_vars("y")])


