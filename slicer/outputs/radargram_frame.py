"""A radargram's frame drawn with NumPy and Pillow, and a palette PNG written with zlib.

:class:`slicer.outputs.radargram_pages.RadargramPages` colours each line's data into a frame:
the axes around the data area, the two-way time axis, the depth axis, the slice windows'
brackets and the colour bar, where :func:`slicer.outputs.radargram.plot_radargram` puts them
(:data:`~slicer.outputs.radargram.PLOT_AREA`, the same figure size) and at matplotlib's default
sizes (tick length and pad 3.5 pt, tick and axis labels 10 pt, axis labels 4 pt from the tick
labels, spines 0.8 pt; matplotlib's own DejaVu fonts; tick positions from matplotlib's
``MaxNLocator`` as its default locator chooses them). Drawn by matplotlib the frame took
0.4-0.6 s of a build per layout; here a few milliseconds, texts rendered once each.

The frame is a grey-level image held as indices into the first :data:`FRAME_COLOURS` entries of
the page's palette (greys from black to white); the colour bar and the data use the entries
after them (a colour map's table). :func:`png_bytes` writes such an image as an 8-bit palette
PNG (W3C PNG specification, 3rd edition: IHDR, PLTE, pHYs, IDAT, IEND) compressed by
:mod:`zlib`, which releases the GIL while it compresses, so a thread drawing radargrams holds it
little against the threads that grid.
"""

from __future__ import annotations

import math
import struct
import zlib
from pathlib import Path

import numpy as np

from slicer.core.physics import depth_from_time, time_from_depth
from slicer.outputs.radargram import FIGURE_INCHES, PLOT_AREA

#: Palette entries of the frame: greys, black (0) to white (``FRAME_COLOURS - 1``).
FRAME_COLOURS = 64
#: matplotlib's default sizes (points): tick length, tick pad, label size, axis label pad,
#: spine width; the window brackets' width, as plot_radargram draws them.
TICK_PT, PAD_PT, LABEL_PT, LABEL_PAD_PT, SPINE_PT, BRACKET_PT = 3.5, 3.5, 10.0, 4.0, 0.8, 1.2
#: The colour bar's place right of the data area (figure fractions: offset, width), as
#: plot_radargram places it; the depth axis and the brackets (fractions of the data width).
BAR_AT, DEPTH_AT, BRACKETS_AT = (0.115, 0.015), 1.05, (1.012, 1.026)
#: zlib level and strategy of the pages, rows filtered by "Sub" (each byte less the one on its
#: left): on a build's radargrams (the data's palette indices follow the colour scale, and a
#: column repeated to fill the data area leaves a zero) 3 % fewer bytes than unfiltered level
#: 1 in about 0.6 of its time (1.67 against 2.90 ms a page, 104 against 107 kB; Pillow at its
#: default level 6: 5.68 ms, 102 kB; benchmarks/radargrams.py, last table).
PNG_LEVEL, PNG_STRATEGY = 1, zlib.Z_RLE


def png_bytes(indices: np.ndarray, palette: np.ndarray, *, dpi: float) -> bytes:
    """An 8-bit palette PNG of ``indices`` (rows x columns, uint8) with ``palette`` (up to 256
    RGB rows, 0-255) at ``dpi`` dots per inch (its pHYs chunk, in pixels per metre).

    Every row is stored with filter type 1, "Sub" (PNG specification, section 7.3 and 9.2:
    ``Filt(x) = Orig(x) - Orig(a)`` modulo 256, ``a`` the byte on the left, 0 for the first),
    deflated at :data:`PNG_LEVEL` with :data:`PNG_STRATEGY`.
    """
    indices = np.ascontiguousarray(indices, dtype=np.uint8)
    h, w = indices.shape
    raw = np.empty((h, w + 1), dtype=np.uint8)
    raw[:, 0] = 1
    raw[:, 1] = indices[:, 0]
    np.subtract(indices[:, 1:], indices[:, :-1], out=raw[:, 2:])  # uint8: modulo 256

    def chunk(tag: bytes, data: bytes) -> bytes:
        return struct.pack(">I", len(data)) + tag + data + struct.pack(
            ">I", zlib.crc32(tag + data) & 0xFFFFFFFF)

    deflate = zlib.compressobj(PNG_LEVEL, zlib.DEFLATED, 15, 9, PNG_STRATEGY)
    idat = deflate.compress(raw.tobytes()) + deflate.flush()
    ppm = round(dpi / 0.0254)
    plte = np.asarray(palette, dtype=np.uint8).reshape(-1, 3)
    return b"".join([b"\x89PNG\r\n\x1a\n",
                     chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 3, 0, 0, 0)),
                     chunk(b"PLTE", plte.tobytes()),
                     chunk(b"pHYs", struct.pack(">IIB", ppm, ppm, 1)),
                     chunk(b"IDAT", idat),
                     chunk(b"IEND", b"")])


