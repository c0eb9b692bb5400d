"""Tests of slicer.outputs.figures: the overview sheet and single-slice plots."""

from __future__ import annotations

import subprocess
import sys
import tracemalloc
from pathlib import Path

import dask.array as darray
import matplotlib.image
import numpy as np
import pytest
from dask.callbacks import Callback
from hypothesis import given, settings
from hypothesis import strategies as st
from matplotlib import colormaps
from matplotlib.colors import Normalize, to_rgba
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle
from matplotlib.text import Annotation, Text
from matplotlib.transforms import Bbox

from slicer.core.errors import OutputError, SettingsError
from slicer.outputs.cube import new_cube
from slicer.outputs.figures import (
    NODATA_COLOUR,
    plot_overview,
    plot_slice,
    range_labels,
    sample_stride,
    shared_limits,
)
from slicer.outputs.sheet_layout import nice_length

WEST, NORTH, CELL = 500000.0, 4649776.0, 0.05


def make_cube(n=5, ny=30, nx=45, *, axis="depth", crs="EPSG:32633", velocity=0.1,
              west=WEST, north=NORTH):
    rng = np.random.default_rng(3)
    # Slices on very different scales: per-slice limits would differ from shared ones.
    data = rng.random((n, ny, nx)).astype(np.float32) * (1 + np.arange(n))[:, None, None]
    data[:, :5, :6] = np.nan
    step = 0.1 if axis == "depth" else 2.5
    tops = 0.3 + np.arange(n) * step
    return new_cube(data, west=west, north=north, cell=CELL, crs=crs, top=tops,
                    bottom=tops + step, axis=axis, velocity=velocity)


def panel_boxes(figure: Figure) -> dict[str, Bbox]:
    """The framed panels of a sheet, by window label: their boxes in pixels of the figure at
    its own dpi (origin bottom left, as matplotlib's display coordinates)."""
    renderer = figure.canvas.get_renderer()
    return {a.get_label().removeprefix("panel "): a.get_window_extent(renderer)
            for a in figure.artists
            if isinstance(a, Rectangle) and a.get_label().startswith("panel ")}


def texts(figure: Figure) -> list[str]:
    """Every string written on the sheet (titles, tick and axis labels, scale bar...)."""
    return [t.get_text() for t in figure.findobj(Text) if t.get_visible()]


def colorbar(figure: Figure):
    bars = [ax for ax in figure.axes if ax.get_label() == "<colorbar>"]
    assert len(bars) == 1
    return bars[0]


def drawn_and_saved(cube, path, **options):
    """The one-page overview of ``cube`` written to ``path``, and the same page as a figure
    (drawn again: a one-page overview is the sheet of every slice)."""
    assert plot_overview(cube, path, **options) == [path]
    return plot_overview(cube, **options)


def grid_shape(boxes) -> tuple[int, int]:
    # Rows and columns of panels: distinct top edges and left edges of the boxes.
    return (len({round(b.y1) for b in boxes.values()}),
            len({round(b.x0) for b in boxes.values()}))


def pixel(image: np.ndarray, box: Bbox, fx: float, fy: float) -> np.ndarray:
    """RGB of the saved image at fractions (fx from the west, fy from the north) of a panel."""
    height = image.shape[0]
    col = int(box.x0 + fx * box.width)
    row = int(height - box.y1 + fy * box.height)
    return image[row, col, :3]


