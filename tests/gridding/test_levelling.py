"""Tests of slicer.gridding.levelling: line levelling on trace x slice tables with known
stripes."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import SettingsError, SlicerWarning
from slicer.gridding.levelling import level_lines, line_corrections, stripe_amplitude

N_LINES, N_TRACES, N_SLICES = 25, 201, 3
SPACING, STEP = 0.5, 0.05  # m between lines, m between traces
BAND_LINE = 12
XS = STEP * np.arange(N_TRACES)
YS = SPACING * np.arange(N_LINES)
BAND = (XS >= 3.5) & (XS < 6.5)  # 30 % of the line's length


def _table(values, x=None, y=None, line=None):
    """A trace x slice table from ``values`` of shape (lines, traces, slices) on the grid."""
    gx, gy = np.meshgrid(XS, YS)
    n_lines, n_traces = values.shape[:2]
    return xr.DataArray(
        np.asarray(values, np.float32).reshape(-1, values.shape[-1]), dims=("trace", "slice"),
        name="value",
        coords={"x": ("trace", (gx if x is None else x).ravel(), {"units": "m"}),
                "y": ("trace", (gy if y is None else y).ravel(), {"units": "m"}),
                "line": ("trace", np.repeat(np.arange(n_lines), n_traces).astype(np.int32)
                         if line is None else line),
                "top": ("slice", 0.1 * np.arange(values.shape[-1]), {"units": "m"}),
                "bottom": ("slice", 0.1 * np.arange(1, values.shape[-1] + 1), {"units": "m"})})


def _smooth_field():
    """A positive smooth field varying along and across the lines, one pattern per slice."""
    gx, gy = np.meshgrid(XS, YS)
    return np.stack([1.0 + 0.3 * np.sin(2 * np.pi * gx / 7.0 + s)
                     * np.cos(2 * np.pi * gy / 9.0 + s) + 0.02 * gy
                     for s in range(N_SLICES)], axis=-1)


def _line_gains(seed=0):
    """Multiplicative stripes: a zigzag pattern (+-10 %) times random 15 % per-line gains."""
    rng = np.random.default_rng(seed)
    return np.exp(rng.normal(0, 0.15, N_LINES)) * np.where(np.arange(N_LINES) % 2, 1.1, 0.9)


@pytest.fixture(scope="module")
def survey():
    truth = _smooth_field()
    truth[BAND_LINE, BAND, :] *= 2.0  # a bright feature along part of one line
    striped = truth * _line_gains()[:, None, None]
    return truth, striped


def _band_contrast(table):
    """Band brightness over its neighbouring lines at the same positions, minus 1, per slice."""
    v = table.values.reshape(N_LINES, N_TRACES, -1)
    neighbours = 0.5 * (v[BAND_LINE - 1] + v[BAND_LINE + 1])
    return np.median(v[BAND_LINE, BAND] / neighbours[BAND], axis=0) - 1


def test_levelling_removes_stripes_and_keeps_the_band(survey):
    truth, striped = survey
    levelled = level_lines(_table(striped))
    before, after = stripe_amplitude(_table(striped)).values, stripe_amplitude(levelled).values
    floor = stripe_amplitude(_table(truth)).values  # the field's own line-to-line change
    # the stripe pattern alone: the table divided by the truth
    pattern_before = stripe_amplitude(_table(striped / truth)).values
    pattern_after = stripe_amplitude(
        _table(levelled.values.reshape(truth.shape) / truth)).values
    contrast = _band_contrast(levelled) / _band_contrast(_table(truth)) - 1
    print(f"\nstripe amplitude before {np.round(before, 3)}, after {np.round(after, 3)} "
          f"(field alone {np.round(floor, 3)}); stripe pattern before "
          f"{np.round(pattern_before, 3)}, after {np.round(pattern_after, 3)}; band contrast "
          f"change {np.round(contrast, 3)}")
    assert (pattern_after < 0.2 * pattern_before).all()  # the stripes drop by more than 80 %
    assert (after < 0.2 * before).all()
    assert (np.abs(contrast) < 0.2).all()  # the band keeps its contrast within 20 %
    assert levelled.dtype == np.float32 and "levelling" in levelled.attrs
    np.testing.assert_array_equal(levelled.top.values, 0.1 * np.arange(N_SLICES))


def test_mean_statistic_is_biased_by_the_band(survey):
    # the same levelling with the non-robust mean of the paired differences: the band lifts
    # its line's level, so levelling darkens the band (why the median is the default)
    truth, striped = survey
    wanted = _band_contrast(_table(truth))
    robust = np.abs(_band_contrast(level_lines(_table(striped))) / wanted - 1)
    plain = np.abs(_band_contrast(level_lines(_table(striped), method="mean")) / wanted - 1)
    assert (plain > 0.2).all() and (plain > 3 * robust).all()


def test_offset_stripes_are_removed():
    field = _smooth_field()
    offsets = np.random.default_rng(4).normal(0, 0.1, N_LINES)
    striped = _table(field + offsets[:, None, None])
    levelled = level_lines(striped, kind="offset")
    before = stripe_amplitude(striped).values
    after = stripe_amplitude(_table(levelled.values.reshape(field.shape) - field + 1.0)).values
    assert (after < 0.2 * before).all()


@given(st.floats(-1.0, 1.0), st.floats(-0.1, 0.1), st.floats(0.0, 0.4))
@settings(max_examples=20, deadline=None)
def test_a_smooth_trend_is_left_alone(level, slope, along):
    # No stripes: a field log-linear across the lines times any along-line pattern. Paired
    # differences see only the linear trend, and a locally weighted linear fit reproduces a
    # linear function exactly (Cleveland 1979, JASA 74:829-836), so every factor is 1.
    gx, gy = np.meshgrid(XS, YS)
    field = np.exp(level + slope * gy) * (1 + along * np.sin(2 * np.pi * gx / 3.0))
    factors = line_corrections(_table(field[..., None]))
    np.testing.assert_allclose(factors.values, 1.0, atol=2e-5)


def test_orthogonal_sets_are_levelled_separately():
    # west-east lines striped, south-north lines over the same field left as they are
    n = 11
    pos = SPACING * np.arange(n)
    along = STEP * np.arange(101)
    def f(x, y):  # log-linear, so the paired log differences are exactly linear across lines
        return np.exp(0.1 * x + 0.05 * y)
    gains = np.where(np.arange(n) % 2, 1.2, 0.8)
    xs, ys, vals, ids = [], [], [], []
    for k in range(n):  # west-east lines (ids 0..n-1), then south-north lines (n..2n-1)
        for x, y, gain, name in ((along, np.full(along.size, pos[k]), gains[k], k),
                                 (np.full(along.size, pos[k]), along, 1.0, n + k)):
            xs.append(x)
            ys.append(y)
            vals.append(gain * f(x, y))
            ids.append(np.full(along.size, name))
    table = xr.DataArray(np.concatenate(vals)[:, None].astype(np.float32),
                         dims=("trace", "slice"),
                         coords={"x": ("trace", np.concatenate(xs)),
                                 "y": ("trace", np.concatenate(ys)),
                                 "line": ("trace", np.concatenate(ids))})
    factors = line_corrections(table).values[:, 0]
    np.testing.assert_allclose(factors[n:], 1.0, atol=1e-5)
    corrected = gains * factors[:n]  # constant across the striped set once levelled
    assert np.ptp(corrected[2:-2]) < 0.02 * corrected.mean()


def test_stripe_amplitude_of_a_cube():
    # rows alternately 1.1 and 0.9 of a constant: every row-to-row step is 0.2 and the median
    # level 1.0, so the amplitude across y is 0.2; along x nothing changes
    rows = np.where(np.arange(6) % 2, 1.1, 0.9)
    cube = xr.DataArray(np.broadcast_to(rows[None, :, None], (2, 6, 5)).astype(np.float32),
                        dims=("depth", "y", "x"), coords={"depth": [0.05, 0.15]})
    np.testing.assert_allclose(stripe_amplitude(cube).values, 0.2, rtol=1e-6)
    np.testing.assert_allclose(stripe_amplitude(cube, across="x").values, 0.0, atol=1e-7)
    with pytest.raises(SettingsError, match="across"):
        stripe_amplitude(cube, across="depth")


def test_a_line_without_neighbours_is_left_and_reported():
    field = _smooth_field()[:1]  # one line only
    gx, gy = np.meshgrid(XS, YS[:1])
    with pytest.warns(SlicerWarning, match="not levelled"):
        factors = line_corrections(_table(field, x=gx, y=gy))
    np.testing.assert_array_equal(factors.values, 1.0)


@pytest.mark.parametrize("kwargs, where", [({"method": "mode"}, "method"),
                                           ({"kind": "ratio"}, "kind"),
                                           ({"neighbours": 0}, "neighbours")])
def test_options_are_checked(kwargs, where):
    with pytest.raises(SettingsError, match=where):
        level_lines(_table(_smooth_field()), **kwargs)


def test_tables_without_lines_are_refused():
    table = _table(_smooth_field())
    with pytest.raises(SettingsError, match="'line'"):
        level_lines(table.drop_vars("line"))
    with pytest.raises(SettingsError, match="table"):
        level_lines(table.rename(slice="band"))
    with pytest.raises(SettingsError, match="data"):
        stripe_amplitude(table.rename(slice="band"))