def grey_palette() -> np.ndarray:
    """The frame's :data:`FRAME_COLOURS` greys, RGB 0-255, black first."""
    g = np.rint(np.arange(FRAME_COLOURS) * 255 / (FRAME_COLOURS - 1)).astype(np.uint8)
    return np.repeat(g[:, None], 3, axis=1)


def grey_index(lightness: np.ndarray) -> np.ndarray:
    """The frame's palette index of grey ``lightness`` (0 black - 255 white)."""
    return ((np.asarray(lightness, dtype=np.uint16) * (FRAME_COLOURS - 1) + 127)
            // 255).astype(np.uint8)


def tick_values(lo: float, hi: float, length_pt: float, per_tick_pt: float) -> np.ndarray:
    """Tick positions between ``lo`` and ``hi`` as matplotlib's default locator places them on
    an axis ``length_pt`` long (at most 9; one per ``per_tick_pt``: three label heights along x,
    two along y)."""
    from matplotlib.ticker import MaxNLocator
    a, b = min(lo, hi), max(lo, hi)
    if not b > a:
        return np.array([a])
    nbins = int(np.clip(math.floor(length_pt / per_tick_pt), 1, 9))
    ticks = MaxNLocator(nbins=nbins, steps=[1, 2, 2.5, 5, 10]).tick_values(a, b)
    tol = 1e-9 * (b - a)
    return ticks[(ticks >= a - tol) & (ticks <= b + tol)]


def tick_labels(values: np.ndarray) -> list[str]:
    """Labels with the fewest decimals that show every value exactly (up to 6), a true minus."""
    values = np.asarray(values, dtype=float)
    scale = max(1.0, float(np.abs(values).max(initial=0.0)))
    for decimals in range(7):
        if np.all(np.abs(np.round(values, decimals) - values) <= 1e-9 * scale):
            break
    return [f"{0.0 if abs(v) < 1e-12 * scale else v:.{decimals}f}".replace("-", "\u2212")
            for v in values]


class FrameDrawer:
    """Draws frames at ``dpi`` (dots per inch), each text rendered once and kept."""

    def __init__(self, *, dpi: float):
        self.dpi = dpi
        self._fonts: dict = {}
        self._texts: dict = {}

    def px(self, points: float) -> float:
        """Points to pixels."""
        return points * self.dpi / 72.0

    def font(self, points: float, bold: bool = False):
        """matplotlib's DejaVu Sans (bold) at ``points``, as a Pillow font."""
        key = (points, bold)
        if key not in self._fonts:
            import matplotlib
            from PIL import ImageFont
            name = "DejaVuSans-Bold.ttf" if bold else "DejaVuSans.ttf"
            file = Path(matplotlib.get_data_path()) / "fonts" / "ttf" / name
            self._fonts[key] = ImageFont.truetype(str(file), max(1, round(self.px(points))))
        return self._fonts[key]

    def text(self, text: str, points: float = LABEL_PT, *, bold: bool = False,
             rotated: bool = False, keep: bool = True) -> np.ndarray:
        """The ink of ``text`` (0-255, rows x columns): its advance wide, ascent + descent
        high; ``rotated``: turned a quarter anticlockwise (read upwards)."""
        key = (text, points, bold, rotated)
        ink = self._texts.get(key)
        if ink is None:
            from PIL import Image, ImageDraw
            font = self.font(points, bold)
            ascent, descent = font.getmetrics()
            width = max(1, math.ceil(font.getlength(text)))
            picture = Image.new("L", (width, ascent + descent), 0)
            ImageDraw.Draw(picture).text((0, 0), text, fill=255, font=font, anchor="la")
            ink = np.asarray(picture)
            if rotated:
                ink = np.ascontiguousarray(np.rot90(ink))
            if keep:
                self._texts[key] = ink
        return ink

    def frame(self, d: tuple[float, float], t: tuple[float, float], *,
              velocity: float | None, windows, low: float, label: str):
        """The frame of one layout: palette indices (0 to ``FRAME_COLOURS - 1``; the colour
        bar ``FRAME_COLOURS`` upwards, low at the bottom, for the data's table of the
        remaining entries) and the data area's first and end rows and columns.

        Parameters
        ----------
        d, t : (float, float)
            Distance (m) of the first and last columns, two-way time (ns) of the first and
            last rows.
        velocity : float or None
            Ground velocity (m/ns) for the depth axis (m); none without.
        windows : (top, bottom) or None
            Slice windows, two-way times (ns), bracketed right of the data area.
        low : float
            The colour bar's bottom (its top is 1).
        label : str
            The colour bar's label.
        """
        w, h = round(FIGURE_INCHES[0] * self.dpi), round(FIGURE_INCHES[1] * self.dpi)
        left, bottom, width, height = PLOT_AREA
        c0, c1 = round(left * w), round((left + width) * w)
        r0, r1 = round((1 - bottom - height) * h), round((1 - bottom) * h)
        canvas = np.full((h, w), 255, dtype=np.uint8)
        tick, pad, gap = (round(self.px(p)) for p in (TICK_PT, PAD_PT, LABEL_PAD_PT))
        line = max(1, round(self.px(SPINE_PT)))
        _box(canvas, r0, r1, c0, c1, line)
        width_pt, height_pt = (FIGURE_INCHES[0] * width * 72, FIGURE_INCHES[1] * height * 72)

        def row_of(tt):
            return r0 + (np.asarray(tt, dtype=float) - t[0]) / ((t[1] - t[0]) or 1.0) * (r1 - r0)

        # distance along the bottom
        xs = tick_values(d[0], d[1], width_pt, 3 * LABEL_PT)
        cols = c0 + (xs - d[0]) / ((d[1] - d[0]) or 1.0) * (c1 - c0)
        tall = 0
        for c, text in zip(cols, tick_labels(xs), strict=True):
            canvas[r1 + line: r1 + line + tick, _span(c, line)] = 0
            tall = max(tall, self._put(canvas, self.text(text), c, r1 + tick + pad, "top"))
        self._put(canvas, self.text("distance along the line (m)"), (c0 + c1) / 2,
                  r1 + tick + pad + tall + gap, "top")
        # two-way time on the left
        ts = tick_values(t[0], t[1], height_pt, 2 * LABEL_PT)
        wide = self._side(canvas, row_of(ts), tick_labels(ts), c0 - line, -1, tick, pad, line)
        self._put(canvas, self.text("two-way time (ns)", rotated=True),
                  c0 - line - tick - pad - wide - gap, (r0 + r1) / 2, "right")
        if velocity is not None:  # depth on an axis set off the edge, the brackets between
            x = round(c0 + DEPTH_AT * (c1 - c0))
            canvas[r0:r1, x: x + line] = 0
            ds = tick_values(*depth_from_time(np.asarray(t), velocity=velocity), height_pt,
                             2 * LABEL_PT)
            wide = self._side(canvas, row_of(time_from_depth(ds, velocity=velocity)),
                              tick_labels(ds), x + line, 1, tick, pad, line)
            self._put(canvas, self.text(f"depth (m) at {velocity:.4g} m/ns", rotated=True),
                      x + line + tick + pad + wide + gap, (r0 + r1) / 2, "left")
        if windows is not None:
            top, end = (np.asarray(v, dtype=float) for v in windows)
            thick = max(1, round(self.px(BRACKET_PT)))
            for k, (a, b) in enumerate(zip(top, end, strict=True)):
                if b < min(t) or a > max(t):
                    continue
                x = round(c0 + BRACKETS_AT[k % 2] * (c1 - c0))  # alternate: neighbours apart
                ra, rb = sorted(np.clip(row_of([a, b]), r0, r1))
                canvas[round(ra): max(round(rb), round(ra) + 1), x: x + thick] = 64  # 0.25 grey
        # the colour bar
        b0 = round((left + width + BAR_AT[0]) * w)
        b1 = round((left + width + BAR_AT[0] + BAR_AT[1]) * w)
        _box(canvas, r0, r1, b0, b1, line)
        bars = tick_values(low, 1.0, height_pt, 2 * LABEL_PT)
        wide = self._side(canvas, r1 - (bars - low) / (1.0 - low) * (r1 - r0),
                          tick_labels(bars), b1 + line, 1, tick, pad, line)
        self._put(canvas, self.text(label, rotated=True), b1 + line + tick + pad + wide + gap,
                  (r0 + r1) / 2, "left")
        indices = grey_index(canvas)
        n = 256 - FRAME_COLOURS
        fraction = (r1 - 0.5 - np.arange(r0, r1)) / (r1 - r0)  # 0 at the bottom row
        indices[r0:r1, b0:b1] = (FRAME_COLOURS + np.rint(fraction * (n - 1))).astype(
            np.uint8)[:, None]
        return indices, (r0, r1, c0, c1)

    def _side(self, canvas, rows, labels, edge, direction, tick, pad, line) -> int:
        """Ticks out of a vertical edge (``direction`` -1: leftwards) with their labels;
        returns the widest label (pixels)."""
        wide = 0
        for r, text in zip(rows, labels, strict=True):
            a, b = (edge - tick, edge) if direction < 0 else (edge, edge + tick)
            canvas[_span(r, line), max(0, a): b] = 0
            ink = self.text(text)
            wide = max(wide, ink.shape[1])
            self._put(canvas, ink, edge + direction * (tick + pad), r,
                      "right" if direction < 0 else "left")
        return wide

    @staticmethod
    def _put(canvas, ink, x, y, anchor) -> int:
        """Ink ``ink`` in black: ``top`` centred under (x, y), ``right``/``left``: its right or
        left edge at x, centred on y. Returns its height."""
        ih, iw = ink.shape
        if anchor == "top":
            r, c = round(y), round(x - iw / 2)
        elif anchor == "right":
            r, c = round(y - ih / 2), round(x - iw)
        else:
            r, c = round(y - ih / 2), round(x)
        stamp(canvas, ink, r, c)
        return ih


def stamp(canvas: np.ndarray, ink: np.ndarray, r: int, c: int, *, white: int = 255) -> None:
    """Darken ``canvas`` (grey levels, or grey indices up to ``white``) by ``ink`` (0-255)
    placed with its top-left corner at row ``r``, column ``c``; clipped at the edges."""
    h, w = canvas.shape
    ih, iw = ink.shape
    ra, rb, ca, cb = max(0, r), min(h, r + ih), max(0, c), min(w, c + iw)
    if ra >= rb or ca >= cb:
        return
    part = ink[ra - r: rb - r, ca - c: cb - c].astype(np.uint16)
    shade = (white - (part * white + 127) // 255).astype(canvas.dtype)
    np.minimum(canvas[ra:rb, ca:cb], shade, out=canvas[ra:rb, ca:cb])


def _span(centre: float, width: int) -> slice:
    start = round(centre - width / 2)
    return slice(max(0, start), start + width)


def _box(canvas: np.ndarray, r0: int, r1: int, c0: int, c1: int, line: int) -> None:
    """A black outline of ``line`` pixels just outside rows r0:r1, columns c0:c1."""
    canvas[r0 - line: r0, c0 - line: c1 + line] = 0
    canvas[r1: r1 + line, c0 - line: c1 + line] = 0
    canvas[r0 - line: r1 + line, c0 - line: c0] = 0
    canvas[r0 - line: r1 + line, c1: c1 + line] = 0


__all__ = ["FRAME_COLOURS", "FrameDrawer", "grey_index", "grey_palette", "png_bytes", "stamp",
           "tick_labels", "tick_values"]
