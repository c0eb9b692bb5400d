"""Where everything of an overview sheet goes, in whole pixels, and how its panels are
coloured: shared by the matplotlib sheet (:mod:`slicer.outputs.sheet`) and the NumPy one a build
saves (:mod:`slicer.outputs.sheet_png`). Imports no figure machinery."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from slicer.outputs.display_panels import PANEL_INCHES, _decimals

if TYPE_CHECKING:
    from matplotlib.colors import Colormap, Normalize

#: Margins around each panel, inches: room for the y tick labels and axis label on its left,
#: a gap on its right, its title above and the x tick labels and axis label below; the sheet
#: title above the grid and the colour bar beside it.
LEFT, GAP_X, TOP, GAP_TOP, BELOW, BAR_ROOM = 0.6, 0.15, 0.8, 0.25, 0.5, 1.3

#: Tick length (points) and the font sizes of tick labels, axis labels and panel titles.
TICK_POINTS, TICK_FONT, LABEL_FONT, TITLE_FONT = 3.5, 7, 8, 9

#: Room for the line of a panel's own colour range above its title (per-slice stretch), inches.
RANGE_ROOM = 0.15


def nice_length(width: float) -> float:
    # A 1-2-5 round length close to a fifth of the panel width, for the scale bar.
    target = width / 5
    exponent = math.floor(math.log10(target))
    for step in (5, 2, 1):
        length = step * 10.0**exponent
        if length <= target * 1.25:
            return length
    return 10.0**exponent


def length_label(length: float) -> str:
    return f"{length * 100:g} cm" if length < 1 else f"{length:g} m"


class Layout:
    """Where everything of a sheet of ``nrows`` x ``ncols`` panels goes, in whole pixels.

    Pixel rows count down from the top of the sheet, as in the saved image.
    """

    def __init__(self, nrows: int, ncols: int, aspect: float, dpi: float, *,
                 gap_top: float = GAP_TOP):
        self.nrows, self.ncols, self.dpi = nrows, ncols, float(dpi)
        panel_w = PANEL_INCHES if aspect <= 1 else PANEL_INCHES / aspect
        px = self.px
        self.pw, self.ph = max(1, px(panel_w)), max(1, px(panel_w * aspect))
        self.step_x = px(LEFT + GAP_X) + self.pw
        self.step_y = px(BELOW + gap_top) + self.ph
        self.left, self.top = px(LEFT), px(TOP + gap_top)
        self.grid_w = (ncols - 1) * self.step_x + self.pw
        self.grid_h = (nrows - 1) * self.step_y + self.ph
        self.width = self.left + self.grid_w + px(GAP_X + BAR_ROOM)
        self.height = self.top + self.grid_h + px(BELOW)

    def px(self, inches: float) -> int:
        """Whole pixels of ``inches`` on the sheet."""
        return round(inches * self.dpi)

    def box(self, i: int) -> tuple[int, int]:
        """Pixel column and row of the top-left corner of panel ``i``."""
        row, col = divmod(i, self.ncols)
        return self.left + col * self.step_x, self.top + row * self.step_y

    def fx(self, column: float) -> float:
        """Figure fraction of a pixel column."""
        return column / self.width

    def fy(self, row: float) -> float:
        """Figure fraction of a pixel row (counted from the top)."""
        return 1 - row / self.height


def panel_pixels(layout: Layout, cells: tuple[int, int], stride: int,
                 drawn: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
    """Which drawn cell each pixel row and column of a panel shows: a grid of ``cells``
    (rows, columns) spans the panel's pixels, and a pixel shows the drawn cell (every
    ``stride``-th of the grid, ``drawn`` of them) nearest below its centre, as imshow's
    'nearest' did."""
    ny, nx = cells
    rows = np.minimum(((np.arange(layout.ph) + 0.5) * ny / layout.ph) // stride,
                      drawn[0] - 1).astype(np.intp)
    cols = np.minimum(((np.arange(layout.pw) + 0.5) * nx / layout.pw) // stride,
                      drawn[1] - 1).astype(np.intp)
    return rows, cols


def sheet_layout(nrows: int, ncols: int, frame, dpi: float, *, per_slice: bool) -> Layout:
    """The layout of a sheet of ``frame``'s panels (:class:`slicer.outputs.display_panels.Frame`);
    ``per_slice``: room above each panel for its own colour range."""
    return Layout(nrows, ncols, frame.height / frame.width, dpi,
                  gap_top=GAP_TOP + (RANGE_ROOM if per_slice else 0))


def axis_ticks(low: float, high: float) -> tuple[np.ndarray, list[str]]:
    # Round positions (metres from the panel's low edge) and their labels.
    from matplotlib.ticker import MaxNLocator  # light: no figure machinery
    values = MaxNLocator(nbins=4, steps=[1, 2, 2.5, 5, 10]).tick_values(low, high)
    values = values[(values >= low - 1e-9 * abs(high - low)) & (values <= high)]
    d = _decimals(values, 0, 4)
    return values, [f"{v:.{d}f}" for v in values]


class Scale:
    """How the panels of a sheet are coloured: a colour map and one Normalize per panel.

    ``ranges`` (per-slice stretch) holds each panel's range as a short text, written above the
    panel; the colour bar then shows ``ticks`` labelled ``tick_labels`` (0-1 of each panel's
    range) with ``caption`` added to its label.
    """

    def __init__(self, colours: Colormap, norms: list[Normalize], *,
                 ranges: list[str] | None = None, ticks=None, tick_labels=None,
                 caption: str = ""):
        self.colours, self.norms, self.ranges = colours, norms, ranges
        self.ticks, self.tick_labels, self.caption = ticks, tick_labels, caption

    def page(self, start: int, stop: int) -> Scale:
        """The scale of panels ``start:stop``."""
        return Scale(self.colours, self.norms[start:stop],
                     ranges=None if self.ranges is None else self.ranges[start:stop],
                     ticks=self.ticks, tick_labels=self.tick_labels, caption=self.caption)


__all__ = ["BAR_ROOM", "BELOW", "GAP_TOP", "GAP_X", "LABEL_FONT", "LEFT", "RANGE_ROOM",
           "TICK_FONT", "TICK_POINTS", "TITLE_FONT", "TOP", "Layout", "Scale", "axis_ticks",
           "length_label", "nice_length", "panel_pixels", "sheet_layout"]
