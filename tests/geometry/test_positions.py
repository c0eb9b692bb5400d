"""Tests of slicer.geometry.positions: trace positions from trace headers, GNSS tracks and
distance marks; even resampling.

Sources named beside the checks:
- SEG-Y rev 1: Norris & Faichney (eds., 2002), "SEG Y rev 1 Data Exchange format", trace header
  bytes 71-72 (coordinate scalar) and 181-188 (CDP X/Y); rev 2.0: Hagelund & Levin (eds.,
  2017), "SEG-Y_r2.0", where a scalar of 0 means 1.
- IOGP (EPSG) Guidance Note 7-2, "Coordinate Conversions and Transformations including
  Formulas", Transverse Mercator worked example (British National Grid) [memory for its
  numbers; pyproj agrees with them to 1 cm].
- Snyder (1987), "Map Projections: A Working Manual", USGS Professional Paper 1395: on the
  central meridian of a transverse Mercator projection, northing = k0 * M(lat), M the meridian
  arc (ch. 3, eq. 3-21; ch. 8) [memory for the equation numbers; the arc is integrated here
  from its definition, so the value is computed]. WGS 84 ellipsoid: NIMA TR8350.2 (2000),
  a = 6378137 m, 1/f = 298.257223563.
- pyproj (PROJ) as the reference library for every projection.
- Iglewicz & Hoaglin (1993), "How to Detect and Handle Outliers", ASQC: modified z-score rule.
"""

from __future__ import annotations

import contextlib
import math
import warnings

import numpy as np
import pyproj
import pytest
import segyio
import xarray as xr
from scipy.integrate import quad

from slicer.core.errors import InputFileError, SettingsError, SlicerWarning
from slicer.geometry.positions import (
    positions_from_headers,
    positions_from_track,
    read_track,
    resample_even,
    stretch_by_marks,
)
from slicer.io.segy import read_segy_line

TF = segyio.TraceField
UTM33 = "EPSG:32633"
E0, N0 = 512000.0, 4650000.0


def _line(n=21, samples=6, *, seed=0, **coords):
    data = np.random.default_rng(seed).normal(size=(n, samples)).astype(np.float32)
    c = {"trace": np.arange(n), "twt": ("twt", 0.1 * np.arange(samples), {"units": "ns"})}
    c.update({k: ("trace", np.asarray(v, dtype=float)) for k, v in coords.items()})
    return xr.DataArray(data, dims=("trace", "twt"), coords=c, name="amplitude",
                        attrs={"line": "L1", "source": "L1.sgy", "history": ""})


def _cell(v):
    """CSV text of a value: floats to 17 significant digits (exact round trip)."""
    if isinstance(v, float | np.floating):
        return repr(float(v))
    return str(v)


def _write_track(path, header, rows):
    path.write_text(",".join(header) + "\n"
                    + "".join(",".join(_cell(v) for v in r) + "\n" for r in rows))
    return path


