"""Tests of slicer.geometry.localgrid: local survey grid to CRS, similarity (2D Helmert) and
affine fits from control points.

Sources named beside the checks:
- The 4-parameter similarity transformation X = a x - b y + tx, Y = b x + a y + ty with
  a = s cos(r), b = s sin(r): IOGP (EPSG) Guidance Note 7-2, "Coordinate Conversions and
  Transformations including Formulas", section on the Similarity Transformation (EPSG method
  9621) [memory for the method code].
- scipy.linalg.lstsq on the uncentred linear systems and scipy.optimize.least_squares on the
  non-linear (scale, rotation, shift) form, as independent reference solvers on noisy points.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import least_squares

from slicer.core.errors import InputFileError, SettingsError, SlicerWarning
from slicer.geometry.localgrid import (
    ControlPoint,
    fit_affine,
    fit_control_points,
    fit_similarity,
    read_control_points,
    transform_entries,
)
from slicer.io.linetable import LineEntry

E0, N0 = 512000.0, 4650000.0
LOCAL = np.array([[0.0, 0.0], [40.0, 0.0], [40.0, 25.0], [0.0, 25.0], [20.0, 12.0],
                  [7.5, 31.0]])


def _helmert(local, scale, rotation_deg, tx, ty):
    """Apply a similarity transform written from its parameters (EPSG GN 7-2 form)."""
    r = math.radians(rotation_deg)
    a, b = scale * math.cos(r), scale * math.sin(r)
    x, y = local[:, 0], local[:, 1]
    return np.column_stack([a * x - b * y + tx, b * x + a * y + ty])


def _noise(n, sigma=0.01, seed=4):
    return np.random.default_rng(seed).normal(scale=sigma, size=(n, 2))


def test_similarity_recovers_exact_transform():
    crs = _helmert(LOCAL, 1.00031, 23.5, E0, N0)
    t = fit_similarity(LOCAL, crs, names=list("ABCDEF"))
    assert t.kind == "similarity"
    assert t.scale == pytest.approx(1.00031, abs=1e-12)
    assert t.rotation_deg == pytest.approx(23.5, abs=1e-9)
    assert t.shift == pytest.approx((E0, N0), abs=1e-6)
    assert max(t.residuals) < 1e-6 and t.rms < 1e-6
    assert t.shear_deg == pytest.approx(0.0, abs=1e-9) and not t.mirrored
    x, y = t.apply([3.0, -8.0], [2.0, 50.0])
    want = _helmert(np.array([[3.0, 2.0], [-8.0, 50.0]]), 1.00031, 23.5, E0, N0)
    np.testing.assert_allclose(np.column_stack([x, y]), want, atol=1e-6)
    assert t.names == tuple("ABCDEF")


@settings(max_examples=40, deadline=None)
@given(scale=st.floats(0.9, 1.1), rotation=st.floats(-179.9, 179.9),
       tx=st.floats(-1e6, 1e6), ty=st.floats(0, 1e7))
def test_similarity_recovers_any_transform(scale, rotation, tx, ty):
    t = fit_similarity(LOCAL, _helmert(LOCAL, scale, rotation, tx, ty))
    assert t.scale == pytest.approx(scale, abs=1e-9)
    assert t.rotation_deg == pytest.approx(rotation, abs=1e-7)
    assert max(t.residuals) < 1e-5


def test_similarity_from_two_points_and_collinear_points():
    # Two distinct points determine a similarity; points on one line are fine for it.
    crs = _helmert(LOCAL[:2], 0.9996, -110.0, E0, N0)
    t = fit_similarity(LOCAL[:2], crs)
    assert t.rotation_deg == pytest.approx(-110.0, abs=1e-9)
    line = np.array([[0.0, 0.0], [10.0, 0.0], [25.0, 0.0]])
    t3 = fit_similarity(line, _helmert(line, 1.0, 5.0, E0, N0))
    assert t3.rotation_deg == pytest.approx(5.0, abs=1e-9)


def test_affine_recovers_exact_transform():
    m = np.array([[1.0012, 0.0031], [-0.0024, 0.9985]])
    shift = np.array([E0, N0])
    crs = LOCAL @ m.T + shift
    t = fit_affine(LOCAL, crs)
    # Exact up to rounding of UTM magnitudes (~1e-9 m over a 40 m spread).
    np.testing.assert_allclose(np.array(t.matrix), m, atol=1e-10)
    np.testing.assert_allclose(t.shift, shift, atol=1e-6)
    assert max(t.residuals) < 1e-6
    assert t.scale_x == pytest.approx(math.hypot(1.0012, -0.0024), abs=1e-10)
    assert t.scale_y == pytest.approx(math.hypot(0.0031, 0.9985), abs=1e-10)
    assert t.scale == pytest.approx(math.sqrt(np.linalg.det(m)), abs=1e-10)


def test_noisy_similarity_matches_scipy_least_squares():
    crs = _helmert(LOCAL, 1.0002, 41.0, E0, N0) + _noise(len(LOCAL))
    t = fit_similarity(LOCAL, crs)
    # Reference 1: scipy.linalg.lstsq on the linear (a, b, tx, ty) system, not centred.
    x, y = LOCAL.T
    one, zero = np.ones_like(x), np.zeros_like(x)
    design = np.vstack([np.column_stack([x, -y, one, zero]), np.column_stack([y, x, zero, one])])
    (a, b, tx, ty), *_ = scipy.linalg.lstsq(design, np.concatenate([crs[:, 0], crs[:, 1]]))
    assert t.scale == pytest.approx(math.hypot(a, b), abs=1e-10)
    assert t.rotation_deg == pytest.approx(math.degrees(math.atan2(b, a)), abs=1e-8)
    assert t.shift == pytest.approx((tx, ty), abs=1e-5)

    # Reference 2: the non-linear (scale, rotation, shifts) problem by scipy.optimize.
    def misfit(p):
        return (_helmert(LOCAL, p[0], p[1], p[2], p[3]) - crs).ravel()

    ref = least_squares(misfit, x0=[1.0, 40.0, E0, N0], x_scale=[1e-3, 1e-2, 1.0, 1.0],
                        xtol=1e-15, ftol=1e-15, gtol=1e-15)
    assert t.scale == pytest.approx(ref.x[0], abs=1e-7)
    assert t.rotation_deg == pytest.approx(ref.x[1], abs=1e-5)
    want = np.hypot(*misfit(ref.x).reshape(-1, 2).T)
    np.testing.assert_allclose(t.residuals, want, atol=1e-5)
    assert t.rms == pytest.approx(math.sqrt(np.mean(want ** 2)), abs=1e-5)
    assert 0.001 < t.rms < 0.05  # 1 cm noise leaves centimetre residuals


def test_noisy_affine_matches_scipy_lstsq():
    m = np.array([[0.9990, 0.0100], [-0.0080, 1.0020]])
    crs = LOCAL @ m.T + [E0, N0] + _noise(len(LOCAL), seed=9)
    t = fit_affine(LOCAL, crs)
    # scipy.linalg.lstsq on the uncentred 3-parameter system of each axis.
    design = np.column_stack([LOCAL, np.ones(len(LOCAL))])
    solution, *_ = scipy.linalg.lstsq(design, crs)
    np.testing.assert_allclose(np.array(t.matrix), solution[:2].T, atol=1e-10)
    np.testing.assert_allclose(t.shift, solution[2], atol=1e-5)
    fitted = design @ solution
    np.testing.assert_allclose(t.residuals, np.hypot(*(fitted - crs).T), atol=1e-6)


def _points(crs, names=None):
    names = names or [f"P{i + 1}" for i in range(len(crs))]
    return [ControlPoint(n, tuple(loc), tuple(c), where=f"pegs.csv:{i + 2}")
            for i, (n, loc, c) in enumerate(zip(names, LOCAL, crs, strict=True))]


def test_fit_control_points_refuses_worst_point_over_tolerance():
    crs = _helmert(LOCAL, 1.0, 12.0, E0, N0)
    crs[4] += [0.3, -0.2]  # P5 mis-surveyed by 0.36 m
    with pytest.raises(SettingsError, match=r"pegs\.csv:6: control point 'P5' misses its "
                                            r"surveyed position by 0\.\d+ m .*tolerance 0\.05"):
        fit_control_points(_points(crs), tolerance=0.05)
    ok = fit_control_points(_points(crs), tolerance=0.5)
    assert int(np.argmax(ok.residuals)) == 4
    good = fit_control_points(_points(_helmert(LOCAL, 1.0, 12.0, E0, N0)), kind="affine")
    assert good.kind == "affine" and max(good.residuals) < 1e-6


@pytest.mark.parametrize(("kind", "n"), [("similarity", 1), ("affine", 2)])
def test_too_few_points_refused(kind, n):
    crs = _helmert(LOCAL, 1.0, 0.0, E0, N0)
    with pytest.raises(SettingsError, match=rf"pegs\.csv: a {kind} fit needs at least"):
        fit_control_points(_points(crs)[:n], kind=kind)


def test_degenerate_points_refused():
    same = np.array([[5.0, 5.0], [5.0, 5.0], [5.0, 5.0]])
    with pytest.raises(SettingsError, match="coincide on the local grid"):
        fit_similarity(same, _helmert(LOCAL[:3], 1.0, 0.0, E0, N0))
    with pytest.raises(SettingsError, match="coincide in the survey CRS"):
        fit_similarity(LOCAL[:3], np.tile([E0, N0], (3, 1)))
    line = np.array([[0.0, 0.0], [10.0, 10.0], [20.0, 20.0], [35.0, 35.0]])
    with pytest.raises(SettingsError, match="one straight line on the local grid"):
        fit_affine(line, _helmert(line, 1.0, 0.0, E0, N0))
    nearly = line + np.array([[0.0, 0.0], [0.0, 1e-5], [0.0, 0.0], [0.0, 0.0]])
    with pytest.raises(SettingsError, match="almost on one straight line.*condition number"):
        fit_affine(nearly, _helmert(nearly, 1.0, 0.0, E0, N0))
    with pytest.raises(SettingsError, match="kind: must be one of"):
        fit_control_points(_points(LOCAL), kind="projective")
    with pytest.raises(SettingsError, match="tolerance: must be a positive"):
        fit_control_points(_points(LOCAL), tolerance=-1)


def test_exactly_determined_and_mirrored_warned():
    crs = _helmert(LOCAL, 1.0, 30.0, E0, N0)
    with pytest.warns(SlicerWarning, match="exactly determine a similarity fit"):
        fit_control_points(_points(crs)[:2])
    mirror = crs.copy()
    mirror[:, 1] = 2 * N0 - mirror[:, 1]  # the local grid is left-handed
    with pytest.raises(SettingsError, match="looks mirrored"):
        fit_control_points(_points(mirror))
    with pytest.warns(SlicerWarning, match="mirrors the local grid"):
        t = fit_control_points(_points(mirror), kind="affine")
    assert t.mirrored


def test_read_control_points(tmp_path):
    good = tmp_path / "pegs.csv"
    crs = _helmert(LOCAL[:4], 1.0, 90.0, E0, N0)
    good.write_text("name,local_x,local_y,x,y,note\n" + "".join(
        f"{n},{lx!r},{ly!r},{x!r},{y!r},peg\n"
        for n, (lx, ly), (x, y) in zip("ABCD", LOCAL[:4].tolist(), crs.tolist(), strict=True)))
    points = read_control_points(good)
    assert [p.name for p in points] == list("ABCD")
    assert points[2].where == f"{good}:4" and points[2].local == (40.0, 25.0)
    t = fit_control_points(points)
    assert t.rotation_deg == pytest.approx(90.0, abs=1e-9)
    bad = tmp_path / "bad.csv"
    bad.write_text("name,local_x,local_y,x,y\nA,0,0,1,2\nB,1,zero,3,4\n")
    with pytest.raises(InputFileError, match=r"bad\.csv:3: column local_y: 'zero'"):
        read_control_points(bad)
    dup = tmp_path / "dup.csv"
    dup.write_text("name,local_x,local_y,x,y\nA,0,0,1,2\nA,1,1,3,4\n")
    with pytest.raises(InputFileError, match=r"dup\.csv:3: control point 'A' is already"):
        read_control_points(dup)
    short = tmp_path / "short.csv"
    short.write_text("name,x,y\nA,1,2\n")
    with pytest.raises(InputFileError, match=r"short\.csv: missing column\(s\) local_x"):
        read_control_points(short)


def test_transform_entries():
    t = fit_similarity(LOCAL, _helmert(LOCAL, 1.0001, -35.0, E0, N0))
    entries = [LineEntry(Path("a.sgy"), (0.0, 0.0), (0.0, 20.0), "t.csv:2"),
               LineEntry(Path("b.sgy"), (0.5, 20.0), (0.5, 0.0), "t.csv:3")]
    out = transform_entries(entries, t)
    for before, after in zip(entries, out, strict=True):
        assert after.file == before.file and after.where == before.where
        want = _helmert(np.array([before.start, before.end]), 1.0001, -35.0, E0, N0)
        assert after.start == pytest.approx(tuple(want[0]), abs=1e-6)
        assert after.end == pytest.approx(tuple(want[1]), abs=1e-6)
        assert after.length == pytest.approx(1.0001 * before.length, rel=1e-12)
