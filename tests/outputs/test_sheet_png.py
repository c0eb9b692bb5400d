"""Tests of slicer.outputs.sheet_png: a build's overview pages drawn with NumPy and Pillow.

References: matplotlib (its colour maps and Normalize for the panel colours, its own drawing of
the same sheet for the layout), Pillow's PNG reader for the file.
"""

from __future__ import annotations

import io

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from matplotlib import colormaps
from matplotlib.colors import to_rgb
from PIL import Image

from slicer.outputs.cube import new_cube
from slicer.outputs.display import NODATA_COLOUR, Display
from slicer.outputs.overview_plan import OverviewPlan
from slicer.outputs.sheet import draw_sheet
from slicer.outputs.sheet_layout import sheet_layout
from slicer.outputs.sheet_png import NODATA_INDEX, PANEL_COLOURS, page_png, panel_indices

WEST, NORTH, CELL = 500000.0, 4649776.0, 0.05


def block_cube(n=4, *, name="envelope"):
    """Slices of 3 x 4 blocks of 20 x 20 equal cells (one block without data), so the colour
    at each block's centre does not depend on how cells are resampled to pixels."""
    rng = np.random.default_rng(8)
    blocks = rng.random((n, 3, 4)) * (1 + np.arange(n))[:, None, None]
    blocks[:, 2, 3] = np.nan
    data = np.kron(blocks, np.ones((20, 20))).astype(np.float32)
    tops = 0.1 * np.arange(n)
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633", top=tops,
                    bottom=tops + 0.1, name=name, velocity=0.1), blocks


def pages_of(cube, *, dpi=100, per_page=99, display=None):
    plan = OverviewPlan(cube, display or Display(), title=None, dpi=dpi, panels=None)
    ncols, nrows, pages = plan.pages(per_page)
    out = []
    for start, stop, page in pages:
        kwargs = plan.page(start, stop, page=page)
        out.append((plan, kwargs, ncols, nrows, start, stop,
                    page_png(plan.drawn[start:stop], **kwargs, ncols=ncols, nrows=nrows)))
    return out


def rgb(png: bytes) -> np.ndarray:
    return np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int)


def test_a_page_is_a_palette_png_of_the_matplotlib_sheets_size_and_resolution():
    cube, _ = block_cube()
    [(plan, kwargs, ncols, nrows, start, stop, png)] = pages_of(cube, dpi=100)
    image = Image.open(io.BytesIO(png))
    assert image.mode == "P"  # 8-bit palette: a quarter of RGBA's bytes to compress
    assert image.info["dpi"] == pytest.approx((100, 100), abs=0.01)
    # Reference: matplotlib's figure of the same sheet, its size in pixels at its dpi.
    figure = draw_sheet(plan.drawn, **kwargs, ncols=ncols, nrows=nrows)
    w, h = figure.get_size_inches() * figure.dpi
    assert image.size == (round(w), round(h))


def test_panel_pixels_are_the_colour_mapped_slices():
    cube, blocks = block_cube()
    [(plan, kwargs, ncols, nrows, *_, png)] = pages_of(cube, dpi=100)
    image = rgb(png)
    norm = plan.scale.norms[0]
    # Reference: matplotlib's viridis (the default map) and Normalize on the input values,
    # at the nearest of the page's PANEL_COLOURS samples of the map.
    x = np.clip(norm(blocks).filled(np.nan), 0, 1)
    expected = colormaps["viridis"](np.rint(x * (PANEL_COLOURS - 1)) / (PANEL_COLOURS - 1))
    expected = expected[..., :3]
    expected[np.isnan(blocks)] = to_rgb(NODATA_COLOUR)
    lay = sheet_layout(nrows, ncols, plan.frame, plan.dpi, per_slice=False)
    for i in range(len(blocks)):
        c0, r0 = lay.box(i)
        for r in range(3):
            for c in range(4):
                got = image[r0 + int((r + 0.5) / 3 * lay.ph), c0 + int((c + 0.5) / 4 * lay.pw)]
                np.testing.assert_allclose(got / 255, expected[i, r, c], atol=1 / 255,
                                           err_msg=f"panel {i}, block {r}, {c}")


def test_the_page_agrees_with_matplotlibs_drawing_of_the_same_sheet():
    # Reference: matplotlib's Agg drawing of the same sheet (titles, ticks, labels, colour
    # bar, scale bar, north arrow). Texts are rasterised by two renderers and the scale bar's
    # box is opaque here, so pixels near them differ; the panels and the layout agree.
    rng = np.random.default_rng(4)
    data = rng.gamma(2.0, 1.0, (6, 120, 90)).astype(np.float32)
    data[:, 40:60, 30:50] *= 4  # an anomaly
    cube = new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633",
                    top=0.1 * np.arange(6), bottom=0.1 * np.arange(1, 7), velocity=0.1)
    [(plan, kwargs, ncols, nrows, *_, png)] = pages_of(cube, dpi=120)
    figure = draw_sheet(plan.drawn, **kwargs, ncols=ncols, nrows=nrows)
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=plan.dpi)
    ours, theirs = rgb(png), rgb(buffer.getvalue())
    assert ours.shape == theirs.shape
    close = np.abs(ours - theirs).max(axis=-1) <= 40
    assert close.mean() > 0.95
    lay = sheet_layout(nrows, ncols, plan.frame, plan.dpi, per_slice=False)
    c0, r0 = lay.box(ncols - 1)  # a panel without scale bar or arrow: inside, all agree
    inside = close[r0 + 2:r0 + lay.ph - 2, c0 + 2:c0 + lay.pw - 2]
    assert inside.mean() > 0.999