def test_sheet_layout_labels_and_shared_scale():
    cube = make_cube()
    figure = plot_overview(cube)
    labels = ["0.30-0.40 m", "0.40-0.50 m", "0.50-0.60 m", "0.60-0.70 m", "0.70-0.80 m"]
    boxes = panel_boxes(figure)
    assert sorted(boxes) == labels
    assert grid_shape(boxes) == (2, 3)  # ceil(sqrt(5)) columns
    # Reading order: left to right, then top to bottom.
    order = sorted(boxes, key=lambda k: (-round(boxes[k].y1), boxes[k].x0))
    assert order == labels
    assert set(labels) <= set(texts(figure))
    bar = colorbar(figure)
    assert "envelope" in bar.get_ylabel()
    values = cube.values[np.isfinite(cube.values)]
    # Reference: numpy.percentile over all finite values of all slices.
    assert bar.get_ylim() == pytest.approx(tuple(np.percentile(values, [2, 98])))
    for box in boxes.values():  # equal aspect: 45 x 30 cells, to the pixel
        assert box.width / box.height == pytest.approx(45 / 30, abs=2 / box.height)
    title = figure.get_suptitle()
    assert "EPSG:32633" in title and "0.1 m/ns" in title


def test_compact_ticks_relative_to_the_corner():
    figure = plot_overview(make_cube())
    written = texts(figure)
    # One easting label under each column's lowest panel, one northing label per row.
    assert written.count("easting - 500000 (m)") == 3
    assert written.count(f"northing - {NORTH - 30 * CELL:.10g} (m)") == 2
    # The grid is 45 x 0.05 = 2.25 m wide and 1.5 m high: round ticks from the corner (0)
    # up to 2.0 m, none beyond the grid's edge.
    numbers = {float(t) for t in written if t.replace(".", "", 1).isdigit()}
    assert 0 in numbers and 2.0 in numbers and 1.5 in numbers
    assert max(numbers) <= 45 * CELL
    small = plot_overview(make_cube(crs=None, west=0.0, north=1.5))
    assert "easting (m)" in texts(small) and "northing (m)" in texts(small)
    assert "local grid" in small.get_suptitle()


def test_nodata_is_grey_and_distinct_from_the_colormap(tmp_path):
    figure = drawn_and_saved(make_cube(), tmp_path / "sheet.png", colormap="viridis", dpi=100)
    image = matplotlib.image.imread(tmp_path / "sheet.png")
    grey = np.array(to_rgba(NODATA_COLOUR))
    # Cells 0-4 (of 30) from the north and 0-5 (of 45) from the west have no data.
    for box in panel_boxes(figure).values():
        np.testing.assert_allclose(pixel(image, box, 3 / 45, 2.5 / 30), grey[:3], atol=1 / 255)
    samples = colormaps["viridis"](np.linspace(0, 1, 256))
    assert np.min(np.linalg.norm(samples[:, :3] - grey[:3], axis=1)) > 0.1


def test_scale_bar_and_north_arrow_on_first_panel():
    figure = plot_overview(make_cube())
    renderer = figure.canvas.get_renderer()
    first = panel_boxes(figure)["0.30-0.40 m"]
    # 45 cells of 0.05 m = 2.25 m wide: a fifth is 0.45 m, the nice round length 50 cm.
    labels = [t for t in figure.findobj(Text) if t.get_text() == "50 cm"]
    assert len(labels) == 1
    assert first.contains(*labels[0].get_window_extent(renderer).get_points().mean(axis=0))
    arrows = [t for t in figure.findobj(Annotation) if t.get_text() == "N"]
    assert len(arrows) == 1
    # The text sits straight below the arrow head: the arrow points to +y (grid north).
    dx, dy = arrows[0].xyann
    assert dx == 0 and dy < 0
    assert first.contains(*arrows[0].get_window_extent(renderer).get_points().mean(axis=0))


@settings(max_examples=50, deadline=None)
@given(width=st.floats(0.05, 5000))
def test_scale_bar_length_is_round_and_about_a_fifth(width):
    length = nice_length(width)
    mantissa = length / 10 ** np.floor(np.log10(length) + 1e-9)
    assert min(abs(mantissa - m) for m in (1, 2, 5)) < 1e-9
    assert width / 10 <= length <= width / 4


