"""Drawing of the overview sheet as one picture: the panels colour-mapped into one RGBA mosaic.

A sheet of two dozen slices used to be two dozen Axes, each resampling its own image and laying
out its own ticks; drawing them took seconds. Here the panels are resampled to their size on
the page and colour-mapped with numpy, placed into one mosaic drawn as a single image, and the
titles, ticks, colour bar, scale bar and north arrow are added once over it. Everything is laid
out in whole pixels of the sheet, so each mosaic pixel lands on one pixel of the saved image.
"""

from __future__ import annotations

import math

import numpy as np
from matplotlib import patheffects
from matplotlib.artist import Artist
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.collections import LineCollection
from matplotlib.colors import Colormap, Normalize
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle
from matplotlib.text import Annotation

from slicer.outputs import sheet_layout as sl
from slicer.outputs.sheet_layout import Layout, Scale, panel_pixels, sheet_layout


def _mosaic(drawn: list[np.ndarray], stride: int, cells: tuple[int, int], layout: Layout,
            colours: Colormap, norms: list[Normalize]) -> np.ndarray:
    """The panels resampled to their pixels (nearest cell) and colour-mapped, on a clear
    background: an RGBA ``uint8`` array of the grid's pixels."""
    rows, cols = panel_pixels(layout, cells, stride, drawn[0].shape)
    mosaic = np.zeros((layout.grid_h, layout.grid_w, 4), dtype=np.uint8)
    for i, (panel, norm) in enumerate(zip(drawn, norms, strict=True)):
        c, r = layout.box(i)
        r, c = r - layout.top, c - layout.left
        mosaic[r:r + layout.ph, c:c + layout.pw] = colours(norm(panel[np.ix_(rows, cols)]),
                                                             bytes=True)
    return mosaic


class _Picture(Artist):
    """An RGBA ``uint8`` picture filling a box of the figure (fractions ``x0, y0, x1, y1``).

    Drawn as it is when its pixels match the output's (the sheet saved at its own dpi), else
    resampled to the nearest pixel; unlike an Axes image it is neither normalised nor masked
    again, which took most of the drawing time of a large sheet.
    """

    def __init__(self, rgba: np.ndarray, box: tuple[float, float, float, float]):
        super().__init__()
        self.rgba, self.box = rgba, box
        self.set_label("<panels>")

    def draw(self, renderer) -> None:
        if not self.get_visible():
            return
        (x0, y0), (x1, y1) = self.get_figure(root=True).transFigure.transform(
            np.reshape(self.box, (2, 2)))
        magnification = renderer.get_image_magnification()
        h, w = round((y1 - y0) * magnification), round((x1 - x0) * magnification)
        picture = self.rgba
        if picture.shape[:2] != (h, w) and h > 0 and w > 0:
            rows = ((np.arange(h) + 0.5) * picture.shape[0] / h).astype(np.intp)
            cols = ((np.arange(w) + 0.5) * picture.shape[1] / w).astype(np.intp)
            picture = picture[np.ix_(rows, cols)]
        gc = renderer.new_gc()
        gc.set_gid(self.get_gid())
        renderer.draw_image(gc, round(x0), round(y0), picture[::-1])  # rows from the bottom
        gc.restore()


