"""Processed radargrams: one picture per line, to judge the slices beside the profiles.

A radargram shows a processed line (usually its envelope, or the signed trace) against distance
along the line (m) and two-way time (ns), with a depth axis (m) beside the time axis when a
velocity is known, a colour bar with units, the slice windows marked as brackets on the right
edge (so a bright band in a slice can be found on the profile), and a title with the line's name,
its direction of travel (bearing, degrees clockwise from grid north) and the CRS coordinates of
its ends. Labels sit outside the data area.

Lines are drawn from a decimated image (:func:`display_image`): block means over traces and
samples down to at most :data:`MAX_TRACES` x :data:`MAX_SAMPLES` cells, which a page shows
without loss, so a radargram costs the same for a 200-trace and a 20 000-trace line.
"""

from __future__ import annotations

import math
import os
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.atomic import atomic_path
from slicer.core.conventions import TRACE, TWT, X, Y
from slicer.core.errors import OutputError, SettingsError
from slicer.core.physics import depth_from_time, time_from_depth

if TYPE_CHECKING:
    import xarray as xr
    from matplotlib.figure import Figure

#: Largest decimated image drawn: traces (columns) and samples (rows).
MAX_TRACES, MAX_SAMPLES = 1200, 600
#: Size of a radargram (width, height), inches.
FIGURE_INCHES = (9.0, 4.6)
#: Where the data area of a radargram lies in its figure: (left, bottom, width, height),
#: fractions of the figure (the viewer places its marker by the left and right edges).
PLOT_AREA = (0.08, 0.13, 0.69, 0.70)
#: Where the two title lines start (x, then the tops of each, figure fractions) and their
#: sizes (points).
TITLE_AT, TITLE_PT = (0.08, 0.955, 0.905), (11.0, 8.5)
#: Cells a build keeps of each line for its radargram (traces, samples): about the pixels of
#: the data area at :data:`PAGE_DPI` (9 x 0.69 and 4.6 x 0.70 inches).
PAGE_CELLS = (520, 260)
#: Resolution of a build's radargrams, dots per inch.
PAGE_DPI = 80


def _block_mean(values: np.ndarray, axis: int, most: int) -> np.ndarray:
    n = values.shape[axis]
    k = max(1, math.ceil(n / most))
    if k == 1:
        return values
    m = (n // k) * k
    head = np.moveaxis(values, axis, 0)[:m]
    if np.isnan(head).any():  # NaN-aware only when needed: several times slower
        blocks = head.reshape(m // k, k, *head.shape[1:])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # an all-NaN block stays NaN
            return np.moveaxis(np.nanmean(blocks, axis=1), 0, axis)
    # the k strided slices summed in place: a tenth of the time np.mean took over a reshaped
    # axis on a build's line (0.2 against 1.9 ms for 800 x 512 values, benchmarks/radargrams.py)
    total = head[0::k].astype(np.float32, copy=True)
    for i in range(1, k):
        total += head[i::k]
    total *= np.float32(1.0 / k)
    return np.moveaxis(total, 0, axis)


def display_image(line: xr.DataArray) -> xr.DataArray:
    """The line decimated for display: block means down to at most ``MAX_TRACES`` traces and
    ``MAX_SAMPLES`` samples, with ``distance`` (m along the line), ``x``, ``y`` and ``twt``
    kept for the block centres.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``; coordinates ``x``, ``y`` (m) per trace and ``twt`` (ns).
    """
    if set(line.dims) != {TRACE, TWT}:
        raise SettingsError("expected a line with dims (trace, twt)", where="line")
    x = np.asarray(line[X].values, dtype=float) if X in line.coords else np.arange(
        line.sizes[TRACE], dtype=float)
    y = np.asarray(line[Y].values, dtype=float) if Y in line.coords else np.zeros_like(x)
    return image_of_samples(line.transpose(TRACE, TWT).values, x, y, line[TWT].values,
                            name=line.name, attrs=line.attrs)


def image_of_samples(values: np.ndarray, x: np.ndarray, y: np.ndarray, twt: np.ndarray, *,
                     name: str | None = None, attrs: dict | None = None,
                     most: tuple[int, int] = (MAX_TRACES, MAX_SAMPLES)) -> xr.DataArray:
    """:func:`display_image` of a line held as plain arrays (:func:`line_image`, labelled).

    Parameters
    ----------
    values : numpy.ndarray
        ``(trace, sample)`` values.
    x, y : numpy.ndarray
        Trace positions (m).
    twt : numpy.ndarray
        Two-way time of each sample (ns).
    name : str, optional, keyword-only
        Name of the result.
    attrs : dict, optional, keyword-only
        Attributes kept (``line``, units...); the line's ends are added.
    most : (int, int), keyword-only
        At most this many traces and samples are kept (block means).
    """
    return line_image(values, x, y, twt, name=name, attrs=attrs, most=most).labelled()


@dataclass(frozen=True)
class LineImage:
    """A decimated line as plain arrays (:func:`line_image`); :meth:`labelled` makes it the
    DataArray of :func:`display_image`. A build's line task returns this: it pickles without
    xarray's indexes, and a worker process that never builds a DataArray never imports
    dask.array (0.10-0.14 s of each worker's CPU, which xarray's first DataArray costs)."""

    #: ``(distance, twt)`` block means, float32.
    values: np.ndarray
    #: Block centres: distance along the line (m), x, y (m), and two-way time (ns).
    distance: np.ndarray
    x: np.ndarray
    y: np.ndarray
    twt: np.ndarray
    name: str | None
    attrs: dict

    def labelled(self) -> xr.DataArray:
        """The image as :func:`display_image` gives it."""
        import xarray as xr
        out = xr.DataArray(self.values, dims=("distance", TWT), name=self.name,
                           coords={"distance": ("distance", self.distance, {"units": "m"}),
                                   X: ("distance", self.x, {"units": "m"}),
                                   Y: ("distance", self.y, {"units": "m"}),
                                   TWT: (TWT, self.twt, {"units": "ns"})})
        out.attrs = dict(self.attrs)
        return out


def line_image(values: np.ndarray, x: np.ndarray, y: np.ndarray, twt: np.ndarray, *,
               name: str | None = None, attrs: dict | None = None,
               most: tuple[int, int] = (MAX_TRACES, MAX_SAMPLES)) -> LineImage:
    """:func:`image_of_samples` without the DataArray: the same arrays and attributes."""
    values = np.asarray(values, dtype=np.float32)
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    twt = np.asarray(twt, dtype=float)
    distance = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))])
    image = _block_mean(_block_mean(values, 0, most[0]), 1, most[1])
    nt = image.shape[0]
    k_t = max(1, math.ceil(values.shape[0] / most[0]))
    k_s = max(1, math.ceil(values.shape[1] / most[1]))

    def centres(a, k, n):
        return a[: n * k].reshape(n, k).mean(axis=1) if k > 1 else a[:n]

    return LineImage(image, centres(distance, k_t, nt), centres(x, k_t, nt),
                     centres(y, k_t, nt), centres(twt, k_s, image.shape[1]), name,
                     {**(attrs or {}), "line_start": [float(x[0]), float(y[0])],
                      "line_end": [float(x[-1]), float(y[-1])]})


