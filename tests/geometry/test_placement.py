"""Tests of slicer.geometry.placement: traces spaced evenly along a straight line between its
start and end, and the ends taken from the files' first and last trace-header positions.

Sources named beside the checks:
- Even spacing along a straight line is checked against ``numpy.linspace`` and the Euclidean
  distance ``numpy.hypot`` (plane geometry in a projected CRS).
- SEG-Y rev 1: Norris & Faichney (eds., 2002), "SEG Y rev 1 Data Exchange format", trace header
  bytes 71-72 (coordinate scalar: negative divides) and 181-188 (CDP X/Y); the files are
  written here by segyio, the reference library, not by slicer.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import segyio
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import InputFileError
from slicer.geometry.placement import ends_from_headers, place_line
from slicer.io.linetable import LineEntry

E0, N0 = 512000.0, 4650000.0
NAN = (math.nan, math.nan)


def _line(n_traces, n_samples=8):
    data = np.random.default_rng(n_traces).normal(size=(n_traces, n_samples))
    return xr.DataArray(data.astype(np.float32), dims=("trace", "twt"), name="amplitude",
                        coords={"trace": np.arange(n_traces), "twt": 0.1 * np.arange(n_samples)},
                        attrs={"line": "L0", "sample_interval_ns": 0.1})


def _entry(start, end, file="L0.sgy"):
    return LineEntry(file=Path(file), start=start, end=end, where="lines.csv:2")


@settings(max_examples=60, deadline=None)
@given(n=st.integers(2, 300), dx=st.floats(-50.0, 50.0), dy=st.floats(-50.0, 50.0),
       x0=st.floats(-1000.0, 1000.0), y0=st.floats(-1000.0, 1000.0))
def test_traces_are_spaced_evenly_from_start_to_end(n, dx, dy, x0, y0):
    start, end = (E0 + x0, N0 + y0), (E0 + x0 + dx, N0 + y0 + dy)
    line = _line(n)
    placed = place_line(line, _entry(start, end))
    x, y, d = (placed[c].values for c in ("x", "y", "distance"))
    # 1e-6 m: rounding of coordinates near 5e6 m (float64 carries about 1e-9 m there)
    np.testing.assert_allclose(x, np.linspace(start[0], end[0], n), rtol=0, atol=1e-6)
    np.testing.assert_allclose(y, np.linspace(start[1], end[1], n), rtol=0, atol=1e-6)
    length = math.hypot(dx, dy)
    np.testing.assert_allclose(d, np.linspace(0.0, length, n), rtol=0, atol=1e-9)
    # distance is the straight-line distance of each trace from the start
    np.testing.assert_allclose(d, np.hypot(x - start[0], y - start[1]), rtol=0, atol=1e-6)
    # the samples and the line's attributes are untouched
    np.testing.assert_array_equal(placed.values, line.values)
    assert placed.attrs == line.attrs and placed.dims == line.dims


def test_hand_computed_line_and_units():
    # 5 traces from (0, 0) to (3, 4): a 3-4-5 triangle, so 1.25 m between traces
    placed = place_line(_line(5), _entry((0.0, 0.0), (3.0, 4.0)))
    np.testing.assert_allclose(placed["x"].values, [0.0, 0.75, 1.5, 2.25, 3.0])
    np.testing.assert_allclose(placed["y"].values, [0.0, 1.0, 2.0, 3.0, 4.0])
    np.testing.assert_allclose(placed["distance"].values, [0.0, 1.25, 2.5, 3.75, 5.0])
    assert {placed[c].attrs["units"] for c in ("x", "y", "distance")} == {"m"}
    assert placed["x"].dims == placed["y"].dims == placed["distance"].dims == ("trace",)


@pytest.mark.parametrize("n", [0, 1])
def test_a_line_of_fewer_than_two_traces_is_refused(n):
    with pytest.raises(InputFileError, match=f"at least two traces, found {n}") as info:
        place_line(_line(n), _entry((0.0, 0.0), (4.0, 0.0), file="short.sgy"))
    assert info.value.where == "short.sgy"


# --- ends from trace headers -----------------------------------------------------------------


def _segyio_file(path, x_cm, y_cm, scalar=-100, n_samples=16):
    """A SEG-Y file written by segyio with CDP X/Y (bytes 181-188) and a coordinate scalar."""
    spec = segyio.spec()
    spec.format, spec.samples, spec.tracecount = 5, np.arange(n_samples), len(x_cm)
    with segyio.create(path, spec) as f:
        for i, (x, y) in enumerate(zip(x_cm, y_cm, strict=True)):
            f.header[i] = {segyio.TraceField.CDP_X: int(x), segyio.TraceField.CDP_Y: int(y),
                           segyio.TraceField.SourceGroupScalar: scalar}
            f.trace[i] = np.zeros(n_samples, np.float32)
    return path


def test_ends_are_the_first_and_last_header_positions(tmp_path):
    # CDP X/Y in centimetres with scalar -100 (SEG-Y rev 1: a negative scalar divides)
    x_cm = np.round((E0 + np.linspace(0.0, 4.0, 21)) * 100)
    y_cm = np.round((N0 + np.linspace(0.5, 1.7, 21)) * 100)
    files = [_segyio_file(tmp_path / "A.sgy", x_cm, y_cm),
             _segyio_file(tmp_path / "B.sgy", x_cm[::-1], y_cm[::-1])]
    entries = [_entry(NAN, NAN, file=f) for f in files]
    out = ends_from_headers(entries)
    assert [e.file for e in out] == files and all(e.has_ends for e in out)
    assert out[0].start == pytest.approx((x_cm[0] / 100, y_cm[0] / 100), abs=1e-9)
    assert out[0].end == pytest.approx((x_cm[-1] / 100, y_cm[-1] / 100), abs=1e-9)
    assert out[1].start == pytest.approx(out[0].end) and out[1].end == pytest.approx(
        out[0].start)
    assert out[0].where == "lines.csv:2"  # the rest of the entry is kept


def test_a_file_without_header_coordinates_is_refused(tmp_path):
    bare = _segyio_file(tmp_path / "bare.sgy", np.zeros(10), np.zeros(10), scalar=1)
    with pytest.raises(InputFileError, match="holds no trace coordinates") as info:
        ends_from_headers([_entry(NAN, NAN, file=bare)])
    assert info.value.where == str(bare)
