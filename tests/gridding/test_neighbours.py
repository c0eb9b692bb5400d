"""Tests of slicer.gridding.neighbours: how traces are grouped into lines.

Reference: numpy's own test of membership (``np.flatnonzero(index == k)`` for every line).
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.gridding.neighbours import _Lines


@settings(max_examples=80, deadline=None)
@given(st.lists(st.integers(-5, 40), min_size=1, max_size=300))
def test_each_line_holds_its_traces_in_order_whatever_the_ids(ids):
    # ids in any order, repeated, with gaps and negatives, as a merged survey's table has them
    line = np.asarray(ids)
    rng = np.random.default_rng(len(ids))
    x, y = rng.random(line.size), rng.random(line.size)
    lines = _Lines.of(x, y, line)
    ids_sorted = np.unique(line)
    assert len(lines.members) == ids_sorted.size
    for k, member in enumerate(lines.members):
        np.testing.assert_array_equal(member, np.flatnonzero(line == ids_sorted[k]))
        np.testing.assert_array_equal(lines.start[k], [x[member[0]], y[member[0]]])
        np.testing.assert_array_equal(lines.end[k], [x[member[-1]], y[member[-1]]])