@contextlib.contextmanager
def _no_warnings():
    """Turn any SlicerWarning into a failure."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", SlicerWarning)
        yield


# --- trace headers -------------------------------------------------------------------------


def _plain_segyio(path, cdp_x, cdp_y, scalar):
    """Three traces written by segyio alone (rev 0 file, no interval the reader trusts)."""
    spec = segyio.spec()
    spec.format = 5
    spec.samples = np.zeros(4)
    spec.tracecount = len(cdp_x)
    with segyio.create(str(path), spec) as f:
        f.trace = np.ones((len(cdp_x), 4), dtype=np.float32)
        for i in range(len(cdp_x)):
            f.header[i] = {TF.CDP_X: int(cdp_x[i]), TF.CDP_Y: int(cdp_y[i]),
                           TF.SourceGroupScalar: scalar}
    return path


def test_negative_scalar_divides_rev1_worked_value(tmp_path):
    # SEG-Y rev 1 (Norris & Faichney 2002), bytes 71-72: a negative scalar divides; worked
    # value from check-values.md: 512345.67 is stored as 51234567 with scalar -100.
    stored_x = [51234567, 51234667, 51234967]
    stored_y = [464977612, 464977612, 464977612 + 400]
    path = _plain_segyio(tmp_path / "neg.sgy", stored_x, stored_y, -100)
    line = positions_from_headers(read_segy_line(path, sample_interval_ns=0.1))
    assert line["x"].values[0] == 512345.67
    assert line["y"].values[0] == 4649776.12
    np.testing.assert_allclose(line["x"].values, [512345.67, 512346.67, 512349.67], atol=1e-9)
    np.testing.assert_allclose(line["y"].values, [4649776.12, 4649776.12, 4649780.12],
                               atol=1e-9)
    # Cumulative path: 1 m east, then a 3-4-5 step (5 m).
    np.testing.assert_allclose(line["distance"].values, [0.0, 1.0, 6.0], atol=1e-8)
    assert line["x"].attrs["units"] == "m" and line["distance"].attrs["units"] == "m"


@pytest.mark.parametrize(("scalar", "factor"), [(100, 100.0), (0, 1.0), (1, 1.0)])
def test_positive_scalar_multiplies_zero_means_one(tmp_path, scalar, factor):
    # Rev 1: a positive scalar multiplies; rev 2.0 (Hagelund & Levin 2017): 0 means 1.
    stored_x, stored_y = [5120, 5121, 5123], [46500, 46500, 46500]
    path = _plain_segyio(tmp_path / f"s{scalar}.sgy", stored_x, stored_y, scalar)
    line = positions_from_headers(read_segy_line(path, sample_interval_ns=0.1))
    np.testing.assert_array_equal(line["x"].values, np.array(stored_x) * factor)
    np.testing.assert_array_equal(line["y"].values, np.array(stored_y) * factor)
    np.testing.assert_allclose(line["distance"].values, [0, 1, 3] * np.array(factor))


def test_headers_missing_or_identical_refused(tmp_path):
    with pytest.raises(InputFileError, match=r"L1\.sgy: .*no trace-header coordinates"):
        positions_from_headers(_line(5))
    same = _line(5, header_x=np.full(5, E0), header_y=np.full(5, N0))
    with pytest.raises(InputFileError, match=r"L1\.sgy: every trace header holds the same"):
        positions_from_headers(same)
    path = _plain_segyio(tmp_path / "same.sgy", [5] * 3, [7] * 3, 1)
    with pytest.raises(InputFileError, match=r"same\.sgy"):
        positions_from_headers(read_segy_line(path, sample_interval_ns=0.1))


def test_header_jump_and_repeats_reported():
    x = E0 + 0.05 * np.arange(40)
    y = np.full(40, N0)
    x[17] = 0.0  # a trace whose header lost its fix
    with pytest.warns(SlicerWarning, match=r"L1\.sgy: 2 jump\(s\).*traces 16-17, traces 17-18"):
        positions_from_headers(_line(40, header_x=x, header_y=y))
    coarse = np.repeat(E0 + np.arange(10.0), 4)  # coordinates updated every 4th trace
    with pytest.warns(SlicerWarning, match="30 of 40 traces repeat"):
        positions_from_headers(_line(40, header_x=coarse, header_y=np.full(40, N0)))


def test_headers_of_the_synthetic_survey_match_its_line_table(small_survey):
    # The forward model writes CDP/source X/Y in centimetres (scalar -100); read back, they must
    # reproduce the even start-to-end placement of the line table to within half a centimetre.
    from slicer.geometry.placement import place_line
    from slicer.io.linetable import read_line_table
    from slicer.io.reading import read_line

    for entry in read_line_table(small_survey.line_table)[:2]:
        line = read_line(entry.file)
        from_headers, planned = positions_from_headers(line), place_line(line, entry)
        for c in ("x", "y", "distance"):
            np.testing.assert_allclose(from_headers[c].values, planned[c].values, atol=0.005)


# --- GNSS tracks -----------------------------------------------------------------------------


def _utm_to_lonlat(e, n):
    return pyproj.Transformer.from_crs(UTM33, "EPSG:4326", always_xy=True).transform(e, n)


def test_lonlat_track_matches_pyproj_and_linear_interpolation(tmp_path):
    # Fixes every 5 traces along a known UTM path, written as lon/lat; the placed traces must be
    # the linear interpolation of the UTM fixes (pyproj round trip, sub-millimetre).
    keys = np.arange(0, 41, 5)
    fe = E0 + np.array([0, 1.1, 2.0, 3.2, 4.0, 5.3, 6.0, 7.1, 8.0])
    fn = N0 + np.array([0, 0.2, 0.1, 0.4, 0.9, 1.2, 1.1, 1.6, 2.0])
    lon, lat = _utm_to_lonlat(fe, fn)
    height = np.linspace(100, 104, keys.size)
    path = _write_track(tmp_path / "track.csv", ["trace", "lon", "lat", "height"],
                        [(int(k), float(a), float(b), float(h))
                         for k, a, b, h in zip(keys, lon, lat, height, strict=True)])
    with _no_warnings():
        line = positions_from_track(_line(41), path, track_crs="EPSG:4326", survey_crs=UTM33)
    traces = np.arange(41)
    np.testing.assert_allclose(line["x"].values, np.interp(traces, keys, fe), atol=1e-6)
    np.testing.assert_allclose(line["y"].values, np.interp(traces, keys, fn), atol=1e-6)
    # Against pyproj directly (the reference library) on the values as written.
    direct = pyproj.Transformer.from_crs("EPSG:4326", UTM33, always_xy=True)
    de, dn = direct.transform(lon, lat)
    np.testing.assert_allclose(line["x"].values[keys], de, atol=1e-9)
    np.testing.assert_allclose(line["y"].values[keys], dn, atol=1e-9)
    steps = np.hypot(np.diff(line["x"].values), np.diff(line["y"].values))
    np.testing.assert_allclose(line["distance"].values[1:], np.cumsum(steps))
    np.testing.assert_allclose(line["height"].values, np.interp(traces, keys, height))


def test_transverse_mercator_worked_examples(tmp_path):
    # IOGP Guidance Note 7-2, Transverse Mercator example [memory]: OSGB 1936 lat 50d30'N,
    # lon 0d30'E -> British National Grid E = 577274.99 m, N = 69740.50 m.
    bng = _write_track(tmp_path / "bng.csv", ["trace", "lon", "lat"],
                       [(0, 0.5, 50.5), (10, 0.5001, 50.5001)])
    line = positions_from_track(_line(11), bng, track_crs="EPSG:4277", survey_crs="EPSG:27700")
    assert line["x"].values[0] == pytest.approx(577274.99, abs=0.01)
    assert line["y"].values[0] == pytest.approx(69740.50, abs=0.01)
    # UTM 33N central meridian (15 E): the equator maps to E = 500000, N = 0 exactly, and on the
    # central meridian N = k0 * M(lat) (Snyder 1987, ch. 8, with M the meridian arc, eq. 3-21),
    # M integrated here from its definition on the WGS 84 ellipsoid (NIMA TR8350.2).
    a, f = 6378137.0, 1 / 298.257223563
    e2 = f * (2 - f)
    arc, _ = quad(lambda p: a * (1 - e2) / (1 - e2 * math.sin(p) ** 2) ** 1.5, 0,
                  math.radians(45))
    utm = _write_track(tmp_path / "utm.csv", ["trace", "lon", "lat"],
                       [(0, 15.0, 0.0), (10, 15.0, 45.0)])
    placed = positions_from_track(_line(11), utm, track_crs="EPSG:4326", survey_crs=UTM33)
    assert placed["x"].values[0] == pytest.approx(500000.0, abs=1e-6)
    assert placed["y"].values[0] == pytest.approx(0.0, abs=1e-6)
    assert placed["x"].values[-1] == pytest.approx(500000.0, abs=1e-6)
    assert placed["y"].values[-1] == pytest.approx(0.9996 * arc, abs=1e-3)


@pytest.mark.parametrize(("fix_dx", "fix_dy", "want_dx", "want_dy"), [
    # Heading north: forward is +y, right is east (+x).
    (0.0, 1.0, 0.3, 0.4),
    # Heading east: forward is +x, right is south (-y).
    (1.0, 0.0, 0.4, -0.3),
    # Heading west: forward is -x, right is north.
    (-1.0, 0.0, -0.4, 0.3),
])
def test_antenna_offset_along_and_right_of_travel(tmp_path, fix_dx, fix_dy, want_dx, want_dy):
    # Antenna 0.4 m ahead of and 0.3 m right of the receiver (common practice: offsets in the
    # frame of travel, right of travel seen from above).
    keys = np.arange(0, 21, 4)
    rows = [(int(k), E0 + fix_dx * k * 0.25, N0 + fix_dy * k * 0.25) for k in keys]
    path = _write_track(tmp_path / "t.csv", ["trace", "x", "y"], rows)
    line = positions_from_track(_line(21), path, track_crs=UTM33, survey_crs=UTM33,
                                offset_along=0.4, offset_across=0.3)
    t = np.arange(21)
    np.testing.assert_allclose(line["x"].values, E0 + fix_dx * t * 0.25 + want_dx, atol=1e-9)
    np.testing.assert_allclose(line["y"].values, N0 + fix_dy * t * 0.25 + want_dy, atol=1e-9)


def test_offset_follows_a_turn(tmp_path):
    # An L-shaped track: east for 10 m, then north. Away from the corner (farther than half the
    # 1 m smoothing chord) the right-hand offset is south on the first leg, east on the second.
    rows = [(i, E0 + i * 1.0, N0) for i in range(11)] + [(10 + i, E0 + 10, N0 + i)
                                                         for i in range(1, 11)]
    path = _write_track(tmp_path / "l.csv", ["trace", "x", "y"], rows)
    line = positions_from_track(_line(21), path, track_crs=UTM33, survey_crs=UTM33,
                                offset_across=0.5)
    assert (line["x"].values[5], line["y"].values[5]) == pytest.approx((E0 + 5, N0 - 0.5))
    assert (line["x"].values[15], line["y"].values[15]) == pytest.approx((E0 + 10.5, N0 + 5))


def test_jumps_reported_by_robust_rule_and_by_speed(tmp_path):
    rows = [(i * 2, E0 + 0.5 * i + 0.01 * (i % 3), N0) for i in range(20)]
    rows[6] = (12, E0 + 3.0, N0 + 5.0)  # a multipath fix 5 m off the path (CSV row 8)
    path = _write_track(tmp_path / "jump.csv", ["trace", "x", "y"], rows)
    # Iglewicz & Hoaglin (1993): modified z-score above 3.5 marks an outlier.
    with pytest.warns(SlicerWarning, match=r"jump\.csv: 2 jump\(s\).*rows 7-8, rows 8-9"):
        positions_from_track(_line(39), path, track_crs=UTM33, survey_crs=UTM33)
    # Fixes once a second at 1 m/s, one step at 3 m/s (CSV rows 6-7).
    timed = [(float(i), E0 + i + (2.0 if i >= 5 else 0.0), N0) for i in range(10)]
    tpath = _write_track(tmp_path / "timed.csv", ["time", "x", "y"], timed)
    line = _line(10, time=np.arange(10.0) + 0.5)
    line = line.isel(trace=slice(0, 9))
    with pytest.warns(SlicerWarning, match=r"timed\.csv: 1 jump.*max_speed 2 m/s: rows 6-7"):
        positions_from_track(line, tpath, track_crs=UTM33, survey_crs=UTM33, key="time",
                             max_speed=2.0)
    with _no_warnings():
        placed = positions_from_track(line, tpath, track_crs=UTM33, survey_crs=UTM33,
                                      key="time", max_speed=5.0)
    # Time keys interpolate at the traces' own times (0.5 s, 1.5 s, ...).
    np.testing.assert_allclose(placed["x"].values[:4], E0 + np.arange(4) + 0.5)


def test_track_must_cover_the_line(tmp_path):
    path = _write_track(tmp_path / "short.csv", ["trace", "x", "y"],
                        [(5, E0, N0), (30, E0 + 5, N0)])
    with pytest.raises(InputFileError, match=r"short\.csv: the fixes cover trace 5 to 30.*0 to "
                                             r"40"):
        positions_from_track(_line(41), path, track_crs=UTM33, survey_crs=UTM33)
    one = _write_track(tmp_path / "one.csv", ["trace", "x", "y"], [(0, E0, N0)])
    with pytest.raises(InputFileError, match=r"one\.csv: .*at least two fixes, found 1"):
        positions_from_track(_line(5), one, track_crs=UTM33, survey_crs=UTM33)
    still = _write_track(tmp_path / "still.csv", ["trace", "x", "y"],
                         [(0, E0, N0), (40, E0, N0)])
    with pytest.raises(InputFileError, match=r"still\.csv: every fix is at the same"):
        positions_from_track(_line(41), still, track_crs=UTM33, survey_crs=UTM33)


def test_bad_track_files_name_file_and_row(tmp_path):
    bad = _write_track(tmp_path / "bad.csv", ["trace", "lon", "lat"],
                       [(0, 15.0, 45.0), (5, 15.0, "north"), (9, 15.0, 45.1)])
    with pytest.raises(InputFileError, match=r"bad\.csv:3: column lat: 'north'"):
        read_track(bad)
    back = _write_track(tmp_path / "back.csv", ["trace", "x", "y"],
                        [(0, E0, N0), (5, E0, N0), (4, E0, N0)])
    with pytest.raises(InputFileError, match=r"back\.csv:4: trace 4 does not increase"):
        read_track(back)
    swapped = _write_track(tmp_path / "swap.csv", ["trace", "lon", "lat"],
                           [(0, 45.0, 15.0), (5, 45.0, 150.0)])
    with pytest.raises(InputFileError, match=r"swap\.csv:3: lat 150"):
        read_track(swapped)
    neither = _write_track(tmp_path / "neither.csv", ["trace", "e", "n"], [(0, 1, 2)])
    with pytest.raises(InputFileError, match="either lon,lat or x,y"):
        read_track(neither)
    with pytest.raises(InputFileError, match=r"missing column\(s\) time"):
        read_track(neither, key="time")


def test_track_settings_refused(tmp_path):
    path = _write_track(tmp_path / "ok.csv", ["trace", "x", "y"], [(0, E0, N0), (9, E0 + 9, N0)])
    with pytest.raises(SettingsError, match="track_crs: .*x,y columns.*geographic"):
        positions_from_track(_line(10), path, track_crs="EPSG:4326", survey_crs=UTM33)
    with pytest.raises(SettingsError, match="survey_crs: .*projected with axes in metres"):
        positions_from_track(_line(10), path, track_crs=UTM33, survey_crs="EPSG:4326")
    with pytest.raises(SettingsError, match="track_crs: not a coordinate reference system"):
        positions_from_track(_line(10), path, track_crs="EPSG:0", survey_crs=UTM33)
    with pytest.raises(SettingsError, match="key: must be one of"):
        positions_from_track(_line(10), path, track_crs=UTM33, survey_crs=UTM33, key="gps")
    with pytest.raises(SettingsError, match="offset_across: must be a finite number"):
        positions_from_track(_line(10), path, track_crs=UTM33, survey_crs=UTM33,
                             offset_across=float("nan"))
    timed = _write_track(tmp_path / "timed.csv", ["time", "x", "y"],
                         [(0.0, E0, N0), (9.0, E0 + 9, N0)])
    with pytest.raises(InputFileError, match=r"L1\.sgy: key='time' needs a per-trace"):
        positions_from_track(_line(10), timed, track_crs=UTM33, survey_crs=UTM33, key="time")


# --- distance marks --------------------------------------------------------------------------


def test_marks_stretch_hand_computed():
    # Marks at traces 2, 6, 8 dropped at 1, 3, 5 m: 0.5 m/trace before trace 6 (also
    # extrapolated back to trace 0), 1 m/trace after it (extrapolated beyond trace 8).
    line = stretch_by_marks(_line(11), [(2, 1.0), (6, 3.0), (8, 5.0)],
                            start=(100.0, 200.0), end=(103.0, 204.0))
    hand = np.array([0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 7.0])
    np.testing.assert_allclose(line["distance"].values, hand)
    # Direction (3, 4) / 5 from start to end.
    np.testing.assert_allclose(line["x"].values, 100.0 + 0.6 * hand)
    np.testing.assert_allclose(line["y"].values, 200.0 + 0.8 * hand)
    before = stretch_by_marks(_line(11), [(4, 0.0), (10, 3.0)], start=(0, 0), end=(0, 10))
    np.testing.assert_allclose(before["distance"].values[:5], [-2.0, -1.5, -1.0, -0.5, 0.0])
    np.testing.assert_allclose(before["y"].values, before["distance"].values)


@pytest.mark.parametrize(("marks", "message"), [
    ([(2, 1.0)], "at least two marks"),
    ([(2, 1.0), (2, 3.0)], "mark 2 .* does not increase"),
    ([(2, 3.0), (5, 1.0)], "mark 2 .* does not increase"),
    ([(0, 0.0), (11, 3.0)], r"trace 11 is outside the line's traces 0\.\.10"),
    ([(0, 0.0), (2.5, 3.0)], "needs a whole trace index"),
    ([(0, 0.0), (4, float("inf"))], "finite distance"),
])
def test_bad_marks_refused(marks, message):
    with pytest.raises(SettingsError, match="marks: .*" + message):
        stretch_by_marks(_line(11), marks, start=(0, 0), end=(10, 0))


# --- even resampling -------------------------------------------------------------------------


def _uneven(n=30, seed=3):
    rng = np.random.default_rng(seed)
    d = np.concatenate([[0.0], np.cumsum(rng.uniform(0.02, 0.09, n - 1))])
    line = _line(n, x=E0 + 0.8 * d, y=N0 - 0.6 * d, distance=d, header_x=d * 2)
    return line, d


def test_resample_even_matches_numpy_interp_per_sample():
    line, d = _uneven()
    out = resample_even(line, spacing=0.05)
    count = int(np.floor(d[-1] / 0.05 + 1e-9)) + 1
    new = 0.05 * np.arange(count)
    assert out.sizes["trace"] == count and out.dtype == np.float32
    np.testing.assert_allclose(out["distance"].values, new)
    np.testing.assert_array_equal(out["trace"].values, np.arange(count))
    # numpy.interp is the reference linear interpolation, sample by sample.
    for k in range(line.sizes["twt"]):
        np.testing.assert_allclose(out.values[:, k], np.interp(new, d, line.values[:, k]),
                                   rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(out["x"].values, E0 + 0.8 * new)
    np.testing.assert_allclose(out["y"].values, N0 - 0.6 * new)
    np.testing.assert_allclose(out["header_x"].values, 2 * new)
    assert out.attrs["history"].endswith("resampled to even trace spacing 0.05 m")
    assert out["twt"].attrs["units"] == "ns"


def test_resample_even_dask_and_stationary_traces():
    line, d = _uneven()
    lazy = resample_even(line.chunk({"twt": 3}), spacing=0.04)
    np.testing.assert_allclose(lazy.compute().values, resample_even(line, spacing=0.04).values)
    d2 = d.copy()
    d2[10] = d2[9]  # the radar stood still for one trace
    still = line.assign_coords(distance=("trace", d2))
    with pytest.warns(SlicerWarning, match="1 trace"):
        out = resample_even(still, spacing=0.05)
    keep = np.delete(np.arange(d.size), 10)
    np.testing.assert_allclose(out.values[:, 0], np.interp(out["distance"].values, d2[keep],
                                                           line.values[keep, 0]), atol=1e-6)


def test_resample_even_refusals():
    line, d = _uneven()
    with pytest.raises(SettingsError, match="spacing: must be a positive"):
        resample_even(line, spacing=0)
    with pytest.raises(InputFileError, match="L1.sgy: .*place it first"):
        resample_even(_line(5), spacing=0.1)
    with pytest.raises(InputFileError, match="never decrease"):
        resample_even(line.assign_coords(distance=("trace", d[::-1])), spacing=0.1)
