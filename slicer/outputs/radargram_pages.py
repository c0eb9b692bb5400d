"""Many radargrams fast: the frame drawn once, each line's data coloured into it with NumPy.

A build draws one radargram per line; matplotlib took 0.13-0.25 s for each (most of it laying
out and drawing the axes, ticks and texts, the same for every line of a grid), three times the
rest of a 65 000-trace build (benchmarks/radargrams.py). :class:`RadargramPages` draws the frame
(axes, depth axis, window brackets, colour bar: :mod:`slicer.outputs.radargram_frame`, laid out
as :func:`slicer.outputs.radargram.plot_radargram` lays it out) once per layout (the lines'
distance and time extents, velocity, windows and sign); each line then costs its data coloured
through a look-up table with NumPy into the frame's data area, its two title lines and a
palette PNG compressed by zlib with the GIL released.

The colour scale is therefore the same frame for every line: each line is drawn relative to its
own 99.5th percentile (of its magnitude when signed; taken from at most :data:`SAMPLE` of its
values spread over the whole line), and the colour bar says so. The data are placed as
``imshow`` places them (cells spread evenly over the data area, nearest cell per pixel).
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np
import xarray as xr
from matplotlib import colormaps

from slicer.core.atomic import atomic_path
from slicer.core.conventions import TWT
from slicer.core.errors import OutputError, SettingsError
from slicer.outputs.radargram import PAGE_DPI, TITLE_AT, TITLE_PT, titles
from slicer.outputs.radargram_frame import (
    FRAME_COLOURS,
    FrameDrawer,
    grey_palette,
    png_bytes,
    stamp,
)

#: Values of a line its colour scale is taken from, at most (every k-th value, k prime to the
#: line's samples so that every row and column is visited): the 99.5th percentile of 40 000
#: values is within about 0.1 % of rank of that of all of them.
SAMPLE = 40_000


def _is_signed(lo: float, hi: float) -> bool:
    # as plot_radargram decides it, from the smallest and largest finite values
    return bool(lo < 0 < hi and abs(lo) > 0.05 * hi)


def spread_sample(values: np.ndarray, most: int = SAMPLE) -> np.ndarray:
    """At most about ``most`` of ``values`` (2-D), every k-th in storage order with k prime to
    the row length, so that the sample visits every row and every column."""
    flat = values.reshape(-1)
    k = max(1, math.ceil(flat.size / most))
    while k > 1 and math.gcd(k, values.shape[-1]) != 1:
        k += 1
    return flat[::k]


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
        self._drawer = FrameDrawer(dpi=dpi)

    def save(self, image: xr.DataArray, path: str | os.PathLike, *,
             velocity: float | None = None, windows: tuple | None = None) -> Path:
        """Draw ``image`` (:func:`slicer.outputs.radargram.image_of_samples`) to the PNG
        ``path``, atomically; ``velocity`` and ``windows`` as for :func:`plot_radargram`."""
        if set(image.dims) != {"distance", TWT}:
            raise SettingsError("expected an image from display_image, dims (distance, twt)",
                                where="image")
        values = image.variable.values  # the labelled transpose took 0.12 ms a line
        values = np.asarray(values if image.dims[0] == "distance" else values.T,
                            dtype=np.float32)
        sample = spread_sample(values)
        sample = sample[np.isfinite(sample)]
        if not sample.size:  # the sample may have missed the few finite values
            sample = values[np.isfinite(values)]
            if not sample.size:
                raise SettingsError("the line holds no finite value to draw", where="image")
        signed = _is_signed(float(np.fmin.reduce(values, axis=None)),
                            float(np.fmax.reduce(values, axis=None)))  # fmin: NaN skipped
        magnitude = np.abs(sample) if signed else sample
        rank = round(self.percentile / 100 * (magnitude.size - 1))
        scale = float(np.partition(magnitude, rank)[rank])
        scale = scale if scale > 0 else float(np.abs(magnitude).max()) or 1.0
        coords = image.coords.variables
        d, t = coords["distance"].values, coords[TWT].values
        key = (round(float(d[0]), 3), round(float(d[-1]), 3), float(t[0]), float(t[-1]),
               velocity, signed,
               None if windows is None else tuple(np.round(np.ravel(windows), 6)))
        if key not in self._frames:
            self._frames[key] = self._frame(d, t, velocity, windows, signed)
        indices, (r0, r1, c0, c1), palette = self._frames[key]
        page = indices.copy()
        page[r0:r1, c0:c1] = self._colour(values, scale, signed, r1 - r0, c1 - c0)
        name, ends = titles(image)
        h, w = page.shape
        for text, points, bold, top in ((name, TITLE_PT[0], True, TITLE_AT[1]),
                                        (ends, TITLE_PT[1], False, TITLE_AT[2])):
            ink = self._drawer.text(text, points, bold=bold, keep=False)
            stamp(page, ink, round((1 - top) * h), round(TITLE_AT[0] * w),
                  white=FRAME_COLOURS - 1)
        data = png_bytes(page, palette, dpi=self.dpi)
        path = Path(path)
        try:
            with atomic_path(path) as tmp:
                tmp.write_bytes(data)
        except OSError as exc:
            raise OutputError(f"cannot save figure ({exc})", where=str(path)) from None
        return path

    @staticmethod
    def _colour(values: np.ndarray, scale: float, signed: bool, rows: int,
                cols: int) -> np.ndarray:
        """Palette indices of the data area (``rows`` x ``cols`` pixels) from ``values``
        (distance, twt): the nearest cell per pixel, NaN white."""
        n = 256 - FRAME_COLOURS
        low = -1.0 if signed else 0.0
        a = np.float32((n - 1) / (scale * (1.0 - low)))
        level = values * a
        if signed:
            level += np.float32(-low * (n - 1) / (1.0 - low))
        np.clip(level, 0, n - 1, out=level)
        np.rint(level, out=level)
        nan = np.isnan(level)
        cells = (level + FRAME_COLOURS).astype(np.uint8) if not nan.any() else np.where(
            nan, FRAME_COLOURS - 1, np.nan_to_num(level) + FRAME_COLOURS).astype(np.uint8)
        row = ((np.arange(rows) + 0.5) * values.shape[1] / rows).astype(np.intp)
        col = ((np.arange(cols) + 0.5) * values.shape[0] / cols).astype(np.intp)
        # rows, then columns, each by take: the same pixels as cells.T[row[:, None], col] in
        # a third of the time (0.28 against 0.78 ms for a 560 x 300 data area)
        return cells.T.take(row, axis=0).take(col, axis=1)

    def _frame(self, d, t, velocity, windows, signed):
        """The frame of one layout: palette indices, the data area (first and end rows and
        columns) and the palette (the frame's greys, then the data's colours)."""
        low = -1.0 if signed else 0.0
        what = f"{self.units or 'amplitude'} / line's {self.percentile:g}th percentile" \
               f"{' of |value|' if signed else ''}"
        indices, area = self._drawer.frame((float(d[0]), float(d[-1])),
                                           (float(t[0]), float(t[-1])), velocity=velocity,
                                           windows=windows, low=low, label=what)
        cmap = "PuOr_r" if signed and self.cmap == "magma" else self.cmap
        lut = colormaps[cmap](np.linspace(0, 1, 256 - FRAME_COLOURS))[:, :3]
        lut = np.rint(lut * 255).astype(np.uint8)
        return indices, area, np.vstack([grey_palette(), lut])


__all__ = ["FRAME_COLOURS", "SAMPLE", "RadargramPages", "spread_sample"]
