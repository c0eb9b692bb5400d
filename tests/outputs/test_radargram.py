"""Radargram pictures: decimation, bearings and what the figure shows."""

from __future__ import annotations

import math

import matplotlib.image
import numpy as np
import pytest
import xarray as xr

from slicer.core.errors import SettingsError
from slicer.outputs.radargram import (
    MAX_SAMPLES,
    MAX_TRACES,
    bearing,
    display_image,
    plot_radargram,
)


def line(n_traces=3000, n_samples=1500, signed=False):
    rng = np.random.default_rng(1)
    values = rng.random((n_traces, n_samples)).astype(np.float32)
    if signed:
        values -= 0.5
    return xr.DataArray(values, dims=("trace", "twt"), name="envelope",
                        coords={"x": ("trace", 500000 + 0.05 * np.arange(n_traces)),
                                "y": ("trace", np.full(n_traces, 4200000.0)),
                                "twt": ("twt", 0.1 * np.arange(n_samples))},
                        attrs={"line": "L007"})


def test_display_image_is_the_block_mean():
    src = line()
    img = display_image(src)
    assert img.shape[0] <= MAX_TRACES and img.shape[1] <= MAX_SAMPLES
    kt, ks = math.ceil(3000 / MAX_TRACES), math.ceil(1500 / MAX_SAMPLES)  # 3 and 3
    expected = src.values[:img.shape[0] * kt, :img.shape[1] * ks].reshape(
        img.shape[0], kt, img.shape[1], ks).mean(axis=(1, 3))  # numpy, the reference
    np.testing.assert_allclose(img.values, expected, rtol=1e-5)
    # distance along the line: traces 0.05 m apart, block centres
    np.testing.assert_allclose(img["distance"].values[:2], [0.05, 0.20])


def test_a_small_line_is_drawn_whole():
    src = line(200, 300)
    np.testing.assert_array_equal(display_image(src).values, src.values)


@pytest.mark.parametrize("end, expected", [((0, 1), 0), ((1, 0), 90), ((0, -1), 180),
                                           ((-1, -1), 225), ((-1, 0), 270)])
def test_bearing_clockwise_from_grid_north(end, expected):
    assert bearing(0, 0, *end) == pytest.approx(expected)


def test_the_figure_says_what_the_line_is(tmp_path):
    img = display_image(line())
    path = tmp_path / "L007.png"
    fig = plot_radargram(img, path, velocity=0.1, windows=([5.0, 10.0], [10.0, 15.0]),
                         units="envelope")
    texts = " ".join(t.get_text() for t in fig.texts)
    assert "L007" in texts and "bearing 90" in texts and "(500000.00, 4200000.00)" in texts
    labels = [a.get_ylabel() for a in fig.axes] + [
        c.get_ylabel() for a in fig.axes for c in a.child_axes]
    assert "two-way time (ns)" in labels and any("depth (m)" in s for s in labels)
    assert fig.axes[0].get_xlabel() == "distance along the line (m)"
    assert len(fig.axes[0].lines) == 2  # one bracket per window
    pixels = matplotlib.image.imread(path)
    assert pixels.shape[0] > 300 and pixels.shape[1] > 600


def test_a_signed_line_gets_a_scale_centred_on_zero():
    fig = plot_radargram(display_image(line(signed=True)))
    image = fig.axes[0].images[0]
    lo, hi = image.norm.vmin, image.norm.vmax
    assert lo == pytest.approx(-hi) and image.get_cmap().name == "PuOr_r"


def test_bad_input():
    with pytest.raises(SettingsError):
        display_image(xr.DataArray(np.zeros((2, 2)), dims=("a", "b")))
    with pytest.raises(SettingsError, match="colormap"):
        plot_radargram(display_image(line(10, 10)), cmap="no-such-map")
    with pytest.raises(SettingsError, match="finite"):
        plot_radargram(display_image(line(10, 10) * np.nan))
