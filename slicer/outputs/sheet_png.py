"""An overview page drawn with NumPy and Pillow and written as a palette PNG: a build's pages.

The page is the one :func:`slicer.outputs.sheet.draw_sheet` draws with matplotlib -- the same
:class:`~slicer.outputs.sheet_layout.Layout` in whole pixels, the same texts in matplotlib's
DejaVu fonts at the same sizes, the same tick positions -- but built as an array of palette
indices: the frame's greys (:mod:`slicer.outputs.radargram_frame`), then the colour map sampled
at :data:`PANEL_COLOURS` evenly spaced points, then the colour of cells without data. Each text
is rendered once per process and stamped where it goes. A sheet of 24 slices drawn by matplotlib
and saved as RGBA took 0.47-0.76 s, and importing the figure machinery 0.30-0.35 s more; drawn
here, 0.08-0.13 s and 0.01 s (benchmarks/overview.py). The end of a 65 k-trace build, where the
overview is drawn, went from 1.10 s to 0.43-0.47 s.

Differences from the matplotlib page, by choice: the scale bar's box is opaque white (a
translucent one needs colours the palette has no room for), and the panel colours are the
nearest of the sampled colour map's entries (at most half a step of 1/190 of the map away).
"""

from __future__ import annotations

import math

import numpy as np

from slicer.outputs import sheet_layout as sl
from slicer.outputs.display import NODATA_COLOUR
from slicer.outputs.radargram_frame import (
    FRAME_COLOURS,
    LABEL_PAD_PT,
    LABEL_PT,
    FrameDrawer,
    _box,
    grey_index,
    grey_palette,
    png_bytes,
    stamp,
    tick_labels,
    tick_values,
)
from slicer.outputs.sheet_layout import Layout, Scale, panel_pixels, sheet_layout

#: Palette entries of the colour map; the last entry of the 256 is the no-data colour.
PANEL_COLOURS = 256 - FRAME_COLOURS - 1
NODATA_INDEX = 255
WHITE, BLACK = FRAME_COLOURS - 1, 0

_drawers: dict[float, FrameDrawer] = {}  # per dpi, so each text is rendered once a process


def _drawer(dpi: float) -> FrameDrawer:
    if dpi not in _drawers:
        _drawers[dpi] = FrameDrawer(dpi=dpi)
    return _drawers[dpi]


def _put(canvas: np.ndarray, ink: np.ndarray, x: float, y: float, ha: str, va: str, *,
         white: int = 255, strength: float = 1.0) -> None:
    """Stamp ``ink`` aligned to (x, y) as matplotlib aligns text: ``ha`` left, center or
    right; ``va`` top, center or bottom. ``strength`` < 1 writes grey instead of black."""
    h, w = ink.shape
    c = {"left": x, "center": x - w / 2, "right": x - w}[ha]
    r = {"top": y, "center": y - h / 2, "bottom": y - h}[va]
    if strength != 1.0:
        ink = (ink * strength).astype(np.uint8)
    stamp(canvas, ink, round(r), round(c), white=white)


def _lines(drawer: FrameDrawer, text: str, points: float, *, bold: bool = False) -> np.ndarray:
    """The ink of a text of one or more lines, each centred on the widest."""
    inks = [drawer.text(line, points, bold=bold) for line in text.split("\n")]
    width = max(i.shape[1] for i in inks)
    out = np.zeros((sum(i.shape[0] for i in inks), width), dtype=np.uint8)
    r = 0
    for ink in inks:
        c = (width - ink.shape[1]) // 2
        out[r:r + ink.shape[0], c:c + ink.shape[1]] = ink
        r += ink.shape[0]
    return out


def panel_indices(panel: np.ndarray, vmin: float, vmax: float) -> np.ndarray:
    """Palette indices of ``panel`` values: the nearest of the :data:`PANEL_COLOURS` samples of
    the colour map over ``vmin``-``vmax`` (below and above: its ends), NaN :data:`NODATA_INDEX`."""
    level = (np.asarray(panel, dtype=np.float32) - np.float32(vmin)) * np.float32(
        (PANEL_COLOURS - 1) / ((vmax - vmin) or 1.0))
    nan = np.isnan(level)
    np.clip(level, 0, PANEL_COLOURS - 1, out=level)
    out = (np.rint(np.nan_to_num(level)) + FRAME_COLOURS).astype(np.uint8)
    out[nan] = NODATA_INDEX
    return out