def test_saved_png_has_the_figure_size(tmp_path):
    path = tmp_path / "overview.png"
    figure = drawn_and_saved(make_cube(n=2), path, dpi=100)
    image = matplotlib.image.imread(path)
    w, h = figure.get_size_inches() * 100
    assert image.shape[:2] == (round(h), round(w))
    assert image.std() > 0.05  # something was drawn
    assert [p.name for p in tmp_path.iterdir()] == ["overview.png"]


def block_cube(n=4, *, name="envelope", signed=False):
    """Slices of 3 x 4 blocks of 10 x 10 equal cells (one block without data), so the colour
    at each block's centre does not depend on how cells are resampled to pixels."""
    rng = np.random.default_rng(8)
    blocks = rng.random((n, 3, 4)) * (1 + np.arange(n))[:, None, None]
    if signed:
        blocks = blocks - blocks.mean()
        blocks[:, 0, 1] = 0.0
    blocks[:, 2, 3] = np.nan
    data = np.kron(blocks, np.ones((10, 10))).astype(np.float32)
    tops = 0.1 * np.arange(n)
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633", top=tops,
                    bottom=tops + 0.1, name=name), blocks


def check_block_colours(figure, png, blocks, cmap, vmin, vmax):
    # Reference: matplotlib's own colour map and Normalize applied to the input values,
    # compared with the pixels of the saved PNG read back by matplotlib.image.imread.
    image = matplotlib.image.imread(png)
    if np.ndim(vmin):  # one range per slice
        low, high = np.asarray(vmin)[:, None, None], np.asarray(vmax)[:, None, None]
        expected = colormaps[cmap]((blocks - low) / (high - low))[..., :3]
    else:
        expected = colormaps[cmap](Normalize(vmin, vmax)(blocks))[..., :3]
    expected[np.isnan(blocks)] = to_rgba(NODATA_COLOUR)[:3]
    boxes = panel_boxes(figure)
    assert len(boxes) == len(blocks)
    for i, label in enumerate(sorted(boxes)):
        for r in range(3):
            for c in range(4):
                got = pixel(image, boxes[label], (c + 0.5) / 4, (r + 0.5) / 3)
                np.testing.assert_allclose(got, expected[i, r, c], atol=1.5 / 255,
                                           err_msg=f"panel {label}, block {r}, {c}")


@pytest.mark.parametrize("dpi", [60, 100])
def test_panel_pixels_are_the_colour_mapped_slices(tmp_path, dpi):
    cube, blocks = block_cube()
    figure = drawn_and_saved(cube, tmp_path / "sheet.png", dpi=dpi)
    finite = cube.values[np.isfinite(cube.values)]
    # Reference: numpy.percentile of all finite cells for the shared limits.
    vmin, vmax = np.percentile(finite, [2, 98])
    check_block_colours(figure, tmp_path / "sheet.png", blocks, "viridis", vmin, vmax)
    # The returned figure saved at another resolution shows the same colours.
    figure.savefig(tmp_path / "twice.png", dpi=2 * dpi)
    check_block_colours(plot_overview(cube, dpi=2 * dpi), tmp_path / "twice.png", blocks,
                        "viridis", vmin, vmax)


def test_per_slice_stretch_colours_each_slice_on_its_own_percentiles(tmp_path):
    cube, blocks = block_cube()
    figure = drawn_and_saved(cube, tmp_path / "sheet.png", dpi=80, stretch="per-slice",
                             clip=(10, 90), colormap="cividis")
    # Reference: numpy.nanpercentile of each slice on its own.
    low, high = np.nanpercentile(cube.values, [10, 90], axis=(1, 2))
    check_block_colours(figure, tmp_path / "sheet.png", blocks, "cividis", low, high)
    # The colour bar reads the percentiles, not values of any one slice.
    bar = colorbar(figure)
    assert bar.get_ylim() == (0, 1)
    assert [t.get_text() for t in bar.get_yticklabels()] == ["10 %", "90 %"]


