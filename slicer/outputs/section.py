"""Vertical sections through the cube along a polyline in the survey CRS.

A section samples every slice of the cube at evenly spaced points along a path given by its
vertices (survey CRS, m): the result has dims ``(distance, <slice axis>)``, with the sample
positions ``x``, ``y`` as coordinates along ``distance``, so a wall, a ditch or a dipping layer
can be followed across lines and blocks. Values between cell centres are interpolated
bilinearly (:meth:`xarray.DataArray.interp`); a sample whose four surrounding cells are not all
valid, or that lies off the grid, is NaN, so gaps in the survey stay gaps in the section.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from slicer.core.conventions import X, Y
from slicer.core.errors import SettingsError
from slicer.core.numbers import real
from slicer.outputs.cube import slice_axis
from slicer.outputs.display import DEFAULT_CLIP, display_from, relative_scale

#: The sample dimension along the section.
DISTANCE = "distance"


def _vertices(points) -> np.ndarray:
    try:
        p = np.asarray(points, dtype=float)
    except (TypeError, ValueError):
        raise SettingsError("points must be (x, y) pairs in the survey CRS, m",
                            where="points") from None
    if p.ndim != 2 or p.shape[1] != 2 or p.shape[0] < 2:
        got = f"{p.shape[0]} point" if p.ndim == 2 and p.shape[1] == 2 else f"shape {p.shape}"
        raise SettingsError(f"a path needs two or more (x, y) points, got {got}",
                            where="points")
    if not np.isfinite(p).all():
        raise SettingsError("points must be finite", where="points")
    if (np.hypot(*np.diff(p, axis=0).T) == 0).any():
        raise SettingsError("two consecutive points are the same", where="points")
    return p


#: Samples a section may have along its path (a 1e-9 m spacing had asked for 21 GB).
MAX_SAMPLES = 100_000


def section(cube: xr.DataArray, points, *, spacing: float | None = None) -> xr.DataArray:
    """Cut a vertical section through ``cube`` along the polyline ``points``.

    Parameters
    ----------
    cube : xarray.DataArray
        A cube (dims ``(depth|twt, y, x)``, m), as :func:`slicer.build_cube` returns.
    points : sequence of (x, y)
        The path's vertices in the survey CRS, m; two or more.
    spacing : float, optional, keyword-only
        Distance between samples along the path, m (default: the cube's cell size). Every
        vertex is a sample, so corners are kept.

    Returns
    -------
    xarray.DataArray
        Dims ``(distance, <slice axis>)``: ``distance`` along the path from its first vertex
        (m), ``x`` and ``y`` of each sample, and the cube's slice coordinates; the cube's name,
        units and attrs.

    Raises
    ------
    SettingsError
        Fewer than two points, repeated or non-finite points, a bad spacing, or a path that
        misses the grid entirely.
    """
    axis = slice_axis(cube)
    p = _vertices(points)
    cell = float(abs(cube[X].values[1] - cube[X].values[0])) if cube.sizes[X] > 1 else 1.0
    step = cell if spacing is None else real(spacing, where="spacing")
    if not (math.isfinite(step) and step > 0):
        raise SettingsError(f"must be a positive number of metres, got {spacing!r}",
                            where="spacing")
    total = float(np.sum(np.hypot(*np.diff(p, axis=0).T)))
    if total / step > MAX_SAMPLES:  # each sample a column of the picture: the cells are plenty
        raise SettingsError(f"{step:g} m along a {total:.4g} m path is {total / step:.3g} "
                            f"samples, more than {MAX_SAMPLES:,}; choose at least "
                            f"{total / MAX_SAMPLES:.3g} m", where="spacing")
    xs, ys, ds = [], [], []
    start = 0.0
    for (x0, y0), (x1, y1) in zip(p[:-1], p[1:], strict=True):
        length = math.hypot(x1 - x0, y1 - y0)
        n = max(1, math.ceil(length / step - 1e-9))
        f = np.arange(n) / n
        xs.append(x0 + f * (x1 - x0))
        ys.append(y0 + f * (y1 - y0))
        ds.append(start + f * length)
        start += length
    xs.append([p[-1, 0]])
    ys.append([p[-1, 1]])
    ds.append([start])
    x, y, d = (np.concatenate(a) for a in (xs, ys, ds))
    n_samples = _inside(cube, x, y)
    if not n_samples:
        raise SettingsError("the path misses the cube's grid", where="points")
    where = {X: xr.DataArray(x, dims=DISTANCE), Y: xr.DataArray(y, dims=DISTANCE)}
    out = cube.interp(where, method="linear", assume_sorted=False)
    out = out.assign_coords({DISTANCE: (DISTANCE, d, {"units": "m",
                                                      "long_name": "distance along the section"}),
                             X: (DISTANCE, x, cube[X].attrs), Y: (DISTANCE, y, cube[Y].attrs)})
    out = out.transpose(DISTANCE, axis).astype(cube.dtype)  # interp works in float64
    out.name = cube.name
    # the vertices as one flat array (x1, y1, x2, y2, ...): NetCDF holds it, a list it does not
    out.attrs = {**cube.attrs, "section_vertices": p.ravel().astype(np.float64),
                 "section_samples_on_grid": int(n_samples)}
    return out


def _inside(cube: xr.DataArray, x: np.ndarray, y: np.ndarray) -> int:
    """How many samples lie within the span of the cube's cell centres."""
    cx, cy = cube[X].values, cube[Y].values
    return int(((x >= cx.min()) & (x <= cx.max()) & (y >= cy.min()) & (y <= cy.max())).sum())



def plot_section(sec: xr.DataArray, path=None, *, colormap=None, stretch: str = "shared",
                 clip: tuple[float, float] = DEFAULT_CLIP, dpi: float = 110, cmap=None,
                 percentile=None):
    """Draw a section from :func:`section`: distance along the path (m) against depth (m) or
    two-way time (ns), a colour bar with the values' units, and the path's vertices marked on
    the top edge. Saved atomically to ``path`` when given; returns the Figure.

    ``colormap``, ``stretch`` and ``clip`` are those of
    :func:`slicer.outputs.figures.plot_overview` (:class:`slicer.outputs.display.Display`),
    so a section matches the overview of its cube: ``"shared"`` takes one colour range over
    the whole section, ``"per-slice"`` one range for each depth (or time) of it, the colour
    bar then reading percentiles of each row. ``cmap`` and ``percentile`` are older names of
    ``colormap`` and ``clip``.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.colors import Normalize
    from matplotlib.figure import Figure

    from slicer.outputs.figures import save_figure
    display = display_from(colormap, stretch, clip, cmap=cmap, percentile=percentile)
    signed = str(sec.name or "").startswith("signed")
    axis = [d for d in sec.dims if d != DISTANCE][0]
    values = np.asarray(sec.transpose(axis, DISTANCE).values, dtype=np.float32)
    if not np.isfinite(values).any():
        raise SettingsError("the section holds no value (it crosses no surveyed cell)",
                            where="points")
    if display.per_slice:  # each row to 0-1 of its own range
        limits = np.array([display.limits(row, signed=signed) for row in values])
        values = (values - limits[:, :1]) / (limits[:, 1:] - limits[:, :1])
        norm = Normalize(0.0, 1.0)
    else:
        norm = Normalize(*display.limits(values, signed=signed))
    d = sec[DISTANCE].values
    z = sec[axis].values
    figure = Figure(figsize=(9.0, 4.2), dpi=dpi)
    FigureCanvasAgg(figure)
    ax = figure.add_axes((0.08, 0.14, 0.76, 0.72))
    shown = ax.imshow(values, aspect="auto", cmap=display.colours(signed=signed), norm=norm,
                      extent=(d[0], d[-1], z[-1], z[0]), interpolation="nearest")
    ax.set_xlabel("distance along the section (m)")
    ax.set_ylabel({"depth": "depth (m)", "twt": "two-way time (ns)"}.get(
        axis, f"elevation above {sec.attrs.get('vertical_datum', 'the datum')} (m)"))
    vertices = np.asarray(sec.attrs.get("section_vertices", []), dtype=float).reshape(-1, 2)
    if len(vertices) > 2:  # corners of the path, marked where the distance turns
        corners = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(vertices, axis=0).T))])
        ax.plot(corners[1:-1], np.full(len(corners) - 2, z[0]), "v", color="0.2",
                clip_on=False, transform=ax.transData)
    bar = figure.colorbar(shown, cax=figure.add_axes((0.88, 0.14, 0.015, 0.72),
                                                     label="<colorbar>"))
    units = str(sec.attrs.get("units", "")) or "value"
    if display.per_slice:
        ticks, labels, caption = relative_scale(display, signed=signed)
        bar.set_ticks(ticks, labels=labels)
        units = f"{units}, {caption.replace('slice', {'twt': 'time'}.get(axis, axis))}"
    bar.set_label(units)
    start, end = vertices[0] if len(vertices) else (np.nan, np.nan), vertices[-1] if len(
        vertices) else (np.nan, np.nan)
    figure.text(0.08, 0.95, f"section from ({start[0]:.2f}, {start[1]:.2f}) to "
                f"({end[0]:.2f}, {end[1]:.2f}) m, {len(vertices)} points", fontsize=9,
                va="top")
    if path is not None:
        save_figure(figure, path, dpi=dpi)
    return figure


__all__ = ["DISTANCE", "plot_section", "section"]