def draw_sheet(drawn: list[np.ndarray], *, stride: int, frame, labels: list[str],
               ncols: int, scale: Scale, dpi: float, title: str, quantity: str,
               nrows: int | None = None, page: str | None = None) -> Figure:
    """Draw the overview sheet of the decimated panels ``drawn`` (see
    :func:`slicer.outputs.figures.plot_overview`, which checks the arguments).

    ``frame`` is the cube's plot extent (:class:`slicer.outputs.display_panels.Frame`);
    ``labels`` the panel titles, ``title`` the sheet title and ``quantity`` the colour bar's
    label; ``scale`` the colours of the panels. ``nrows`` (default:
    as many as the panels need) keeps every page of an overview the same size; ``page``
    (e.g. ``"page 2 of 8"``) is written at the top right.
    """
    n = len(drawn)
    nrows = math.ceil(n / ncols) if nrows is None else nrows
    per_slice = scale.ranges is not None
    # per-slice: a second title line, each panel's range, needs room above the panel
    lay = sheet_layout(nrows, ncols, frame, dpi, per_slice=per_slice)
    figure = Figure(figsize=(lay.width / lay.dpi, lay.height / lay.dpi), dpi=lay.dpi)
    FigureCanvasAgg(figure)
    figure.add_artist(_Picture(_mosaic(drawn, stride, (frame.ny, frame.nx), lay, scale.colours,
                                       scale.norms),
                               (lay.fx(lay.left), lay.fy(lay.top + lay.grid_h),
                                lay.fx(lay.left + lay.grid_w), lay.fy(lay.top))))

    (west, east, south, north) = frame.extent
    xt, xlabels = sl.axis_ticks(west, east)
    yt, ylabels = sl.axis_ticks(south, north)
    tick = lay.px(sl.TICK_POINTS / 72)
    pad = lay.px(2 / 72)
    segments = []
    for i, label in enumerate(labels):
        c, r = lay.box(i)
        row, col = divmod(i, ncols)
        figure.add_artist(Rectangle((lay.fx(c), lay.fy(r + lay.ph)), lay.pw / lay.width,
                                    lay.ph / lay.height, transform=figure.transFigure,
                                    fill=False, lw=0.8, ec="black", label=f"panel {label}"))
        above = r - pad * 2
        if per_slice:
            figure.text(lay.fx(c + lay.pw / 2), lay.fy(above), scale.ranges[i], ha="center",
                        va="bottom", fontsize=sl.TICK_FONT, color="0.3", gid=f"range {label}")
            above -= lay.px(sl.RANGE_ROOM)
        figure.text(lay.fx(c + lay.pw / 2), lay.fy(above), label, ha="center",
                    va="bottom", fontsize=sl.TITLE_FONT)
        xs = c + (xt - west) / (east - west) * lay.pw
        ys = r + lay.ph - (yt - south) / (north - south) * lay.ph
        bottom = r + lay.ph
        segments += [[(lay.fx(x), lay.fy(bottom)), (lay.fx(x), lay.fy(bottom + tick))]
                     for x in xs]
        segments += [[(lay.fx(c), lay.fy(y)), (lay.fx(c - tick), lay.fy(y))] for y in ys]
        if row == nrows - 1 or i + ncols >= n:  # nothing below: label the easting
            for x, text in zip(xs, xlabels, strict=True):
                figure.text(lay.fx(x), lay.fy(bottom + tick + pad), text, ha="center",
                            va="top", fontsize=sl.TICK_FONT, gid="tick label")
            figure.text(lay.fx(c + lay.pw / 2), lay.fy(r + lay.ph + lay.px(sl.BELOW) - pad),
                        frame.xlabel(), ha="center", va="bottom", fontsize=sl.LABEL_FONT)
        if col == 0:
            for y, text in zip(ys, ylabels, strict=True):
                figure.text(lay.fx(c - tick - pad), lay.fy(y), text, ha="right",
                            va="center", fontsize=sl.TICK_FONT, gid="tick label")
            figure.text(lay.fx(pad), lay.fy(r + lay.ph / 2), frame.ylabel(), ha="left",
                        va="center", rotation=90, fontsize=sl.LABEL_FONT)
    figure.add_artist(LineCollection(segments, colors="black", linewidths=0.8,
                                     transform=figure.transFigure))
    _scale_bar(figure, lay, frame)
    _north_arrow(figure, lay)
    _colour_bar(figure, lay, scale, quantity)
    figure.suptitle(title, fontsize=11, y=lay.fy(lay.px(0.1)), va="top")
    if page is not None:
        figure.text(lay.fx(lay.width - lay.px(0.15)), lay.fy(lay.px(0.1)), page, ha="right",
                    va="top", fontsize=10, fontweight="bold", gid="page number")
    return figure


def _colour_bar(figure: Figure, lay: Layout, scale: Scale, quantity: str) -> None:
    # The colour bar beside the grid, 0.8 of its height.
    cax = figure.add_axes((lay.fx(lay.left + lay.grid_w + lay.px(sl.GAP_X + 0.3)),
                           lay.fy(lay.top + 0.9 * lay.grid_h), lay.px(0.18) / lay.width,
                           0.8 * lay.grid_h / lay.height), label="<colorbar>")
    norm = scale.norms[0] if scale.ranges is None else Normalize(0.0, 1.0)
    bar = figure.colorbar(ScalarMappable(norm=norm, cmap=scale.colours), cax=cax,
                          extend="both")
    if scale.ranges is None:
        bar.set_label(quantity)
        return
    bar.set_ticks(scale.ticks, labels=scale.tick_labels)
    bar.set_label(f"{quantity}\n{scale.caption} (range above each panel)")


def _scale_bar(figure: Figure, lay: Layout, frame) -> None:
    """A round length on the first panel's lower-left corner, labelled below, on a pale box."""
    length = sl.nice_length(frame.width)
    c, r = lay.box(0)
    bar_w = length / frame.width * lay.pw
    bar_h = max(2, lay.ph // 80)
    pad, sep, text_h = lay.px(4 / 72), lay.px(3 / 72), lay.px(sl.TICK_FONT / 72)
    box_w = max(bar_w, lay.px(0.4)) + 2 * pad
    box_h = bar_h + sep + text_h + 2 * pad
    x0, y1 = c + pad, r + lay.ph - pad  # the box's left and bottom pixel
    trans = figure.transFigure
    figure.add_artist(Rectangle((lay.fx(x0), lay.fy(y1)), box_w / lay.width,
                                box_h / lay.height, transform=trans, fc="white",
                                ec="none", alpha=0.7, label="scale bar", gid="scale bar"))
    figure.add_artist(Rectangle((lay.fx(x0 + pad), lay.fy(y1 - pad - text_h - sep)),
                                bar_w / lay.width, bar_h / lay.height, transform=trans,
                                fc="black", ec="none"))
    figure.text(lay.fx(x0 + pad + bar_w / 2), lay.fy(y1 - pad), sl.length_label(length),
                ha="center", va="bottom", fontsize=sl.TICK_FONT)


def _north_arrow(figure: Figure, lay: Layout) -> None:
    # Arrow towards +y: grid north, which is what a north-up raster shows. Black with a white
    # halo, so it shows on the darkest and the lightest colours of any map.
    c, r = lay.box(0)
    halo = [patheffects.withStroke(linewidth=3.5, foreground="white")]
    arrow = Annotation("N", xy=(lay.fx(c + 0.92 * lay.pw), lay.fy(r + 0.05 * lay.ph)),
                       xycoords="figure fraction", xytext=(0, -26), textcoords="offset points",
                       ha="center", va="center", fontsize=9, fontweight="bold",
                       arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.4},
                       path_effects=halo)
    arrow.arrow_patch.set_path_effects(halo)
    arrow.set_gid("north arrow")
    figure.add_artist(arrow)
