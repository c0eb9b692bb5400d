"""The overview sheet: every slice of a cube side by side on one shared colour scale.

Figures are built on :class:`matplotlib.figure.Figure` with an Agg canvas and never touch
pyplot, so the library neither changes the user's backend nor keeps figures alive in pyplot's
registry.
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

from ._atomic import atomic_path
from ._conventions import DEPTH, UNITS
from ._cube import cube_crs, cube_transform, slice_axis
from ._errors import OutputError, SettingsError

#: Colour of cells without data: a neutral grey that none of the usual sequential maps use.
NODATA_COLOUR = "#d4d4d4"

#: Panel edge, inches, along the longer side of the grid.
_PANEL_INCHES = 3.0

#: Coordinates at least this large (m) are plotted relative to the grid corner.
_RELATIVE_FROM = 10_000.0


def _colormap(cmap: str | Colormap) -> Colormap:
    try:
        base = colormaps[cmap] if isinstance(cmap, str) else cmap
    except KeyError:
        raise SettingsError(f"unknown colormap {cmap!r}", where="cmap") from None
    return base.with_extremes(bad=NODATA_COLOUR)


def shared_limits(cube: xr.DataArray, percentile: tuple[float, float] = (2, 98)
                  ) -> tuple[float, float]:
    """Return (vmin, vmax): percentiles over all finite values of all slices of ``cube``.

    Falls back to (0, 1) for a cube with no finite value and widens a zero-width range, so the
    colour scale is always usable.
    """
    lo, hi = (float(p) for p in percentile)
    if not (0 <= lo < hi <= 100):
        raise SettingsError(f"percentiles must satisfy 0 <= low < high <= 100, got {percentile}",
                            where="percentile")
    values = np.asarray(cube.values, dtype=np.float64)
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return 0.0, 1.0
    vmin, vmax = (float(v) for v in np.percentile(finite, [lo, hi]))
    if vmax <= vmin:
        pad = abs(vmin) * 0.01 or 1.0
        vmin, vmax = vmin - pad, vmax + pad
    return vmin, vmax


def _decimals(values: np.ndarray, low: int, high: int) -> int:
    # Fewest decimals (within [low, high]) that show every window bound exactly.
    for d in range(low, high + 1):
        if np.allclose(np.round(values, d), values, rtol=0, atol=1e-9):
            return d
    return high


def range_labels(cube: xr.DataArray) -> list[str]:
    """Return one label per slice with its window, e.g. ``"0.30-0.40 m"`` or ``"10.0-12.5 ns"``."""
    axis = slice_axis(cube)
    tops = cube[f"{axis}_top"].values
    bottoms = cube[f"{axis}_bottom"].values
    low, high = (2, 4) if axis == DEPTH else (1, 3)
    d = _decimals(np.concatenate([tops, bottoms]), low, high)
    return [f"{t:.{d}f}-{b:.{d}f} {UNITS[axis]}" for t, b in zip(tops, bottoms, strict=True)]


def _nice_length(width: float) -> float:
    # A 1-2-5 round length close to a fifth of the panel width, for the scale bar.
    target = width / 5
    exponent = math.floor(math.log10(target))
    for step in (5, 2, 1):
        length = step * 10.0**exponent
        if length <= target * 1.25:
            return length
    return 10.0**exponent


def _length_label(length: float) -> str:
    return f"{length * 100:g} cm" if length < 1 else f"{length:g} m"


class _Frame:
    """Plot extent of a cube, relative to its south-west corner when coordinates are large.

    UTM coordinates have six or seven digits; ticks relative to the corner stay short and the
    corner goes into the axis label instead.
    """

    def __init__(self, cube: xr.DataArray):
        t = cube_transform(cube)
        ny, nx = cube.shape[1:]
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


def _draw(ax: Axes, cube: xr.DataArray, index: int, frame: _Frame, cmap: Colormap,
          norm: Normalize, label: str):
    ax.set_facecolor(NODATA_COLOUR)
    image = ax.imshow(np.asarray(cube.values[index], dtype=np.float32), extent=frame.extent,
                      origin="upper", cmap=cmap, norm=norm, interpolation="nearest")
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
                  title: str | None = None, cmap: str | Colormap = "viridis",
                  percentile: tuple[float, float] = (2, 98),
                  max_columns: int | None = None, dpi: float = 150) -> Figure:
    """Draw every slice of ``cube`` on one sheet with one shared colour scale.

    Panels are laid out in a grid of about ``sqrt(n_slices)`` columns, titled with their window
    (``"0.30-0.40 m"``), with equal aspect and axes in metres (relative to the grid's south-west
    corner, given in the axis labels, when coordinates are as large as UTM ones). Cells
    without data show as light grey. The first panel carries a scale bar and a north arrow;
    the arrow points to grid north (+y), which for a projected CRS differs from true north by
    the meridian convergence (up to a few degrees away from the central meridian).

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`slicer._cube.new_cube`.
    path : path-like, optional
        Save the figure here, atomically (format from the suffix; PNG by default).
    title : str, optional
        First line of the sheet title; the CRS, cell size and velocity follow.
    cmap : str or Colormap
        Colour map of the values.
    percentile : (float, float)
        Percentiles (0-100) of all finite values setting the colour limits.
    max_columns : int, optional
        Upper bound on the number of panel columns.
    dpi : float
        Resolution of the saved image, dots per inch.

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
    nrows = math.ceil(n_slices / ncols)
    frame = _Frame(cube)
    colours = _colormap(cmap)
    vmin, vmax = shared_limits(cube, percentile)
    norm = Normalize(vmin=vmin, vmax=vmax)
    aspect = frame.height / frame.width
    panel_w = _PANEL_INCHES if aspect <= 1 else _PANEL_INCHES / aspect
    panel_h = panel_w * aspect
    # Room around each panel for its title, ticks and axis labels, and for the colorbar and
    # the two-line sheet title, so that equal-aspect panels fill their cells.
    figure = Figure(figsize=(ncols * (panel_w + 0.75) + 1.3, nrows * (panel_h + 0.75) + 0.8),
                    layout="constrained")
    FigureCanvasAgg(figure)
    grid = figure.add_gridspec(nrows, ncols)
    panels = []
    image = None
    for i, label in enumerate(range_labels(cube)):
        row, col = divmod(i, ncols)
        ax = figure.add_subplot(grid[row, col])
        image = _draw(ax, cube, i, frame, colours, norm, label)
        if col == 0:
            ax.set_ylabel(frame.ylabel(), fontsize=8)
        if row == nrows - 1 or i + ncols >= n_slices:
            ax.set_xlabel(frame.xlabel(), fontsize=8)
        panels.append(ax)
    _decorate(panels[0], frame)
    bar = figure.colorbar(image, ax=panels, extend="both", shrink=0.8)
    bar.set_label(_quantity(cube))
    figure.suptitle(_sheet_title(cube, title), fontsize=11)
    if path is not None:
        path = Path(path)
        fmt = path.suffix.lstrip(".").lower() or "png"
        try:
            with atomic_path(path) as tmp:
                figure.savefig(tmp, format=fmt, dpi=dpi)
        except OSError as exc:
            raise OutputError(f"cannot save figure ({exc})", where=str(path)) from None
    return figure


