"""Many radargrams fast: the frame drawn once, each line's data coloured into it with NumPy.

A build draws one radargram per line; matplotlib took 0.13-0.25 s for each (most of it laying
out and drawing the axes, ticks and texts, the same for every line of a grid), three times the
rest of a 65 000-trace build (benchmarks/radargrams.py). :class:`RadargramPages` draws the frame
(axes, depth axis, window brackets, colour bar) with :func:`slicer.outputs.radargram.plot_radargram`
once per layout (the lines' distance and time extents, velocity, windows and sign) and keeps it
as a palette image; each line then costs its data coloured through a look-up table with NumPy
into the frame's data area, its two title lines drawn by Pillow in matplotlib's own font, and
a palette PNG.

The colour scale is therefore the same frame for every line: each line is drawn relative to its
own 99.5th percentile (of its magnitude when signed), and the colour bar says so. The data
are placed as ``imshow`` places them (cells spread evenly over the data area, nearest cell per
pixel).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import xarray as xr
from matplotlib import colormaps

from slicer.core.atomic import atomic_path
from slicer.core.conventions import TWT, X, Y
from slicer.core.errors import OutputError, SettingsError
from slicer.outputs.radargram import PAGE_DPI, TITLE_AT, TITLE_PT, plot_radargram, titles

#: Palette entries kept for the frame (quantised once); the rest colour the data.
FRAME_COLOURS = 64


def _is_signed(finite: np.ndarray) -> bool:
    # as plot_radargram decides it
    return bool(finite.min() < 0 < finite.max() and abs(finite.min()) > 0.05 * finite.max())


class RadargramPages:
    """Save radargrams of many lines, each as :func:`plot_radargram` lays it out.

    Parameters
    ----------
    units : str, keyword-only
        Units of the values (the colour bar reads them over the line's 99.5th percentile).
    cmap : str, keyword-only
        A matplotlib colour map for unsigned lines; signed ones use a diverging map.
    dpi : float, keyword-only
        Resolution of the pages.
    percentile : float, keyword-only
        The percentile of each line's values (magnitudes if signed) that the colour scale's
        top stands for.
    """

    def __init__(self, *, units: str = "", cmap: str = "magma", dpi: float = PAGE_DPI,
                 percentile: float = 99.5):
        if cmap not in colormaps:
            raise SettingsError(f"unknown colormap {cmap!r}", where="cmap")
        self.units, self.cmap, self.dpi, self.percentile = units, cmap, dpi, percentile
        self._frames: dict = {}
        self._fonts = None

    def save(self, image: xr.DataArray, path: str | os.PathLike, *,
             velocity: float | None = None, windows: tuple | None = None) -> Path:
        """Draw ``image`` (:func:`slicer.outputs.radargram.image_of_samples`) to the PNG
        ``path``, atomically; ``velocity`` and ``windows`` as for :func:`plot_radargram`."""
        from PIL import Image, ImageDraw
        values = np.asarray(image.transpose(TWT, "distance").values, dtype=np.float32)
        finite = values[np.isfinite(values)]
        if not finite.size:
            raise SettingsError("the line holds no finite value to draw", where="image")
        signed = _is_signed(finite)
        scale = float(np.percentile(np.abs(finite) if signed else finite, self.percentile))
        scale = scale if scale > 0 else float(np.abs(finite).max()) or 1.0
        d, t = image["distance"].values, image[TWT].values
        key = (round(float(d[0]), 3), round(float(d[-1]), 3), float(t[0]), float(t[-1]),
               velocity, signed,
               None if windows is None else tuple(np.round(np.ravel(windows), 6)))
        if key not in self._frames:
            self._frames[key] = self._frame(d, t, velocity, windows, signed)
        indices, (r0, r1, c0, c1), black, white, palette = self._frames[key]
        n = 256 - FRAME_COLOURS
        low = -1.0 if signed else 0.0
        level = np.rint((values / scale - low) / (1.0 - low) * (n - 1))
        level = np.clip(np.nan_to_num(level, nan=-1), -1, n - 1).astype(np.int16)
        rows = ((np.arange(r1 - r0) + 0.5) * values.shape[0] / (r1 - r0)).astype(int)
        cols = ((np.arange(c1 - c0) + 0.5) * values.shape[1] / (c1 - c0)).astype(int)
        data = level[rows][:, cols]
        page = indices.copy()
        page[r0:r1, c0:c1] = np.where(data < 0, white, FRAME_COLOURS + data).astype(np.uint8)
        picture = Image.fromarray(page, mode="P")
        picture.putpalette(palette)
        draw = ImageDraw.Draw(picture)
        bold, plain = self._font()
        name, ends = titles(image)
        h, w = page.shape
        draw.text((TITLE_AT[0] * w, (1 - TITLE_AT[1]) * h), name, fill=black, font=bold)
        draw.text((TITLE_AT[0] * w, (1 - TITLE_AT[2]) * h), ends, fill=black, font=plain)
        path = Path(path)
        try:
            with atomic_path(path) as tmp:
                # zlib level 3: on the demo smaller than 1 and faster than 6 (106-112 kB)
                picture.save(tmp, format="png", compress_level=3)
        except OSError as exc:
            raise OutputError(f"cannot save figure ({exc})", where=str(path)) from None
        return path

    def _font(self):
        if self._fonts is None:
            from matplotlib import font_manager
            from PIL import ImageFont
            px = [pt * self.dpi / 72 for pt in TITLE_PT]
            bold = font_manager.FontProperties(family="DejaVu Sans", weight="bold")
            plain = font_manager.FontProperties(family="DejaVu Sans")
            self._fonts = (ImageFont.truetype(font_manager.findfont(bold), round(px[0])),
                           ImageFont.truetype(font_manager.findfont(plain), round(px[1])))
        return self._fonts

    def _frame(self, d, t, velocity, windows, signed):
        """The frame of one layout: palette indices, the data area (first and end rows and
        columns), the indices of black and white, and the palette (frame, then data)."""
        from PIL import Image
        low = -1.0 if signed else 0.0
        dummy = xr.DataArray(  # spans the colour scale, so the bar reads low..1
            np.array([[low, 1.0], [1.0, low]], dtype=np.float32), dims=("distance", TWT),
            coords={"distance": [float(d[0]), float(d[-1])], TWT: [float(t[0]), float(t[-1])],
                    X: ("distance", [0.0, 1.0]), Y: ("distance", [0.0, 0.0])})
        what = f"{self.units or 'amplitude'} / line's {self.percentile:g}th percentile" \
               f"{' of |value|' if signed else ''}"
        figure = plot_radargram(dummy, velocity=velocity, windows=windows, units=what,
                                cmap=self.cmap, percentile=(0, 100), dpi=self.dpi)
        figure.canvas.draw()
        rgba = np.asarray(figure.canvas.buffer_rgba())
        h = rgba.shape[0]
        box = figure.axes[0].get_window_extent()
        r0, r1 = int(np.ceil(h - box.y1)), int(np.floor(h - box.y0))
        c0, c1 = int(np.ceil(box.x0)), int(np.floor(box.x1))
        rgb = rgba[..., :3].copy()
        # the title lines are drawn per line: blank down to below the second one
        rgb[: int((1 - TITLE_AT[2]) * h + 1.4 * TITLE_PT[1] * self.dpi / 72),
            : int(0.9 * rgb.shape[1])] = 255  # (left of the colour bar's label)
        rgb[r0:r1, c0:c1] = 255
        frame = Image.fromarray(rgb).quantize(FRAME_COLOURS, method=Image.Quantize.FASTOCTREE)
        indices = np.asarray(frame, dtype=np.uint8)
        palette = np.asarray(frame.getpalette()[: 3 * FRAME_COLOURS], dtype=int).reshape(-1, 3)
        if len(palette) < FRAME_COLOURS:
            palette = np.vstack([palette, np.zeros((FRAME_COLOURS - len(palette), 3), int)])
        cmap = "PuOr_r" if signed and self.cmap == "magma" else self.cmap
        lut = colormaps[cmap](np.linspace(0, 1, 256 - FRAME_COLOURS))[:, :3]
        lut = np.rint(lut * 255).astype(int)
        black = int(np.argmin(palette.sum(axis=1)))
        white = int(np.argmax(palette.sum(axis=1)))
        return (indices, (r0, r1, c0, c1), black, white,
                np.vstack([palette, lut]).ravel().tolist())


__all__ = ["FRAME_COLOURS", "RadargramPages"]
