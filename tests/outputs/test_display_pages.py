"""Tests of the paged overview (slicer.outputs.figures.plot_overview / overview_pages) and its
display settings: pages, their furniture (scale bar, north arrow, page number, colour bar),
colour limits shared over the cube or per slice, and grey pages.

References: numpy.nanpercentile for the colour limits, Pillow (PIL) reading the written PNGs
back, matplotlib's own artists (found by the gid and label the overview sets) for what each
page holds.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from matplotlib.figure import Figure
from matplotlib.patheffects import withStroke
from matplotlib.text import Annotation, Text
from PIL import Image

from slicer.core.errors import OutputError, SettingsError
from slicer.outputs.cube import new_cube
from slicer.outputs.figures import PER_PAGE, overview_pages, page_paths, plot_overview

WEST, NORTH, CELL = 500000.0, 4649776.0, 0.05


def cube_of(n, ny=24, nx=36, *, name="envelope", seed=4):
    """``n`` slices on very different scales (slice i up to i + 1), a corner without data."""
    rng = np.random.default_rng(seed)
    data = rng.gamma(2.0, size=(n, ny, nx)).astype(np.float32) * (1 + np.arange(n))[:, None,
                                                                                    None]
    if name.startswith("signed"):
        data -= np.float32(2.0) * (1 + np.arange(n))[:, None, None]
    data[:, :4, :5] = np.nan
    tops = 0.05 * np.arange(n)
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633", top=tops,
                    bottom=tops + 0.05, name=name, units="V")


def by_gid(figure: Figure, gid: str) -> list:
    return [a for a in figure.findobj() if a.get_gid() == gid]


def panel_boxes(figure: Figure) -> dict:
    renderer = figure.canvas.get_renderer()
    return {a.get_label().removeprefix("panel "): a.get_window_extent(renderer)
            for a in figure.artists if a.get_label().startswith("panel ")}


def centre(artist, figure):
    return artist.get_window_extent(figure.canvas.get_renderer()).get_points().mean(axis=0)


@pytest.fixture(scope="module")
def cube120():
    return cube_of(120)


def test_a_120_slice_cube_gives_numbered_pages_of_a_readable_size(cube120, tmp_path):
    paths = plot_overview(cube120, tmp_path / "overview.png")
    assert len(paths) == math.ceil(120 / PER_PAGE) == 10
    assert [p.name for p in paths] == [f"overview-{i:02d}.png" for i in range(1, 11)]
    assert sorted(p.name for p in tmp_path.iterdir()) == [p.name for p in paths]
    sizes = set()
    for path in paths:
        with Image.open(path) as image:  # reference: Pillow reads the PNG back
            sizes.add(image.size)
            assert np.asarray(image.convert("L")).std() > 10  # something was drawn
    # Every page the same size; "readable" (common practice, not a standard): no side over
    # 4000 px, about what a 4K screen shows at 100 %, and none under 1000 px.
    assert len(sizes) == 1
    width, height = sizes.pop()
    assert 1000 <= min(width, height) and max(width, height) <= 4000
    # Panels of at least 2.5 inches (375 px at 150 dpi) on their long side.
    first = next(overview_pages(cube120))
    assert all(max(b.width, b.height) >= 375 for b in panel_boxes(first).values())


def test_every_page_has_its_scale_bar_north_arrow_number_and_colour_bar(cube120):
    pages = list(overview_pages(cube120))
    assert len(pages) == 10
    for number, page in enumerate(pages, start=1):
        boxes = panel_boxes(page)
        assert len(boxes) == 12
        first = boxes[min(boxes)]  # windows sort in depth order: the page's first panel
        arrows = by_gid(page, "north arrow")
        assert len(arrows) == 1 and isinstance(arrows[0], Annotation)
        arrow = arrows[0]
        assert arrow.get_text() == "N" and arrow.xyann[0] == 0 and arrow.xyann[1] < 0
        assert first.contains(*centre(arrow, page))
        # The halo: a white stroke under the black text and under the arrow.
        for effects in (arrow.get_path_effects(), arrow.arrow_patch.get_path_effects()):
            assert any(isinstance(e, withStroke) for e in effects)
        bars = by_gid(page, "scale bar")
        assert len(bars) == 1 and first.contains(*centre(bars[0], page))
        numbers = by_gid(page, "page number")
        assert [t.get_text() for t in numbers] == [f"page {number} of 10"]
        start = 12 * (number - 1)
        assert f"slices {start + 1}-{start + 12} of 120" in page.get_suptitle()
        colour_bars = [ax for ax in page.axes if ax.get_label() == "<colorbar>"]
        assert len(colour_bars) == 1 and colour_bars[0].get_ylabel() == "envelope (V)"


def test_the_depth_window_of_each_panel_is_written_on_its_page(cube120):
    pages = list(overview_pages(cube120, per_page=16))
    assert len(pages) == 8  # ceil(120 / 16)
    written = [sorted(panel_boxes(page)) for page in pages]
    windows = [f"{t:.2f}-{t + 0.05:.2f} m" for t in 0.05 * np.arange(120)]
    assert [w for page in written for w in page] == windows
    for page, names in zip(pages, written, strict=True):
        texts = {t.get_text() for t in page.findobj(Text)}
        assert set(names) <= texts


def test_tick_labels_only_beside_the_edge_panels():
    # 14 slices, 12 to a page: the second page holds 2 panels in the 4 x 3 grid of the first.
    first, second = overview_pages(cube_of(14))
    for page, n_panels in ((first, 12), (second, 2)):
        boxes = panel_boxes(page).values()
        left = min(b.x0 for b in boxes)
        ticks = by_gid(page, "tick label")
        assert ticks
        for tick in ticks:
            x, y = centre(tick, page)
            # Left of the first column, or below a panel that has no panel under it.
            below = [b for b in boxes if b.x0 <= x <= b.x1 and y < b.y0]
            assert x < left or (below and not any(
                c.y1 < min(b.y0 for b in below) and c.x0 <= x <= c.x1 for c in boxes))
        assert len(boxes) == n_panels
    # Same page size for the short last page.
    assert (first.get_size_inches() == second.get_size_inches()).all()


def test_shared_limits_are_taken_over_the_whole_cube_not_page_by_page():
    cube = cube_of(30)
    values = cube.values
    expected = np.nanpercentile(values, [5, 95])  # reference: numpy over all 30 slices
    pages = list(overview_pages(cube, per_page=12, clip=(5, 95)))
    assert len(pages) == 3
    for page in pages:
        bar = next(ax for ax in page.axes if ax.get_label() == "<colorbar>")
        assert bar.get_ylim() == pytest.approx(tuple(expected), rel=1e-6)


@pytest.mark.parametrize("name", ["envelope", "signed_envelope"])
def test_per_slice_ranges_are_each_slices_nanpercentiles(name):
    cube = cube_of(14, name=name)
    pages = list(overview_pages(cube, stretch="per-slice", clip=(1, 99)))
    ranges = [t.get_text() for page in pages for t in page.findobj(Text)
              if str(t.get_gid()).startswith("range ")]
    assert len(ranges) == 14
    for i, text in enumerate(ranges):
        low, high = np.nanpercentile(cube.values[i], [1, 99])  # reference: numpy
        if name == "signed_envelope":
            assert text == f"\u00b1{max(abs(low), abs(high)):.3g} V"
        else:
            assert text == f"{low:.3g} to {high:.3g} V"
    bar = next(ax for ax in pages[0].axes if ax.get_label() == "<colorbar>")
    ticks = [t.get_text() for t in bar.get_yticklabels()]
    assert ticks == (["-r", "0", "+r"] if name == "signed_envelope" else ["1 %", "99 %"])


@pytest.mark.parametrize("colormap", ["gray", "greyscale"])
def test_a_grey_colour_map_makes_grey_pages(tmp_path, colormap):
    paths = plot_overview(cube_of(14), tmp_path / "overview.png", colormap=colormap,
                          stretch="per-slice", dpi=60)
    assert len(paths) == 2
    for path in paths:
        with Image.open(path) as image:  # reference: Pillow
            rgb = np.asarray(image.convert("RGB")).astype(int)
        assert rgb.std() > 10
        # Every pixel grey: the panels, the no-data corner, the arrow and all the text.
        assert (rgb[..., 0] == rgb[..., 1]).all() and (rgb[..., 1] == rgb[..., 2]).all()


@pytest.mark.parametrize("n_pages, names", [
    (1, ["overview.png"]),
    (2, ["overview-01.png", "overview-02.png"]),
    (100, ["overview-001.png", "overview-002.png", "overview-100.png"]),
])
def test_page_names_sort_in_page_order(tmp_path, n_pages, names):
    paths = page_paths(tmp_path / "overview.png", n_pages)
    assert len(paths) == n_pages and all(p.parent == tmp_path for p in paths)
    assert [p.name for p in paths] == sorted(p.name for p in paths)
    assert {p.name for p in paths} >= set(names)


@pytest.mark.parametrize("per_page", [0, -3, 2.5, True, "12"])
def test_bad_per_page_is_refused(per_page):
    with pytest.raises(SettingsError) as info:
        overview_pages(cube_of(3), per_page=per_page)  # refused before any page is drawn
    assert info.value.where == "per_page"


def test_no_page_replaces_a_file_unless_every_page_is_written(tmp_path, monkeypatch):
    cube = cube_of(30)
    old = plot_overview(cube, tmp_path / "overview.png", per_page=12, dpi=40)
    before = {p.name: p.read_bytes() for p in old}
    calls = []
    original = Figure.savefig

    def third_fails(self, target, **kwargs):
        calls.append(target)
        if len(calls) == 3:
            raise OSError("disk full")
        return original(self, target, **kwargs)

    monkeypatch.setattr(Figure, "savefig", third_fails)
    with pytest.raises(OutputError, match="disk full") as info:
        plot_overview(cube_of(30, seed=9), tmp_path / "overview.png", per_page=12, dpi=40)
    assert info.value.where == str(tmp_path / "overview-03.png")
    # The first two pages were drawn but not renamed into place; no temporary file is left.
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before
