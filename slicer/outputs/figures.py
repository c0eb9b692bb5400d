"""The overview sheet: every slice of a cube side by side on one shared colour scale.

Figures are built on :class:`matplotlib.figure.Figure` with an Agg canvas and never touch
pyplot, so the library neither changes the user's backend nor keeps figures alive in pyplot's
registry. The overview is drawn by :mod:`slicer.outputs.sheet` as one picture.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np
import xarray as xr
from matplotlib import colormaps
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import Colormap, Normalize
from matplotlib.figure import Figure
from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

from slicer.core.atomic import atomic_path
from slicer.core.conventions import DEPTH, UNITS
from slicer.core.errors import OutputError, SettingsError
from slicer.outputs.cube import cube_crs, cube_transform, slice_axis
from slicer.outputs.sheet import PANEL_INCHES, _decimals, _length_label, _nice_length, draw_sheet

#: Colour of cells without data: a neutral grey that none of the usual sequential maps use.
NODATA_COLOUR = "#d4d4d4"

#: Coordinates at least this large (m) are plotted relative to the grid corner.
_RELATIVE_FROM = 10_000.0

#: Longest side of a panel as drawn, cells; larger slices are decimated (every k-th cell).
MAX_PANEL_CELLS = 1000

#: Most cells drawn over all panels of a sheet (about 64 MB of float32); many slices are
#: drawn coarser than MAX_PANEL_CELLS, still finer than their few hundred pixels on paper.
MAX_SHEET_CELLS = 16_000_000

#: Cells drawn per pixel of a saved panel at most: more would be averaged away by the
#: renderer, at the cost of memory and time.
_CELLS_PER_PIXEL = 2

#: Most values the shared colour limits are computed from (a strided subsample beyond).
MAX_SAMPLE_VALUES = 1_000_000


def _colormap(cmap: str | Colormap) -> Colormap:
    try:
        base = colormaps[cmap] if isinstance(cmap, str) else cmap
    except KeyError:
        raise SettingsError(f"unknown colormap {cmap!r}", where="cmap") from None
    return base.with_extremes(bad=NODATA_COLOUR)


def _check_percentile(percentile) -> tuple[float, float]:
    lo, hi = (float(p) for p in percentile)
    if not (0 <= lo < hi <= 100):
        raise SettingsError(f"percentiles must satisfy 0 <= low < high <= 100, got {percentile}",
                            where="percentile")
    return lo, hi


def panel_stride(cube: xr.DataArray, *, dpi: float | None = None) -> int:
    """Return the decimation k of the overview panels of ``cube`` (every k-th row and column).

    The long side of a panel keeps at most :data:`MAX_PANEL_CELLS` cells, all panels of the
    sheet together at most :data:`MAX_SHEET_CELLS`, and, when ``dpi`` is given, at most two
    cells per pixel of the saved panel (3 inches on its long side).
    """
    n, ny, nx = cube.shape
    longest = min(MAX_PANEL_CELLS, math.isqrt(MAX_SHEET_CELLS // max(n, 1)))
    if dpi is not None:
        longest = min(longest, math.ceil(_CELLS_PER_PIXEL * PANEL_INCHES * float(dpi)))
    return max(1, math.ceil(max(ny, nx) / max(longest, 1)))


def _sample_stride(n_values: int) -> int:
    # Stride along both plan axes that brings n_values down to MAX_SAMPLE_VALUES or fewer.
    return max(1, math.ceil(math.sqrt(n_values / MAX_SAMPLE_VALUES)))


def _panel(cube: xr.DataArray, index: int, stride: int) -> np.ndarray:
    # Strided selection of one slice: a dask-backed cube computes this slice's chunks only.
    return np.asarray(cube.data[index, ::stride, ::stride], dtype=np.float32)


def _limits(samples: list[np.ndarray], percentile) -> tuple[float, float]:
    lo, hi = _check_percentile(percentile)
    finite = np.concatenate([s[np.isfinite(s)].astype(np.float64).ravel() for s in samples])
    if finite.size == 0:
        return 0.0, 1.0
    vmin, vmax = (float(v) for v in np.percentile(finite, [lo, hi]))
    if vmax <= vmin:
        pad = abs(vmin) * 0.01 or 1.0
        vmin, vmax = vmin - pad, vmax + pad
    return vmin, vmax


def sample_stride(cube: xr.DataArray, *, dpi: float | None = None) -> int:
    """Return the plan stride s of the colour-limit subsample ``cube[:, ::s, ::s]``.

    s is the panel stride (:func:`panel_stride`, with the same ``dpi``) times the smallest
    whole number that leaves at most :data:`MAX_SAMPLE_VALUES` of the drawn cells, so the
    sample is a subset of the cells drawn; s is 1 (every value) for small cubes.
    """
    d = panel_stride(cube, dpi=dpi)
    n, ny, nx = cube.shape
    k = _sample_stride(n * math.ceil(ny / d) * math.ceil(nx / d))
    return d * k


def shared_limits(cube: xr.DataArray, percentile: tuple[float, float] = (2, 98)
                  ) -> tuple[float, float]:
    """Return (vmin, vmax): percentiles over the finite values of all slices of ``cube``.

    Large cubes are sampled on a regular grid, every s-th row and column of every slice
    (:func:`sample_stride` without ``dpi``), so at most about :data:`MAX_SAMPLE_VALUES`
    values are read,
    even from a dask-backed cube larger than memory. Falls back to (0, 1) for a cube with no
    finite value and widens a zero-width range, so the colour scale is always usable.
    """
    _check_percentile(percentile)
    stride = sample_stride(cube)
    return _limits([np.asarray(cube.data[:, ::stride, ::stride], dtype=np.float32)],
                   percentile)


def range_labels(cube: xr.DataArray) -> list[str]:
    """Return one label per slice with its window, e.g. ``"0.30-0.40 m"`` or ``"10.0-12.5 ns"``."""
    axis = slice_axis(cube)
    tops = cube[f"{axis}_top"].values
    bottoms = cube[f"{axis}_bottom"].values
    low, high = (2, 4) if axis == DEPTH else (1, 3)
    d = _decimals(np.concatenate([tops, bottoms]), low, high)
    return [f"{t:.{d}f}-{b:.{d}f} {UNITS[axis]}" for t, b in zip(tops, bottoms, strict=True)]


class _Frame:
    """Plot extent of a cube, relative to its south-west corner when coordinates are large.

    UTM coordinates have six or seven digits; ticks relative to the corner stay short and the
    corner goes into the axis label instead.
    """

    def __init__(self, cube: xr.DataArray):
        t = cube_transform(cube)
        self.ny, self.nx = ny, nx = cube.shape[1:]
        self.cell = t.a
        self.width = nx * self.cell
        self.height = ny * self.cell
        west, south = t.c, t.f - ny * self.cell
        large = max(abs(west), abs(south), abs(west + self.width), abs(t.f)) >= _RELATIVE_FROM
        self.x0, self.y0 = (west, south) if large else (0.0, 0.0)
        self.extent = (west - self.x0, west - self.x0 + self.width,
                       south - self.y0, south - self.y0 + self.height)

    @staticmethod
    def _label(word: str, origin: float) -> str:
        return f"{word} - {origin:.10g} (m)" if origin else f"{word} (m)"

    def xlabel(self) -> str:
        return self._label("easting", self.x0)

    def ylabel(self) -> str:
        return self._label("northing", self.y0)


def _decorate(ax: Axes, frame: _Frame) -> None:
    length = _nice_length(frame.width)
    bar = AnchoredSizeBar(ax.transData, length, _length_label(length), loc="lower left",
                          pad=0.4, borderpad=0.4, sep=3, frameon=True,
                          size_vertical=frame.height / 80, fontproperties={"size": 7})
    bar.patch.set_alpha(0.7)
    ax.add_artist(bar)
    # Arrow towards +y: grid north, which is what a north-up raster shows.
    ax.annotate("N", xy=(0.92, 0.95), xycoords="axes fraction", xytext=(0, -26),
                textcoords="offset points", ha="center", va="center", fontsize=8, fontweight="bold",
                arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.2},
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.7})


def _draw(ax: Axes, panel: np.ndarray, stride: int, frame: _Frame, cmap: Colormap,
          norm: Normalize, label: str):
    ax.set_facecolor(NODATA_COLOUR)
    # A decimated panel holds every stride-th cell; each drawn pixel covers stride x stride
    # cells from its sample, so the last row and column may reach past the grid's edge and
    # are clipped to the grid's extent below.
    west, _, _, north = frame.extent
    rows, cols = panel.shape
    extent = (west, west + cols * stride * frame.cell, north - rows * stride * frame.cell, north)
    image = ax.imshow(panel, extent=extent, origin="upper", cmap=cmap, norm=norm,
                      interpolation="nearest")
    ax.set_xlim(frame.extent[:2])
    ax.set_ylim(frame.extent[2:])
    ax.set_aspect("equal")
    ax.set_title(label, fontsize=9)
    ax.tick_params(labelsize=7)
    return image


def _sheet_title(cube: xr.DataArray, title: str | None) -> str:
    axis = slice_axis(cube)
    crs = cube_crs(cube)
    if crs is None:
        where = "local grid (no CRS)"
    else:
        code = crs.to_epsg()
        where = f"{crs.name} (EPSG:{code})" if code else crs.name
    parts = [where, f"cell {cube.attrs.get('cell_size', float('nan')):g} m"]
    velocity = cube.attrs.get("velocity")
    if velocity is not None:
        parts.append(f"velocity {float(velocity):.4g} m/ns")
    head = title or f"{cube.name or 'envelope'} {axis} slices"
    return f"{head}\n" + ", ".join(parts)


def _quantity(cube: xr.DataArray) -> str:
    units = cube.attrs.get("units", "")
    name = str(cube.name or "value")
    # "1" is the CF/UDUNITS spelling of a dimensionless quantity.
    return f"{name} ({'dimensionless' if units in ('', '1') else units})"


def plot_overview(cube: xr.DataArray, path: str | os.PathLike | None = None, *,
                  title: str | None = None, cmap: str | Colormap | None = None,
                  percentile: tuple[float, float] = (2, 98),
                  max_columns: int | None = None, dpi: float = 150,
                  panels: list[np.ndarray] | None = None) -> Figure:
    """Draw every slice of ``cube`` on one sheet with one shared colour scale.

    Panels are laid out in a grid of about ``sqrt(n_slices)`` columns, titled with their window
    (``"0.30-0.40 m"``), with equal aspect and axes in metres (relative to the grid's south-west
    corner, given in the axis labels, when coordinates are as large as UTM ones). Cells
    without data show as light grey. The first panel carries a scale bar and a north arrow;
    the arrow points to grid north (+y), which for a projected CRS differs from true north by
    the meridian convergence (up to a few degrees away from the central meridian).

    The panels are colour-mapped into one picture laid out in whole pixels of the sheet at
    ``dpi`` (:mod:`slicer.outputs.sheet`), each pixel showing its nearest drawn cell; tick
    labels are written beside the panels on the sheet's left and bottom edges. The returned
    figure may be saved at another resolution (the picture is then resampled to the nearest
    pixel); one Axes holds the colour bar (label ``"<colorbar>"``).

    A dask-backed cube (e.g. from :func:`slicer.outputs.zarr_store.open_cube_zarr`) is never loaded
    whole: large slices are drawn decimated (every k-th row and column, :func:`panel_stride`:
    at most :data:`MAX_PANEL_CELLS` cells and two cells per saved pixel along a side), one
    slice computed at a time, and the colour limits come from a regular subsample of the drawn
    cells (:func:`sample_stride`).

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`slicer.outputs.cube.new_cube`, in memory or dask-backed.
    path : path-like, optional
        Save the figure here, atomically (format from the suffix; PNG by default).
    title : str, optional
        First line of the sheet title; the CRS, cell size and velocity follow.
    cmap : str or Colormap, optional
        Colour map of the values; default viridis (perceptually uniform), or for a signed
        cube (named ``signed_...``) the diverging PuOr_r, centred on zero.
    percentile : (float, float)
        Percentiles (0-100) of the finite values (all of them, or the subsample of
        :func:`sample_stride` for large cubes) setting the colour limits; a signed cube's
        limits are then made symmetric about zero (the larger of the two).
    max_columns : int, optional
        Upper bound on the number of panel columns.
    dpi : float
        Resolution of the saved image, dots per inch; it also bounds the cells drawn.
    panels : list of numpy.ndarray, optional
        The decimated slices, if already at hand: ``cube.data[i, ::k, ::k]`` for every slice
        ``i``, with ``k = panel_stride(cube, dpi=dpi)`` (a writer that saw every tile go by
        keeps them, so the cube need not be read again).

    Returns
    -------
    matplotlib.figure.Figure
        The sheet (with an Agg canvas attached).

    Raises
    ------
    SettingsError
        If ``cmap``, ``percentile`` or ``max_columns`` is invalid.
    OutputError
        If ``path`` cannot be written; an existing file is then left as it was.
    """
    slice_axis(cube)  # refuses anything that is not a cube
    n_slices = cube.shape[0]
    ncols = math.ceil(math.sqrt(n_slices))
    if max_columns is not None:
        if int(max_columns) < 1:
            raise SettingsError(f"max_columns must be >= 1, got {max_columns}",
                                where="max_columns")
        ncols = min(ncols, int(max_columns))
    frame = _Frame(cube)
    signed = str(cube.name or "").startswith("signed")
    colours = _colormap(cmap if cmap is not None else ("PuOr_r" if signed else "viridis"))
    _check_percentile(percentile)
    if not (math.isfinite(float(dpi)) and float(dpi) > 0):
        raise SettingsError(f"dpi must be a positive number, got {dpi}", where="dpi")
    # One pass over the data: the decimated panels, and the colour limits from a regular
    # subsample of them (sample_stride).
    stride = panel_stride(cube, dpi=dpi)
    if panels is None:
        drawn = [_panel(cube, i, stride) for i in range(n_slices)]
    else:
        drawn = [np.asarray(p, dtype=np.float32) for p in panels]
        expected = (math.ceil(cube.shape[1] / stride), math.ceil(cube.shape[2] / stride))
        if len(drawn) != n_slices or any(p.shape != expected for p in drawn):
            raise SettingsError(f"panels must be {n_slices} arrays of {expected} cells "
                                f"(every {stride}th cell)", where="panels")
    k = sample_stride(cube, dpi=dpi) // stride
    vmin, vmax = _limits([p[::k, ::k] for p in drawn], percentile)
    if signed:  # zero, the sign change, sits at the middle of the diverging map
        vmax = max(abs(vmin), abs(vmax))
        vmin = -vmax
    norm = Normalize(vmin=vmin, vmax=vmax)
    figure = draw_sheet(drawn, stride=stride, frame=frame, labels=range_labels(cube),
                        ncols=ncols, colours=colours, norm=norm, dpi=dpi,
                        title=_sheet_title(cube, title), quantity=_quantity(cube))
    if path is not None:
        save_figure(figure, path, dpi=dpi)
    return figure


def save_figure(figure: Figure, path: str | os.PathLike, *, dpi: float) -> Path:
    """Save ``figure`` to ``path`` atomically (format from the suffix, PNG by default).

    PNG is written at zlib level 1: a sheet of noisy slices hardly compresses further, and the
    default level took longer than drawing it.

    Raises
    ------
    OutputError
        If the file cannot be written; an existing file is then left as it was.
    """
    path = Path(path)
    fmt = path.suffix.lstrip(".").lower() or "png"
    try:
        with atomic_path(path) as tmp:
            extra = {"pil_kwargs": {"compress_level": 1}} if fmt == "png" else {}
            figure.savefig(tmp, format=fmt, dpi=dpi, **extra)
    except OSError as exc:
        raise OutputError(f"cannot save figure ({exc})", where=str(path)) from None
    return path


def plot_slice(cube: xr.DataArray, index: int, ax: Axes | None = None, *,
               cmap: str | Colormap = "viridis", vmin: float | None = None,
               vmax: float | None = None, percentile: tuple[float, float] = (2, 98),
               colorbar: bool = True) -> Axes:
    """Draw one slice of ``cube`` on ``ax`` (a new Agg figure when omitted).

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`slicer.outputs.cube.new_cube`.
    index : int
        Position of the slice along the slice dimension.
    ax : matplotlib.axes.Axes, optional
        Where to draw; by default a new figure is made (show it with ``ax.figure``).
    cmap : str or Colormap
        Colour map of the values; cells without data show as light grey.
    vmin, vmax : float, optional
        Colour limits; by default the ``percentile`` range of this slice's finite values
        (of the drawn cells, subsampled beyond :data:`MAX_SAMPLE_VALUES`).
    percentile : (float, float)
        Percentiles (0-100) used for limits not given.
    colorbar : bool
        Add a colorbar labelled with the quantity and units.

    Returns
    -------
    matplotlib.axes.Axes
        The axes drawn on, with a scale bar and a north arrow (to grid north, +y; see
        :func:`plot_overview`).
    """
    slice_axis(cube)  # refuses anything that is not a cube
    n_slices = cube.shape[0]
    if not -n_slices <= int(index) < n_slices:
        raise SettingsError(f"slice index {index} outside 0..{n_slices - 1}", where="index")
    index = int(index) % n_slices
    if ax is None:
        figure = Figure(figsize=(5.5, 4.5), layout="constrained")
        FigureCanvasAgg(figure)
        ax = figure.add_subplot()
    stride = panel_stride(cube)
    panel = _panel(cube, index, stride)
    k = _sample_stride(panel.size)
    lo, hi = _limits([panel[::k, ::k]], percentile)
    norm = Normalize(vmin=lo if vmin is None else vmin, vmax=hi if vmax is None else vmax)
    frame = _Frame(cube)
    image = _draw(ax, panel, stride, frame, _colormap(cmap), norm, range_labels(cube)[index])
    ax.set_xlabel(frame.xlabel(), fontsize=8)
    ax.set_ylabel(frame.ylabel(), fontsize=8)
    _decorate(ax, frame)
    if colorbar:
        ax.figure.colorbar(image, ax=ax, extend="both").set_label(_quantity(cube))
    return ax