def plot_slice(cube: xr.DataArray, index: int, ax: Axes | None = None, *,
               cmap: str | Colormap = "viridis", vmin: float | None = None,
               vmax: float | None = None, percentile: tuple[float, float] = (2, 98),
               colorbar: bool = True) -> Axes:
    """Draw one slice of ``cube`` on ``ax`` (a new Agg figure when omitted).

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`slicer._cube.new_cube`.
    index : int
        Position of the slice along the slice dimension.
    ax : matplotlib.axes.Axes, optional
        Where to draw; by default a new figure is made (show it with ``ax.figure``).
    cmap : str or Colormap
        Colour map of the values; cells without data show as light grey.
    vmin, vmax : float, optional
        Colour limits; by default the ``percentile`` range of this slice's finite values.
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
    lo, hi = shared_limits(cube.isel({cube.dims[0]: [index]}), percentile)
    norm = Normalize(vmin=lo if vmin is None else vmin, vmax=hi if vmax is None else vmax)
    frame = _Frame(cube)
    image = _draw(ax, cube, index, frame, _colormap(cmap), norm, range_labels(cube)[index])
    ax.set_xlabel(frame.xlabel(), fontsize=8)
    ax.set_ylabel(frame.ylabel(), fontsize=8)
    _decorate(ax, frame)
    if colorbar:
        ax.figure.colorbar(image, ax=ax, extend="both").set_label(_quantity(cube))
    return ax