def bearing(x0: float, y0: float, x1: float, y1: float) -> float:
    """Grid bearing (degrees clockwise from +y, 0-360) of travel from the first point to the
    second."""
    return math.degrees(math.atan2(x1 - x0, y1 - y0)) % 360.0


def titles(image: xr.DataArray, title: str | None = None) -> tuple[str, str]:
    """A radargram's two title lines: the name (with the ground's elevation at the line's ends,
    when an elevation build knows it: ``attrs["ground"]``, ``[start, end, datum]``), then its
    direction and CRS ends."""
    if "line_start" in image.attrs and "line_end" in image.attrs:
        (x0, y0), (x1, y1) = image.attrs["line_start"], image.attrs["line_end"]
    else:  # the first and last block centres
        x, y = image[X].values, image[Y].values
        (x0, y0), (x1, y1) = (x[0], y[0]), (x[-1], y[-1])
    name = title or str(image.attrs.get("line", image.name or "line"))
    if image.attrs.get("ground") is not None:
        g0, g1, datum = image.attrs["ground"]
        name = f"{name}   ground {float(g0):.2f} to {float(g1):.2f} m above {datum}"
    return name, (f"travel bearing {bearing(x0, y0, x1, y1):.0f} deg from grid north, "
                  f"({x0:.2f}, {y0:.2f}) to ({x1:.2f}, {y1:.2f}) m")