def _palette(scale: Scale) -> np.ndarray:
    from matplotlib.colors import to_rgb
    lut = scale.colours(np.linspace(0.0, 1.0, PANEL_COLOURS), bytes=True)[:, :3]
    nodata = np.rint(np.array(to_rgb(NODATA_COLOUR)) * 255).astype(np.uint8)
    return np.vstack([grey_palette(), lut, nodata[None, :]])


def page_png(drawn: list[np.ndarray], *, stride: int, frame, labels: list[str], ncols: int,
             scale: Scale, dpi: float, title: str, quantity: str, nrows: int | None = None,
             page: str | None = None) -> bytes:
    """The PNG of the overview page :func:`slicer.outputs.sheet.draw_sheet` draws from the same
    arguments (see :meth:`slicer.outputs.overview_plan.OverviewPlan.page`)."""
    n = len(drawn)
    nrows = math.ceil(n / ncols) if nrows is None else nrows
    per_slice = scale.ranges is not None
    lay = sheet_layout(nrows, ncols, frame, dpi, per_slice=per_slice)
    draw = _drawer(lay.dpi)
    canvas = np.full((lay.height, lay.width), 255, dtype=np.uint8)
    west, east, south, north = frame.extent
    xt, xlabels = sl.axis_ticks(west, east)
    yt, ylabels = sl.axis_ticks(south, north)
    tick, pad = lay.px(sl.TICK_POINTS / 72), lay.px(2 / 72)
    line = max(1, round(lay.dpi * 0.8 / 72))
    for i, label in enumerate(labels):
        c, r = lay.box(i)
        row, col = divmod(i, ncols)
        _box(canvas, r, r + lay.ph, c, c + lay.pw, line)
        above = r - pad * 2
        if per_slice:
            _put(canvas, draw.text(scale.ranges[i], sl.TICK_FONT), c + lay.pw / 2, above,
                 "center", "bottom", strength=0.7)
            above -= lay.px(sl.RANGE_ROOM)
        _put(canvas, draw.text(label, sl.TITLE_FONT), c + lay.pw / 2, above, "center", "bottom")
        xs = c + (xt - west) / (east - west) * lay.pw
        ys = r + lay.ph - (yt - south) / (north - south) * lay.ph
        bottom = r + lay.ph
        for x in xs:
            canvas[bottom:bottom + tick, _across(x, line)] = 0
        for y in ys:
            canvas[_across(y, line), max(0, c - tick):c] = 0
        if row == nrows - 1 or i + ncols >= n:  # nothing below: label the easting
            for x, text in zip(xs, xlabels, strict=True):
                _put(canvas, draw.text(text, sl.TICK_FONT), x, bottom + tick + pad, "center",
                     "top")
            _put(canvas, draw.text(frame.xlabel(), sl.LABEL_FONT), c + lay.pw / 2,
                 r + lay.ph + lay.px(sl.BELOW) - pad, "center", "bottom")
        if col == 0:
            for y, text in zip(ys, ylabels, strict=True):
                _put(canvas, draw.text(text, sl.TICK_FONT), c - tick - pad, y, "right", "center")
            _put(canvas, draw.text(frame.ylabel(), sl.LABEL_FONT, rotated=True), pad,
                 r + lay.ph / 2, "left", "center")
    _put(canvas, _lines(draw, title, 11), lay.width / 2, lay.px(0.1), "center", "top")
    if page is not None:
        _put(canvas, draw.text(page, 10, bold=True), lay.width - lay.px(0.15), lay.px(0.1),
             "right", "top")
    bar = _colour_bar(canvas, lay, scale, quantity, draw, tick, line)
    indices = grey_index(canvas)
    _paste_panels(indices, drawn, stride, (frame.ny, frame.nx), lay, scale)
    b0, b1, r0, r1 = bar
    fraction = (r1 - 0.5 - np.arange(r0, r1)) / (r1 - r0)  # 0 at the bottom row
    indices[r0:r1, b0:b1] = (FRAME_COLOURS + np.rint(fraction * (PANEL_COLOURS - 1))).astype(
        np.uint8)[:, None]
    _extensions(indices, b0, b1, r0, r1, line)
    _scale_bar(indices, lay, frame, draw)
    _north_arrow(indices, lay, draw)
    return png_bytes(indices, _palette(scale), dpi=lay.dpi)


