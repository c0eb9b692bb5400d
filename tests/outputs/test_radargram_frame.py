"""A radargram's frame drawn without matplotlib, checked against matplotlib's own figure, and
the palette PNG writer, checked by Pillow's PNG decoder."""

from __future__ import annotations

import io

import numpy as np
import pytest
import xarray as xr
from PIL import Image

from slicer.outputs.radargram import PLOT_AREA, plot_radargram
from slicer.outputs.radargram_frame import (
    FRAME_COLOURS,
    LABEL_PT,
    FrameDrawer,
    grey_index,
    png_bytes,
    tick_labels,
    tick_values,
)
from slicer.outputs.radargram_pages import spread_sample

DPI = 80
D, T, V = (0.025, 40.025), (0.05, 47.95), 0.1  # a build's line: 40 m, 48 ns, 0.1 m/ns
WINDOWS = (np.arange(0.0, 48.0, 2.0), np.arange(2.0, 50.0, 2.0))


def matplotlib_figure(low=0.0):
    """plot_radargram's figure of the same layout (matplotlib lays it out: the reference)."""
    image = xr.DataArray(np.array([[low, 1.0], [1.0, low]], dtype=np.float32),
                         dims=("distance", "twt"),
                         coords={"distance": list(D), "twt": list(T),
                                 "x": ("distance", [0.0, 1.0]), "y": ("distance", [0.0, 0.0])})
    figure = plot_radargram(image, velocity=V, windows=WINDOWS, dpi=DPI, percentile=(0, 100))
    figure.canvas.draw()
    return figure


def within(ticks, limits):
    a, b = min(limits), max(limits)
    return np.asarray([v for v in ticks if a - 1e-9 <= v <= b + 1e-9])


@pytest.fixture(scope="module")
def reference():
    figure = matplotlib_figure()
    ax, bar = figure.axes[0], figure.axes[-1]
    frame, area = FrameDrawer(dpi=DPI).frame(D, T, velocity=V, windows=WINDOWS, low=0.0,
                                             label="amplitude")
    return figure, ax, bar, frame, area


def test_ticks_are_where_matplotlib_puts_them(reference):
    """Source: matplotlib's default locator on plot_radargram's axes, same size and dpi."""
    figure, ax, bar, _, _ = reference
    w_pt = figure.get_figwidth() * PLOT_AREA[2] * 72
    h_pt = figure.get_figheight() * PLOT_AREA[3] * 72
    np.testing.assert_allclose(tick_values(*D, w_pt, 3 * LABEL_PT), within(ax.get_xticks(), D))
    np.testing.assert_allclose(tick_values(*T, h_pt, 2 * LABEL_PT), within(ax.get_yticks(), T))
    depth = ax.child_axes[0]
    d_lim = (V * T[0] / 2, V * T[1] / 2)
    np.testing.assert_allclose(tick_values(*d_lim, h_pt, 2 * LABEL_PT),
                               within(depth.get_yticks(), d_lim))
    np.testing.assert_allclose(tick_values(0.0, 1.0, h_pt, 2 * LABEL_PT),
                               within(bar.get_yticks(), (0.0, 1.0)))


def test_tick_labels_read_as_matplotlibs():
    """Source: matplotlib's ScalarFormatter (the default) on the same ticks."""
    figure = matplotlib_figure(low=-1.0)
    ax, bar = figure.axes[0], figure.axes[-1]
    for axis, values in ((ax.xaxis, ax.get_xticks()), (bar.yaxis, bar.get_yticks())):
        texts = [t.get_text() for t in axis.get_ticklabels()]
        assert tick_labels(values) == texts