def plot_radargram(image: xr.DataArray, path: str | os.PathLike | None = None, *,
                   velocity: float | None = None, windows: tuple | None = None,
                   title: str | None = None, cmap: str = "magma", units: str = "",
                   percentile: tuple[float, float] = (1, 99.5), dpi: float = 110,
                   palette: bool = False) -> Figure:
    """Draw one processed line.

    Parameters
    ----------
    image : xarray.DataArray
        A line from :func:`display_image` (dims ``(distance, twt)``).
    path : path-like, optional
        Save here, atomically (PNG unless the suffix says otherwise).
    velocity : float, optional, keyword-only
        Ground velocity (m/ns): adds a depth axis (m) on the right, ``d = v t / 2``.
    windows : (top, bottom), optional, keyword-only
        The slice windows as two arrays of two-way times (ns), bracketed on the right edge.
    title : str, optional, keyword-only
        The first title line (default: the line's name); the direction and the ends follow.
    cmap : str, keyword-only
        A matplotlib colour map; a signed image (values of both signs) is drawn on a diverging
        map centred on zero when ``cmap`` is left at its default.
    units : str, keyword-only
        Units of the values, for the colour bar.
    percentile : (float, float), keyword-only
        Percentiles of the finite values setting the colour limits.
    dpi : float, keyword-only
        Resolution of the saved image.
    palette : bool, keyword-only
        Save a PNG of at most 256 colours (Pillow's fast octree quantiser): a noisy profile
        then takes about a fifth of the bytes (65 kB instead of 330 kB on the demo), which the
        viewer page, holding every radargram, needs.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if set(image.dims) != {"distance", TWT}:
        raise SettingsError("expected an image from display_image, dims (distance, twt)",
                            where="image")
    values = np.asarray(image.transpose(TWT, "distance").values, dtype=np.float32)
    finite = values[np.isfinite(values)]
    if not finite.size:
        raise SettingsError("the line holds no finite value to draw", where="image")
    lo, hi = np.percentile(finite, percentile)
    signed = finite.min() < 0 < finite.max() and abs(finite.min()) > 0.05 * finite.max()
    if signed and cmap == "magma":
        cmap = "PuOr_r"
    if signed:
        hi = max(abs(lo), abs(hi))
        lo = -hi
    # matplotlib here, not at the top: a build's workers import this module for
    # image_of_samples and never draw (0.5 s of each worker's start, benchmarks/startup.py)
    from matplotlib import colormaps
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.colors import Normalize
    from matplotlib.figure import Figure
    try:
        colours = colormaps[cmap]
    except KeyError:
        raise SettingsError(f"unknown colormap {cmap!r}", where="cmap") from None
    d = image["distance"].values
    t = image[TWT].values
    figure = Figure(figsize=FIGURE_INCHES, dpi=dpi)
    FigureCanvasAgg(figure)
    ax = figure.add_axes(PLOT_AREA)
    shown = ax.imshow(values, aspect="auto", cmap=colours, norm=Normalize(lo, hi),
                      extent=(d[0], d[-1], t[-1], t[0]), interpolation="nearest")
    ax.set_xlabel("distance along the line (m)")
    ax.set_ylabel("two-way time (ns)")
    if velocity is not None:
        depth_ax = ax.secondary_yaxis(  # set off the edge: the window brackets go between
            1.05, functions=(lambda tt: depth_from_time(tt, velocity=velocity),
                            lambda dd: time_from_depth(dd, velocity=velocity)))
        depth_ax.set_ylabel(f"depth (m) at {velocity:.4g} m/ns")
    if windows is not None:
        top, bottom = (np.asarray(w, dtype=float) for w in windows)
        for k, (a, b) in enumerate(zip(top, bottom, strict=True)):
            if b < t[0] or a > t[-1]:
                continue
            xk = 1.0 + (0.026 if k % 2 else 0.012)  # alternate so neighbours stay apart
            ax.plot([xk, xk], [a, b], transform=ax.get_yaxis_transform(), clip_on=False,
                    color="0.25", linewidth=1.2)
    # the image's extent, whatever the brackets made of the limits (they are not data)
    ax.set_xlim(d[0], d[-1])
    ax.set_ylim(t[-1], t[0])
    # the colour bar right of the depth axis, room for signed tick labels and its label after
    bar = figure.colorbar(shown, cax=figure.add_axes(
        (PLOT_AREA[0] + PLOT_AREA[2] + 0.115, PLOT_AREA[1], 0.015, PLOT_AREA[3])))
    bar.set_label(units or "amplitude")
    name, ends = titles(image, title)
    figure.text(TITLE_AT[0], TITLE_AT[1], name, fontsize=TITLE_PT[0], weight="bold", va="top")
    figure.text(TITLE_AT[0], TITLE_AT[2], ends, fontsize=TITLE_PT[1], va="top")
    if path is not None:
        path = Path(path)
        try:
            with atomic_path(path) as tmp:
                if palette:
                    _save_palette_png(figure, tmp)
                else:
                    figure.savefig(tmp, format=path.suffix.lstrip(".").lower() or "png",
                                   dpi=dpi)
        except OSError as exc:
            raise OutputError(f"cannot save figure ({exc})", where=str(path)) from None
    return figure


def _save_palette_png(figure: Figure, path: Path) -> None:
    from PIL import Image
    canvas = figure.canvas
    canvas.draw()
    rgb = Image.frombuffer("RGBA", canvas.get_width_height(), canvas.buffer_rgba()).convert("RGB")
    rgb.quantize(256, method=Image.Quantize.FASTOCTREE).save(path, format="png")


__all__ = ["FIGURE_INCHES", "MAX_SAMPLES", "MAX_TRACES", "PAGE_CELLS", "PAGE_DPI", "PLOT_AREA",
           "LineImage", "bearing", "display_image", "image_of_samples", "line_image",
           "plot_radargram", "titles"]