def _across(centre: float, width: int) -> slice:
    start = round(centre - width / 2)
    return slice(max(0, start), start + width)


def _paste_panels(indices: np.ndarray, drawn: list[np.ndarray], stride: int,
                  cells: tuple[int, int], lay: Layout, scale: Scale) -> None:
    if not drawn:
        return
    rows, cols = panel_pixels(lay, cells, stride, drawn[0].shape)
    for i, (panel, norm) in enumerate(zip(drawn, scale.norms, strict=True)):
        c, r = lay.box(i)
        indices[r:r + lay.ph, c:c + lay.pw] = panel_indices(
            panel, float(norm.vmin), float(norm.vmax))[np.ix_(rows, cols)]


def _colour_bar(canvas: np.ndarray, lay: Layout, scale: Scale, quantity: str,
                draw: FrameDrawer, tick: int, line: int) -> tuple[int, int, int, int]:
    """The colour bar's frame, ticks and labels beside the grid, 0.8 of its height, with the
    triangles of the colours below and above the range; returns its columns and rows."""
    b0 = lay.left + lay.grid_w + lay.px(sl.GAP_X + 0.3)
    b1 = b0 + lay.px(0.18)
    r0, r1 = lay.top + round(0.1 * lay.grid_h), lay.top + round(0.9 * lay.grid_h)
    _box(canvas, r0, r1, b0, b1, line)
    pad = round(draw.px(3.5))
    if scale.ranges is None:
        low, high = float(scale.norms[0].vmin), float(scale.norms[0].vmax)
        values = tick_values(low, high, (r1 - r0) * 72 / lay.dpi, 2 * LABEL_PT)
        texts = tick_labels(values)
        label = quantity
    else:
        low, high = 0.0, 1.0
        values, texts = np.asarray(scale.ticks, dtype=float), list(scale.tick_labels)
        label = f"{quantity}\n{scale.caption} (range above each panel)"
    wide = 0
    for v, text in zip(values, texts, strict=True):
        y = r1 - (v - low) / ((high - low) or 1.0) * (r1 - r0)
        canvas[_across(y, line), b1 + line:b1 + line + tick] = 0
        ink = draw.text(text)
        wide = max(wide, ink.shape[1])
        _put(canvas, ink, b1 + line + tick + pad, y, "left", "center")
    label_ink = np.rot90(_lines(draw, label, LABEL_PT))
    # matplotlib's label pad from the tick labels, kept inside the page: a two-line label of
    # a per-slice stretch reached past its right edge
    x = min(b1 + line + tick + pad + wide + round(draw.px(LABEL_PAD_PT)),
            canvas.shape[1] - label_ink.shape[1] - round(draw.px(2)))
    _put(canvas, label_ink, x, (r0 + r1) / 2, "left", "center")
    return b0, b1, r0, r1


def _extensions(indices: np.ndarray, b0: int, b1: int, r0: int, r1: int, line: int) -> None:
    """The colour bar's triangles: the colour of values above the range over its top, below
    the range under its bottom (the map's ends), 5 % of its length each, outlined."""
    size = max(2, round(0.05 * (r1 - r0)))
    mid, half = (b0 + b1) / 2, (b1 - b0) / 2
    for d in range(1, size + 1):
        reach = half * (1 - d / size)
        a, b = round(mid - reach), round(mid + reach)
        for row, colour in ((r0 - line - d, FRAME_COLOURS + PANEL_COLOURS - 1),
                            (r1 + line + d - 1, FRAME_COLOURS)):
            if 0 <= row < indices.shape[0]:
                indices[row, max(0, a - line):b + line] = BLACK
                if b > a:
                    indices[row, a:b] = colour