def test_signed_cube_on_a_diverging_map_centred_on_zero(tmp_path):
    cube, blocks = block_cube(name="signed_envelope", signed=True)
    figure = drawn_and_saved(cube, tmp_path / "sheet.png", dpi=80)
    finite = cube.values[np.isfinite(cube.values)]
    low, high = np.percentile(finite, [2, 98])  # reference: numpy.percentile
    limit = max(abs(low), abs(high))
    assert colorbar(figure).get_ylim() == pytest.approx((-limit, limit))
    check_block_colours(figure, tmp_path / "sheet.png", blocks, "PuOr_r", -limit, limit)
    # Zero, the sign change, takes the middle colour of the diverging map.
    zero = colormaps["PuOr_r"](0.5)[:3]
    image = matplotlib.image.imread(tmp_path / "sheet.png")
    np.testing.assert_allclose(pixel(image, panel_boxes(figure)["0.00-0.10 m"], 1.5 / 4,
                                     0.5 / 3), zero, atol=1.5 / 255)


def test_failed_save_keeps_existing_file(tmp_path, monkeypatch):
    path = tmp_path / "overview.png"
    plot_overview(make_cube(n=1), path, dpi=50)
    before = path.read_bytes()

    def broken(self, target, **kwargs):
        with open(target, "wb") as fh:
            fh.write(b"\x89PNG partial")
        raise OSError("disk full")

    monkeypatch.setattr(Figure, "savefig", broken)
    with pytest.raises(OutputError, match="disk full") as info:
        plot_overview(make_cube(n=2), path)
    assert info.value.where == str(path)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["overview.png"]


def test_columns_can_be_limited():
    figure = plot_overview(make_cube(n=5), max_columns=2)
    assert grid_shape(panel_boxes(figure)) == (3, 2)
    with pytest.raises(SettingsError):
        plot_overview(make_cube(n=2), max_columns=0)


def test_time_slices_and_empty_cube():
    cube = make_cube(n=2, axis="twt", velocity=None)
    assert range_labels(cube) == ["0.3-2.8 ns", "2.8-5.3 ns"]
    empty = cube.copy(data=np.full(cube.shape, np.nan, dtype=np.float32))
    figure = plot_overview(empty)
    assert len(panel_boxes(figure)) == 2
    assert "velocity" not in figure.get_suptitle()


def test_labels_keep_fine_windows_apart():
    cube = new_cube(np.zeros((2, 2, 2)), west=0, north=0, cell=1, crs=None,
                    top=[0.0, 0.025], bottom=[0.025, 0.05])
    assert range_labels(cube) == ["0.000-0.025 m", "0.025-0.050 m"]


def test_bad_percentiles_are_refused():
    with pytest.raises(SettingsError, match="percentile") as info:
        plot_overview(make_cube(n=1), percentile=(98, 2))  # the older name of clip
    assert info.value.where == "clip"
    with pytest.raises(SettingsError, match="not both"):
        plot_overview(make_cube(n=1), clip=(1, 99), percentile=(2, 98))


def test_plot_slice_on_new_and_given_axes():
    cube = make_cube(n=3)
    ax = plot_slice(cube, 1)
    assert ax.get_title() == "0.40-0.50 m"
    assert len(ax.get_images()) == 1
    assert len(ax.figure.axes) == 2  # the panel and its colorbar
    host = Figure()
    given_ax = host.add_subplot()
    assert plot_slice(cube, -1, ax=given_ax, colorbar=False, vmin=0, vmax=1) is given_ax
    norm = given_ax.get_images()[0].norm
    assert (norm.vmin, norm.vmax) == (0, 1)
    with pytest.raises(SettingsError, match="index"):
        plot_slice(cube, 3)


def test_no_pyplot_state():
    # A library must not pick a backend or register figures with pyplot.
    code = ("import sys, slicer.outputs.figures; "
            "sys.exit('matplotlib.pyplot' in sys.modules)")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            check=False, cwd=Path(__file__).parents[1])
    assert result.returncode == 0, result.stderr


