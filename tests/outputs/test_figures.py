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
from matplotlib.colors import to_rgba
from matplotlib.figure import Figure
from matplotlib.text import Annotation
from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

from slicer.core.errors import OutputError, SettingsError
from slicer.outputs.cube import new_cube
from slicer.outputs.figures import (
    NODATA_COLOUR,
    _nice_length,
    plot_overview,
    plot_slice,
    range_labels,
    sample_stride,
    shared_limits,
)

WEST, NORTH, CELL = 500000.0, 4649776.0, 0.05


def make_cube(n=5, ny=30, nx=45, *, axis="depth", crs="EPSG:32633", velocity=0.1):
    rng = np.random.default_rng(3)
    # Slices on very different scales: per-slice limits would differ from shared ones.
    data = rng.random((n, ny, nx)).astype(np.float32) * (1 + np.arange(n))[:, None, None]
    data[:, :5, :6] = np.nan
    step = 0.1 if axis == "depth" else 2.5
    tops = 0.3 + np.arange(n) * step
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs=crs, top=tops,
                    bottom=tops + step, axis=axis, velocity=velocity)


def panels(figure: Figure):
    return [ax for ax in figure.axes if ax.get_label() != "<colorbar>"]


def test_sheet_layout_labels_and_shared_scale():
    cube = make_cube()
    figure = plot_overview(cube)
    axes = panels(figure)
    assert len(axes) == 5
    colorbars = [ax for ax in figure.axes if ax.get_label() == "<colorbar>"]
    assert len(colorbars) == 1
    assert "envelope" in colorbars[0].get_ylabel()
    assert [ax.get_title() for ax in axes] == [
        "0.30-0.40 m", "0.40-0.50 m", "0.50-0.60 m", "0.60-0.70 m", "0.70-0.80 m"]
    assert axes[0].get_subplotspec().get_geometry()[:2] == (2, 3)  # ceil(sqrt(5)) columns
    images = [im for ax in axes for im in ax.get_images()]
    assert len(images) == 5
    limits = {(im.norm.vmin, im.norm.vmax) for im in images}
    assert len(limits) == 1
    values = cube.values[np.isfinite(cube.values)]
    # Reference: numpy.percentile over all finite values of all slices.
    assert limits.pop() == pytest.approx(tuple(np.percentile(values, [2, 98])))
    for ax in axes:
        assert ax.get_aspect() == 1.0
    title = figure.get_suptitle()
    assert "EPSG:32633" in title and "0.1 m/ns" in title


def test_compact_ticks_relative_to_the_corner():
    figure = plot_overview(make_cube())
    first, last = panels(figure)[0], panels(figure)[-1]
    assert first.get_xlim() == pytest.approx((0, 45 * CELL))
    assert first.get_ylim() == pytest.approx((0, 30 * CELL))
    assert last.get_xlabel() == "easting - 500000 (m)"
    assert first.get_ylabel() == f"northing - {NORTH - 30 * CELL:.10g} (m)"
    small = plot_overview(make_cube(crs=None).assign_attrs(west=0.0, north=1.5))
    assert panels(small)[-1].get_xlabel() == "easting (m)"
    assert panels(small)[0].get_ylim() == pytest.approx((0, 1.5))
    assert "local grid" in small.get_suptitle()


def test_nodata_is_grey_and_distinct_from_the_colormap():
    figure = plot_overview(make_cube(), cmap="viridis")
    image = panels(figure)[0].get_images()[0]
    grey = np.array(to_rgba(NODATA_COLOUR))
    np.testing.assert_allclose(image.cmap.get_bad(), grey)
    np.testing.assert_allclose(image.to_rgba(np.ma.masked_invalid([[np.nan]]))[0, 0],
                               grey, atol=1e-6)
    samples = image.cmap(np.linspace(0, 1, 256))
    assert np.min(np.linalg.norm(samples[:, :3] - grey[:3], axis=1)) > 0.1


