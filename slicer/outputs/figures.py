"""The overview: every slice of a cube side by side, on pages of a readable size.

Figures are built on :class:`matplotlib.figure.Figure` with an Agg canvas and never touch
pyplot, so the library neither changes the user's backend nor keeps figures alive in pyplot's
registry. Each page is drawn by :mod:`slicer.outputs.sheet` as one picture; its colours follow a
:class:`slicer.outputs.display.Display` (colour map, shared or per-slice stretch, clip).
"""

from __future__ import annotations

import contextlib
import math
import os
from pathlib import Path

import numpy as np
import xarray as xr
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import Colormap, Normalize
from matplotlib.figure import Figure
from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

from slicer.core.atomic import atomic_path
from slicer.core.errors import OutputError, SettingsError
from slicer.core.numbers import real
from slicer.outputs.cube import slice_axis
from slicer.outputs.display import (
    DEFAULT_CLIP,
    NODATA_COLOUR,
    Display,
    display_from,
)
from slicer.outputs.display_panels import (
    MAX_PANEL_CELLS,
    MAX_SAMPLE_VALUES,
    MAX_SHEET_CELLS,
    PER_PAGE,
    Frame,
    drawn_cells,
    page_paths,
    panel_stride,
    range_labels,
    sample_count_stride,
    sample_stride,
)
from slicer.outputs.overview_plan import (
    OverviewPlan,
    _check_per_page,
    _columns,
    _quantity,
)
from slicer.outputs.sheet import draw_sheet
from slicer.outputs.sheet_layout import length_label, nice_length


def shared_limits(cube: xr.DataArray, percentile: tuple[float, float] = (2, 98)
                  ) -> tuple[float, float]:
    """Return (vmin, vmax): percentiles over the finite values of all slices of ``cube``.

    Large cubes are sampled on a regular grid, every s-th row and column of every slice
    (:func:`sample_stride` without ``dpi``), so at most about :data:`MAX_SAMPLE_VALUES`
    values are read,
    even from a dask-backed cube larger than memory. Falls back to (0, 1) for a cube with no
    finite value and widens a zero-width range, so the colour scale is always usable.
    """
    stride = sample_stride(cube)
    return Display(clip=percentile).limits(
        np.asarray(cube.data[:, ::stride, ::stride], dtype=np.float32))


def _decorate(ax: Axes, frame: Frame) -> None:
    length = nice_length(frame.width)
    bar = AnchoredSizeBar(ax.transData, length, length_label(length), loc="lower left",
                          pad=0.4, borderpad=0.4, sep=3, frameon=True,
                          size_vertical=frame.height / 80, fontproperties={"size": 7})
    bar.patch.set_alpha(0.7)
    ax.add_artist(bar)
    # Arrow towards +y: grid north, which is what a north-up raster shows.
    ax.annotate("N", xy=(0.92, 0.95), xycoords="axes fraction", xytext=(0, -26),
                textcoords="offset points", ha="center", va="center", fontsize=8, fontweight="bold",
                arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.2},
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.7})