class LargestResult(Callback):
    """Dask callback: the largest result (bytes) any single task produced."""

    def __init__(self):
        super().__init__()
        self.largest = 0

    def _posttask(self, key, result, dsk, state, worker_id):
        self.largest = max(self.largest, getattr(result, "nbytes", 0))


def lazy_random_cube(shape=(3, 3000, 3000), chunks=(1, 1000, 1000)):
    data = darray.random.default_rng(5).random(shape, chunks=chunks, dtype=np.float32)
    step = 0.1
    tops = 0.3 + step * np.arange(shape[0])
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633", top=tops,
                    bottom=tops + step)


def percentiles_of(sample):
    # Reference: numpy.percentile over the finite values of the subsample.
    return tuple(np.percentile(sample[np.isfinite(sample)].astype(np.float64), [2, 98]))


def test_overview_of_a_dask_cube_never_computes_it_whole(tmp_path):
    # 3 slices of 3000 x 3000 cells, float32: 108 MB, computed lazily in 4 MB chunks.
    cube = lazy_random_cube()
    plot_overview(make_cube(n=1), tmp_path / "warm.png", dpi=40)  # fonts, caches
    watch = LargestResult()
    tracemalloc.start()
    try:
        with watch:
            written = plot_overview(cube, tmp_path / "overview.png", dpi=40)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert watch.largest <= 4 * 1000 * 1000  # never more than one chunk at once
    assert peak < cube.nbytes / 4
    # 3-inch panels at 40 dpi: at most 2 x 120 = 240 cells along a side, so every 13th row
    # and column (ceil(3000 / 240)), 231 x 231 cells drawn; the colour limits come from them.
    assert sample_stride(cube, dpi=40) == 13
    expected = percentiles_of(cube.data[:, ::13, ::13].compute())
    figure = plot_overview(cube, dpi=40)
    assert colorbar(figure).get_ylim() == pytest.approx(expected, rel=1e-6)
    assert written == [tmp_path / "overview.png"]
    assert matplotlib.image.imread(tmp_path / "overview.png").std() > 0.05


def test_shared_limits_of_a_large_cube_use_a_regular_subsample():
    cube = lazy_random_cube()
    # Panels of at most 1000 cells: every 3rd; 3 x 1000 x 1000 drawn cells exceed
    # MAX_SAMPLE_VALUES (1e6), so every 2nd of those: every 6th cell, 750 000 values.
    assert sample_stride(cube) == 6
    watch = LargestResult()
    with watch:
        limits = shared_limits(cube)
    assert limits == percentiles_of(cube.data[:, ::6, ::6].compute())
    assert watch.largest <= 4 * 1000 * 1000


def test_decimated_panels_keep_the_grid_extent():
    # 2100 x 1500 cells: every 3rd cell, 700 x 500 drawn; the last drawn row and column cover
    # cells 2097-2099 and 1497-1499, so the image ends exactly on the grid's edge.
    data = darray.zeros((1, 2100, 1500), chunks=(1, 700, 500), dtype=np.float32)
    cube = new_cube(data, west=0.0, north=210.0, cell=0.1, crs=None, top=[0.0],
                    bottom=[0.1])
    ax = plot_slice(cube, 0)
    image = ax.get_images()[0]
    assert image.get_array().shape == (700, 500)
    assert image.get_extent() == pytest.approx((0, 150, 0, 210))
    assert ax.get_xlim() == pytest.approx((0, 150)) and ax.get_ylim() == pytest.approx((0, 210))


def test_panels_that_do_not_fit_the_cube_are_refused():
    cube = make_cube(n=2)
    with pytest.raises(SettingsError, match="panels"):
        plot_overview(cube, panels=[cube.values[0]])
    with pytest.raises(SettingsError, match="panels"):
        plot_overview(cube, panels=[cube.values[0][:-1], cube.values[1][:-1]])
    figure = plot_overview(cube, panels=list(cube.values))
    assert len(panel_boxes(figure)) == 2