def _scale_bar(indices: np.ndarray, lay: Layout, frame, draw: FrameDrawer) -> None:
    """A round length on the first panel's lower-left corner, labelled below, on a white
    box (the matplotlib page's box is translucent)."""
    length = sl.nice_length(frame.width)
    c, r = lay.box(0)
    bar_w = round(length / frame.width * lay.pw)
    bar_h = max(2, lay.ph // 80)
    pad, sep, text_h = lay.px(4 / 72), lay.px(3 / 72), lay.px(sl.TICK_FONT / 72)
    box_w = max(bar_w, lay.px(0.4)) + 2 * pad
    box_h = bar_h + sep + text_h + 2 * pad
    x0, y1 = c + pad, r + lay.ph - pad  # the box's left and bottom pixel
    indices[max(r, y1 - box_h):y1, x0:min(c + lay.pw, x0 + box_w)] = WHITE
    top = y1 - pad - text_h - sep - bar_h
    indices[top:top + bar_h, x0 + pad:x0 + pad + bar_w] = BLACK
    _put(indices, draw.text(sl.length_label(length), sl.TICK_FONT), x0 + pad + bar_w / 2,
         y1 - pad, "center", "bottom", white=WHITE)


def _north_arrow(indices: np.ndarray, lay: Layout, draw: FrameDrawer) -> None:
    """An arrow towards +y (grid north) with an N below it, black on a white halo, near the
    first panel's top-right corner, as the matplotlib page draws it."""
    from PIL import Image, ImageDraw, ImageFilter
    c, r = lay.box(0)
    tip_x, tip_y = c + 0.92 * lay.pw, r + 0.05 * lay.ph
    letter = draw.text("N", 9, bold=True)
    centre_y = tip_y + draw.px(26)
    shrink, head_l, head_w = draw.px(2), draw.px(0.4 * 9), draw.px(0.2 * 9)
    width = max(1, round(draw.px(1.4)))
    halo = max(1, round((draw.px(3.5) - draw.px(1.4)) / 2))
    # an ink picture around the arrow and its letter, then the halo by dilation
    margin = halo + 2
    x0 = round(tip_x - max(head_w, letter.shape[1] / 2)) - margin
    y0 = round(tip_y) - margin
    w = round(2 * max(head_w, letter.shape[1] / 2)) + 2 * margin + 1
    h = round(centre_y + letter.shape[0] / 2 - tip_y) + 2 * margin + 1
    picture = Image.new("L", (w, h), 0)
    pen = ImageDraw.Draw(picture)
    x, top = tip_x - x0, tip_y - y0 + shrink
    base = centre_y - y0 - letter.shape[0] / 2 - shrink
    pen.line([(x, base), (x, top + head_l)], fill=255, width=width)
    pen.polygon([(x, top), (x - head_w, top + head_l), (x + head_w, top + head_l)], fill=255)
    ink = np.asarray(picture).copy()
    lr, lc = round(centre_y - y0 - letter.shape[0] / 2), round(x - letter.shape[1] / 2)
    part = ink[lr:lr + letter.shape[0], lc:lc + letter.shape[1]]
    np.maximum(part, letter[:part.shape[0], :part.shape[1]], out=part)
    around = np.asarray(Image.fromarray(ink).filter(ImageFilter.MaxFilter(2 * halo + 1)))
    H, W = indices.shape
    ra, rb, ca, cb = max(0, y0), min(H, y0 + h), max(0, x0), min(W, x0 + w)
    if ra >= rb or ca >= cb:
        return
    region = indices[ra:rb, ca:cb]
    region[around[ra - y0:rb - y0, ca - x0:cb - x0] > 127] = WHITE
    # only where there is ink: stamp() would turn the colours around it to the frame's white
    ink = ink[ra - y0:rb - y0, ca - x0:cb - x0].astype(np.uint16)
    inked = ink > 0
    shade = (WHITE - (ink * WHITE + 127) // 255).astype(np.uint8)
    region[inked] = np.minimum(region[inked], shade[inked])


__all__ = ["NODATA_INDEX", "PANEL_COLOURS", "page_png", "panel_indices"]