def _draw(ax: Axes, panel: np.ndarray, stride: int, frame: Frame, cmap: Colormap,
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


def _sheet(overview: OverviewPlan, start: int, stop: int, *, ncols: int,
           nrows: int | None = None, page: tuple[int, int] | None = None) -> Figure:
    """The figure of slices ``start:stop``; ``page`` = (number, count) when paged."""
    return draw_sheet(overview.drawn[start:stop], **overview.page(start, stop, page=page),
                      ncols=ncols, nrows=nrows)


def overview_pages(cube: xr.DataArray, *, colormap=None, stretch: str = "shared",
                   clip: tuple[float, float] = DEFAULT_CLIP, per_page: int = PER_PAGE,
                   title: str | None = None, max_columns: int | None = None,
                   dpi: float = 150, panels: list[np.ndarray] | None = None):
    """The pages of the overview of ``cube``: an iterator drawing one figure at a time.

    The arguments are those of :func:`plot_overview`, checked (and the cube's panels read)
    before this returns. Every page has the same grid of panels (the last may leave places
    empty), so all pages have the same size; with more than one page each says
    ``"page i of n"`` at its top right and which slices it holds in its title.
    """
    overview = OverviewPlan(cube, display_from(colormap, stretch, clip), title=title, dpi=dpi,
                            panels=panels)
    ncols, nrows, pages = overview.pages(per_page, max_columns)
    return (_sheet(overview, start, stop, ncols=ncols, nrows=nrows, page=page)
            for start, stop, page in pages)


def plot_overview(cube: xr.DataArray, path: str | os.PathLike | None = None, *,
                  colormap=None, stretch: str = "shared",
                  clip: tuple[float, float] = DEFAULT_CLIP, per_page: int = PER_PAGE,
                  title: str | None = None, max_columns: int | None = None, dpi: float = 150,
                  panels: list[np.ndarray] | None = None, cmap=None, percentile=None):
    """Draw every slice of ``cube`` side by side; with ``path``, write it as numbered pages.

    Panels are laid out in rows of about ``sqrt(panels on a page)`` columns, in reading
    order, titled with their window (``"0.30-0.40 m"``), with equal aspect and axes in metres
    (relative to the grid's south-west corner, given in the axis labels, when coordinates are
    as large as UTM ones); tick labels are written on the page's left and bottom edges only.
    Cells without data show as light grey. The first panel of each page carries a scale bar
    and a north arrow (black with a white halo); the arrow points to grid north (+y), which
    for a projected CRS differs from true north by the meridian convergence (up to a few
    degrees away from the central meridian). A colour bar with the quantity and its units
    stands beside the panels.

    The panels are colour-mapped into one picture laid out in whole pixels of the page at
    ``dpi`` (:mod:`slicer.outputs.sheet`), each pixel showing its nearest drawn cell. A
    dask-backed cube (e.g. from :func:`slicer.outputs.zarr_store.open_cube_zarr`) is never
    loaded whole: large slices are drawn decimated (every k-th row and column,
    :func:`panel_stride`: at most :data:`MAX_PANEL_CELLS` cells and two cells per saved pixel
    along a side), one slice computed at a time, and shared colour limits come from a regular
    subsample of the drawn cells (:func:`sample_stride`).

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`slicer.outputs.cube.new_cube`, in memory or dask-backed.
    path : path-like, optional
        Write the pages here (format from the suffix; PNG by default): one page as ``path``
        itself, more as ``<stem>-01<suffix>``, ``<stem>-02<suffix>``, ... (:func:`page_paths`).
        Each file is written atomically, and none is renamed into place until all are drawn.
        Without ``path`` the overview is returned as one figure of every slice, whatever
        ``per_page`` says (see :func:`overview_pages` for the pages in memory).
    colormap : str or Colormap, optional
        Any matplotlib colour map; by default viridis (perceptually uniform), or for a
        signed cube (named ``signed_...``) the diverging PuOr_r, centred on zero.
        ``"gray"`` (or ``"greyscale"``) draws in grey. See :class:`Display`.
    stretch : {"shared", "per-slice"}
        ``"shared"``: one colour range for all slices, taken over the whole cube (not page
        by page), so colours compare across pages; ``"per-slice"``: each slice on its own
        range, written above its panel, the colour bar reading percentiles of each slice.
    clip : (float, float)
        Percentiles (0-100) of the finite values (all of them, or the subsample of
        :func:`sample_stride` for large cubes) at the two ends of the colour map; a signed
        cube's limits are then made symmetric about zero (the larger of the two).
    per_page : int
        Most panels on a page, :data:`PER_PAGE` (12, 4 x 3) by default.
    title : str, optional
        First line of each page's title; the CRS, cell size and velocity follow.
    max_columns : int, optional
        Upper bound on the number of panel columns.
    dpi : float
        Resolution of the saved pages, dots per inch; it also bounds the cells drawn.
    panels : list of numpy.ndarray, optional
        The decimated slices, if already at hand: ``cube.data[i, ::k, ::k]`` for every slice
        ``i``, with ``k = panel_stride(cube, dpi=dpi)`` (a writer that saw every tile go by
        keeps them, so the cube need not be read again).
    cmap, percentile : optional
        Older names of ``colormap`` and ``clip``.

    Returns
    -------
    list of pathlib.Path or matplotlib.figure.Figure
        With ``path``: the pages written, in order. Without: the figure of every slice on
        one sheet (with an Agg canvas attached); one Axes holds the colour bar (label
        ``"<colorbar>"``).

    Raises
    ------
    SettingsError
        If a display setting, ``per_page``, ``max_columns``, ``dpi`` or ``panels`` is invalid.
    OutputError
        If a page cannot be written; existing files are then left as they were.
    """
    display = display_from(colormap, stretch, clip, cmap=cmap, percentile=percentile)
    if path is None:
        overview = OverviewPlan(cube, display, title=title, dpi=dpi, panels=panels)
        return _sheet(overview, 0, overview.n, ncols=_columns(overview.n, max_columns))
    pages = overview_pages(cube, per_page=per_page, title=title, max_columns=max_columns,
                           dpi=dpi, panels=panels, **display.options())
    paths = page_paths(path, math.ceil(cube.shape[0] / _check_per_page(per_page)))
    with contextlib.ExitStack() as stack:  # every page renamed into place only at the end
        for figure, target in zip(pages, paths, strict=True):
            _save(figure, stack.enter_context(atomic_path(target)), dpi=dpi, where=target)
    return paths


def figure_format(path: str | os.PathLike) -> str:
    """The format matplotlib writes ``path`` in, from its suffix (PNG when it has none).

    Raises
    ------
    OutputError
        If matplotlib writes no such format (a name ending in ``.txt``, say).
    """
    from matplotlib.backend_bases import FigureCanvasBase
    fmt = Path(path).suffix.lstrip(".").lower() or "png"
    known = FigureCanvasBase.get_supported_filetypes()
    if fmt not in known:
        raise OutputError(f"cannot draw a figure as .{fmt}; give a name ending in "
                          f"{', '.join('.' + k for k in sorted(known))}", where=str(path))
    return fmt


def _save(figure: Figure, tmp: Path, *, dpi: float, where: Path) -> None:
    fmt = figure_format(where)
    extra = {"pil_kwargs": {"compress_level": 1}} if fmt == "png" else {}
    try:
        figure.savefig(tmp, format=fmt, dpi=dpi, **extra)
    except OSError as exc:
        raise OutputError(f"cannot save figure ({exc})", where=str(where)) from None


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
    try:
        with atomic_path(path) as tmp:
            _save(figure, tmp, dpi=dpi, where=path)
    except OSError as exc:  # atomic_path's own rename
        raise OutputError(f"cannot save figure ({exc})", where=str(path)) from None
    return path


def plot_slice(cube: xr.DataArray, index: int, *, ax: Axes | None = None,
               colormap=None, clip: tuple[float, float] = DEFAULT_CLIP,
               vmin: float | None = None, vmax: float | None = None, colorbar: bool = True,
               cmap=None, percentile=None) -> Axes:
    """Draw one slice of ``cube`` on ``ax`` (a new Agg figure when omitted).

    Parameters
    ----------
    cube : xarray.DataArray
        A cube as built by :func:`slicer.outputs.cube.new_cube`.
    index : int
        Position of the slice along the slice dimension.
    ax : matplotlib.axes.Axes, optional
        Where to draw; by default a new figure is made (show it with ``ax.figure``).
    colormap : str or Colormap, optional
        Colour map of the values, as in :func:`plot_overview`; cells without data show as
        light grey.
    clip : (float, float)
        Percentiles (0-100) of this slice's finite values (of the drawn cells, subsampled
        beyond :data:`MAX_SAMPLE_VALUES`) setting the limits not given; symmetric about zero
        for a signed cube.
    vmin, vmax : float, optional
        Colour limits.
    colorbar : bool
        Add a colorbar labelled with the quantity and units.
    cmap, percentile : optional
        Older names of ``colormap`` and ``clip``.

    Returns
    -------
    matplotlib.axes.Axes
        The axes drawn on, with a scale bar and a north arrow (to grid north, +y; see
        :func:`plot_overview`).
    """
    slice_axis(cube)  # refuses anything that is not a cube
    n_slices = cube.shape[0]
    number = real(index, where="index")
    if not number.is_integer():
        raise SettingsError(f"a slice index is a whole number, got {index!r:.60}", where="index")
    index = int(number)
    vmin, vmax = (None if v is None else real(v, where=w) for v, w in ((vmin, "vmin"),
                                                                         (vmax, "vmax")))
    if not -n_slices <= int(index) < n_slices:
        raise SettingsError(f"slice index {index} outside 0..{n_slices - 1}", where="index")
    index = int(index) % n_slices
    if ax is None:
        figure = Figure(figsize=(5.5, 4.5), layout="constrained")
        FigureCanvasAgg(figure)
        ax = figure.add_subplot()
    stride = panel_stride(cube)
    panel = drawn_cells(cube, index, stride)
    k = sample_count_stride(panel.size)
    display = display_from(colormap, "shared", clip, cmap=cmap, percentile=percentile)
    signed = str(cube.name or "").startswith("signed")
    lo, hi = display.limits(panel[::k, ::k], signed=signed)
    norm = Normalize(vmin=lo if vmin is None else vmin, vmax=hi if vmax is None else vmax)
    frame = Frame(cube)
    image = _draw(ax, panel, stride, frame, display.colours(signed=signed), norm,
                  range_labels(cube)[index])
    ax.set_xlabel(frame.xlabel(), fontsize=8)
    ax.set_ylabel(frame.ylabel(), fontsize=8)
    _decorate(ax, frame)
    if colorbar:
        ax.figure.colorbar(image, ax=ax, extend="both").set_label(_quantity(cube))
    return ax


__all__ = ["MAX_PANEL_CELLS", "MAX_SAMPLE_VALUES", "MAX_SHEET_CELLS", "NODATA_COLOUR", "PER_PAGE",
           "overview_pages", "page_paths", "panel_stride", "plot_overview", "plot_slice",
           "range_labels", "sample_stride", "save_figure", "shared_limits"]