def test_scale_bar_and_north_arrow_on_first_panel():
    figure = plot_overview(make_cube())
    first = panels(figure)[0]
    bars = [a for a in first.artists if isinstance(a, AnchoredSizeBar)]
    assert len(bars) == 1
    # 45 cells of 0.05 m = 2.25 m wide: a fifth is 0.45 m, the nice round length 50 cm.
    assert bars[0].txt_label.get_text() == "50 cm"
    arrows = [t for t in first.texts if isinstance(t, Annotation) and t.get_text() == "N"]
    assert len(arrows) == 1
    # The text sits straight below the arrow head: the arrow points to +y (grid north).
    dx, dy = arrows[0].xyann
    assert dx == 0 and dy < 0


@settings(max_examples=50, deadline=None)
@given(width=st.floats(0.05, 5000))
def test_scale_bar_length_is_round_and_about_a_fifth(width):
    length = _nice_length(width)
    mantissa = length / 10 ** np.floor(np.log10(length) + 1e-9)
    assert min(abs(mantissa - m) for m in (1, 2, 5)) < 1e-9
    assert width / 10 <= length <= width / 4


def test_saved_png_has_the_figure_size(tmp_path):
    path = tmp_path / "overview.png"
    figure = plot_overview(make_cube(n=2), path, dpi=100)
    image = matplotlib.image.imread(path)
    w, h = figure.get_size_inches() * 100
    assert image.shape[:2] == (round(h), round(w))
    assert image.std() > 0.05  # something was drawn
    assert [p.name for p in tmp_path.iterdir()] == ["overview.png"]


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
    assert panels(figure)[0].get_subplotspec().get_geometry()[:2] == (3, 2)
    with pytest.raises(SettingsError):
        plot_overview(make_cube(n=2), max_columns=0)


def test_time_slices_and_empty_cube():
    cube = make_cube(n=2, axis="twt", velocity=None)
    assert range_labels(cube) == ["0.3-2.8 ns", "2.8-5.3 ns"]
    empty = cube.copy(data=np.full(cube.shape, np.nan, dtype=np.float32))
    figure = plot_overview(empty)
    assert len(panels(figure)) == 2
    assert "velocity" not in figure.get_suptitle()


def test_labels_keep_fine_windows_apart():
    cube = new_cube(np.zeros((2, 2, 2)), west=0, north=0, cell=1, crs=None,
                    top=[0.0, 0.025], bottom=[0.025, 0.05])
    assert range_labels(cube) == ["0.000-0.025 m", "0.025-0.050 m"]


def test_bad_percentiles_are_refused():
    with pytest.raises(SettingsError, match="percentile"):
        plot_overview(make_cube(n=1), percentile=(98, 2))


def test_plot_slice_on_new_and_given_axes():
    cube = make_cube(n=3)
    ax = plot_slice(cube, 1)
    assert ax.get_title() == "0.40-0.50 m"
    assert len(ax.get_images()) == 1
    assert len(ax.figure.axes) == 2  # the panel and its colorbar
    host = Figure()
    given_ax = host.add_subplot()
    assert plot_slice(cube, -1, given_ax, colorbar=False, vmin=0, vmax=1) is given_ax
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
            figure = plot_overview(cube, tmp_path / "overview.png", dpi=40)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert watch.largest <= 4 * 1000 * 1000  # never more than one chunk at once
    assert peak < cube.nbytes / 4
    images = [im for ax in panels(figure) for im in ax.get_images()]
    # 3-inch panels at 40 dpi: at most 2 x 120 = 240 cells along a side, so every 13th row
    # and column (ceil(3000 / 240)), 231 x 231 cells drawn.
    assert [im.get_array().shape for im in images] == [(231, 231)] * 3
    assert sample_stride(cube, dpi=40) == 13
    expected = percentiles_of(cube.data[:, ::13, ::13].compute())
    assert {(im.norm.vmin, im.norm.vmax) for im in images} == {expected}
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
    assert len(panels(figure)) == 2