def test_only_paged_sheets_carry_a_page_number_top_right():
    cube, _ = block_cube(n=6)
    first, second = pages_of(cube, dpi=80, per_page=3)
    alone = pages_of(cube, dpi=80, per_page=3)[0]
    plan, kwargs, ncols, nrows, start, stop, _ = alone
    unpaged = page_png(plan.drawn[start:stop], **{**kwargs, "page": None}, ncols=ncols,
                       nrows=nrows)
    a, b = rgb(first[-1]), rgb(unpaged)
    differ = np.nonzero(np.abs(a - b).max(axis=-1) > 0)
    # the page number is the only difference, and it lies in the top right corner
    assert differ[0].size > 0
    assert differ[0].max() < a.shape[0] * 0.1 and differ[1].min() > a.shape[1] * 0.7
    assert rgb(second[-1]).shape == a.shape  # every page the same size


def test_per_slice_ranges_need_room_above_each_panel():
    cube, _ = block_cube()
    [(plan, kwargs, ncols, nrows, *_, png)] = pages_of(cube, dpi=80,
                                                       display=Display(stretch="per-slice"))
    figure = draw_sheet(plan.drawn, **kwargs, ncols=ncols, nrows=nrows)
    w, h = figure.get_size_inches() * figure.dpi
    assert Image.open(io.BytesIO(png)).size == (round(w), round(h))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.one_of(st.floats(-1e6, 1e6, width=32), st.just(float("nan"))),
                min_size=1, max_size=40),
       st.floats(-100, 100), st.floats(0.001, 100))
def test_panel_indices_are_the_nearest_colour_sample_and_nodata_for_nan(values, vmin, span):
    values = np.asarray(values, dtype=np.float32)
    got = panel_indices(values, vmin, vmin + span)
    nan = np.isnan(values)
    assert np.all(got[nan] == NODATA_INDEX)
    # Reference: the position on the map as matplotlib's Normalize gives it, clipped to the
    # ends, in steps of the sampled map
    x = np.clip((values[~nan].astype(np.float64) - vmin) / span, 0, 1) * (PANEL_COLOURS - 1)
    level = got[~nan].astype(int) - (256 - PANEL_COLOURS - 1)
    assert np.all((level >= 0) & (level <= PANEL_COLOURS - 1))
    assert np.all(np.abs(level - x) <= 0.5 + 1e-3 * (PANEL_COLOURS - 1))


def hostile_cube(kind: str):
    rng = np.random.default_rng(11)
    n, ny, nx = {"thin": (3, 1, 200), "tall": (2, 300, 1), "one cell": (1, 1, 1),
                 "all nan": (4, 30, 40), "many": (30, 12, 16), "signed": (3, 40, 30),
                 "constant": (2, 20, 20), "huge values": (2, 25, 25)}[kind]
    data = rng.normal(size=(n, ny, nx)).astype(np.float32)
    name = "envelope"
    if kind == "all nan":
        data[:] = np.nan
    elif kind == "constant":
        data[:] = 3.0
    elif kind == "huge values":
        data *= np.float32(1e30)
    elif kind == "signed":
        name = "signed_envelope"
    else:
        data = np.abs(data)
    tops = 0.1 * np.arange(n)
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633", top=tops,
                    bottom=tops + 0.1, name=name, velocity=0.1)


@pytest.mark.parametrize("kind", ["thin", "tall", "one cell", "all nan", "many", "signed",
                                  "constant", "huge values"])
def test_hostile_cubes_give_pages_of_the_matplotlib_sheets_size(kind):
    # Reference: matplotlib's figure of the same page, its size in pixels
    cube = hostile_cube(kind)
    for plan, kwargs, ncols, nrows, start, stop, png in pages_of(cube, dpi=60, per_page=12):
        image = Image.open(io.BytesIO(png))
        image.load()  # a whole, readable PNG
        figure = draw_sheet(plan.drawn[start:stop], **kwargs, ncols=ncols, nrows=nrows)
        w, h = figure.get_size_inches() * figure.dpi
        assert image.size == (round(w), round(h))
        if kind == "all nan":  # every panel shows the no-data colour only
            lay = sheet_layout(nrows, ncols, plan.frame, plan.dpi, per_slice=False)
            c0, r0 = lay.box(0)
            inside = rgb(png)[r0 + 3:r0 + lay.ph - 3, c0 + lay.pw // 2]
            grey = np.rint(np.array(to_rgb(NODATA_COLOUR)) * 255)
            assert np.all(inside == grey)


@pytest.mark.parametrize("stretch", ["shared", "per-slice"])
@pytest.mark.parametrize("dpi", [60, 80, 150])
def test_no_text_runs_off_the_page(stretch, dpi):
    # a label cut by the page's edge leaves ink in its outermost pixels; the two-line label of
    # a per-slice colour bar reached past the right edge (common practice: nothing clipped)
    cube, _ = block_cube()
    for *_, png in pages_of(cube, dpi=dpi, display=Display(stretch=stretch)):
        page = rgb(png)
        for edge in (page[:, -1], page[:, 0], page[0], page[-1]):
            assert (edge == 255).all()