def test_the_data_area_and_ticks_sit_where_matplotlib_draws_them(reference):
    """The data area within a pixel of matplotlib's axes box; a dark tick mark under the data
    area at each x tick matplotlib draws, and left of it at each time tick."""
    figure, ax, _, frame, (r0, r1, c0, c1) = reference
    h = frame.shape[0]
    box = ax.get_window_extent()
    assert abs(c0 - box.x0) <= 1 and abs(c1 - box.x1) <= 1
    assert abs(r0 - (h - box.y1)) <= 1 and abs(r1 - (h - box.y0)) <= 1
    dark = FRAME_COLOURS // 2
    for v in within(ax.get_xticks(), D):
        x, _ = ax.transData.transform((v, T[1]))
        below = frame[r1 + 2: r1 + 4, round(x) - 1: round(x) + 2]
        assert below.min() < dark, v
    for v in within(ax.get_yticks(), T):
        _, y = ax.transData.transform((D[0], v))
        left = frame[round(h - y) - 1: round(h - y) + 2, c0 - 4: c0 - 2]
        assert left.min() < dark, v
    # the axis labels are drawn: ink left of the time ticks' labels and under the distance's
    assert frame[r0:r1, 5: c0 - 30].min() < dark
    assert frame[r1 + 25:, c0:c1].min() < dark


def test_the_colour_bar_runs_from_the_bottom_up(reference):
    _, _, _, frame, (r0, r1, c0, c1) = reference
    column = frame[r0:r1, :]
    bar = np.flatnonzero((column >= FRAME_COLOURS).all(axis=0))
    assert bar.size and bar.min() > c1
    levels = frame[r0:r1, bar[0]].astype(int)
    assert levels[0] == 255 and levels[-1] == FRAME_COLOURS  # top: 1; bottom: low
    assert (np.diff(levels) <= 0).all()


def test_png_is_read_back_by_pillow_as_written():
    """Source: Pillow's PNG decoder (W3C PNG specification): the same indices, palette and
    resolution."""
    rng = np.random.default_rng(3)
    indices = rng.integers(0, 256, (37, 53), dtype=np.uint8)
    indices[:, 10:20] = indices[:, 9:10]  # runs, as a stretched data area makes
    palette = rng.integers(0, 256, (256, 3), dtype=np.uint8)
    with Image.open(io.BytesIO(png_bytes(indices, palette, dpi=DPI))) as im:
        im.load()
        assert im.mode == "P" and im.size == (53, 37)
        np.testing.assert_array_equal(np.asarray(im), indices)
        np.testing.assert_array_equal(np.asarray(im.getpalette(), dtype=np.uint8)
                                      .reshape(-1, 3)[:256], palette)
        assert im.info["dpi"] == pytest.approx((DPI, DPI), abs=0.02)


def test_grey_index_spans_black_to_white():
    np.testing.assert_array_equal(grey_index(np.array([0, 255])), [0, FRAME_COLOURS - 1])
    assert (np.diff(grey_index(np.arange(256))) >= 0).all()


def test_the_sample_visits_every_column_and_row():
    """A stride that shared a factor with the row length would see only some columns (number
    theory: a stride prime to n visits every residue modulo n)."""
    values = np.arange(2000 * 60, dtype=np.float32).reshape(2000, 60)
    sample = spread_sample(values, most=40_000)
    assert 15_000 <= sample.size <= 40_000  # stride 3 shares a factor with 60: 7
    rows, cols = np.divmod(sample.astype(np.int64), 60)
    assert set(cols) == set(range(60))
    assert np.ptp(rows) > 1990


def test_the_sampled_percentile_is_close_to_numpys_over_all_values():
    """Source: numpy.percentile over every value; the sample's 99.5th percentile is within
    0.2 percentile points of rank (a line of 520 x 260 exponential amplitudes)."""
    rng = np.random.default_rng(5)
    values = rng.exponential(1.0, (520, 260)).astype(np.float32)
    sample = spread_sample(values)
    got = np.partition(sample, round(0.995 * (sample.size - 1)))[round(0.995 * (sample.size - 1))]
    lo, hi = np.percentile(values, (99.3, 99.7))
    assert lo <= got <= hi
