"""Radargram pictures: decimation, bearings and what the figure shows."""

from __future__ import annotations

import math

import hypothesis.extra.numpy as hnp
import hypothesis.strategies as st
import matplotlib.image
import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings

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


def test_image_of_samples_is_display_image_on_plain_arrays():
    src = line(n_traces=900, n_samples=700)
    a = display_image(src)
    from slicer.outputs.radargram import image_of_samples
    b = image_of_samples(src.values, src["x"].values, src["y"].values, src["twt"].values,
                         name=src.name, attrs=src.attrs)
    xr.testing.assert_identical(a, b)


def test_fast_pages_colour_each_cell_as_matplotlibs_colour_map_and_keep_the_layout(tmp_path):
    """RadargramPages: the data area where plot_radargram puts it (PLOT_AREA), each pixel the
    colour matplotlib's 'magma' map gives the value relative to the line's 99.5th percentile
    (within the 192-entry table's step), the titles drawn, one frame for lines alike."""
    from PIL import Image

    from slicer.outputs.radargram import PLOT_AREA, image_of_samples
    from slicer.outputs.radargram_pages import FRAME_COLOURS, RadargramPages
    values = np.zeros((200, 100), dtype=np.float32)
    values[100:, :] = 1.0  # the second half of the line: its 99.5th percentile
    values[:, 50:] *= 0.5  # ... and half that below 5 ns
    image = image_of_samples(values, 0.05 * np.arange(200), np.zeros(200), 0.1 * np.arange(100),
                             attrs={"line": "L9"})
    pages = RadargramPages()
    a = pages.save(image, tmp_path / "a.png", velocity=0.1)
    pages.save(image, tmp_path / "b.png", velocity=0.1)
    assert len(pages._frames) == 1  # the frame was drawn once
    with Image.open(a) as im:
        assert im.mode == "P"
        rgb = np.asarray(im.convert("RGB"), dtype=float)
    h, w, _ = rgb.shape
    left, bottom, width, height = PLOT_AREA
    col = lambda f: int((left + f * width) * w)  # noqa: E731
    row = lambda f: int((1 - bottom - height + f * height) * h)  # noqa: E731
    step = 255 / (256 - FRAME_COLOURS - 1)
    magma = matplotlib.colormaps["magma"]
    for (fx, fy), value in {(0.25, 0.25): 0.0, (0.75, 0.25): 1.0, (0.75, 0.75): 0.5}.items():
        expected = np.asarray(magma(value)[:3]) * 255
        np.testing.assert_allclose(rgb[row(fy), col(fx)], expected, atol=step + 1)
    # outside the data area on the left: the frame's white margin
    np.testing.assert_allclose(rgb[row(0.5), int(0.5 * left * w) - 20], 255, atol=1)
    # the title band holds dark text pixels
    assert (rgb[: int(0.15 * h)].sum(axis=2) < 200).any()
    with Image.open(tmp_path / "b.png") as im:
        assert np.array_equal(np.asarray(im.convert("RGB"), dtype=float), rgb)


def test_fast_pages_refuse_an_empty_line(tmp_path):
    from slicer.outputs.radargram import image_of_samples
    from slicer.outputs.radargram_pages import RadargramPages
    image = image_of_samples(np.full((5, 5), np.nan), np.arange(5.0), np.zeros(5),
                             np.arange(5.0))
    with pytest.raises(SettingsError):
        RadargramPages().save(image, tmp_path / "x.png")


@settings(max_examples=40, deadline=None)
@given(cells=hnp.arrays(np.float32, hnp.array_shapes(min_dims=2, max_dims=2, max_side=12),
                        elements=st.floats(0, 2, width=32) | st.just(np.float32("nan"))),
       rows=st.integers(1, 30), cols=st.integers(1, 30))
def test_fast_pages_take_the_cell_under_each_pixel_centre(cells, rows, cols):
    """Each data-area pixel shows the cell its centre falls in, as imshow spreads cells evenly
    over the area (matplotlib's nearest interpolation, common practice for image display):
    pixel (r, c) shows distance cell floor((c + 0.5) n_d / cols) and time cell
    floor((r + 0.5) n_t / rows), checked pixel by pixel against the cells' own colour."""
    from slicer.outputs.radargram_pages import FRAME_COLOURS, RadargramPages
    area = RadargramPages._colour(cells, 1.0, False, rows, cols)
    own = RadargramPages._colour(cells, 1.0, False, cells.shape[1], cells.shape[0])
    assert area.shape == (rows, cols)
    n_d, n_t = cells.shape
    for r in range(rows):
        for c in range(cols):
            i, j = int((c + 0.5) * n_d / cols), int((r + 0.5) * n_t / rows)
            assert area[r, c] == own[j, i]
            if np.isnan(cells[i, j]):
                assert area[r, c] == FRAME_COLOURS - 1  # white
