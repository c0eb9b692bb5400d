"""What every page of an overview shares, planned before any page is drawn: the decimated
panels, their colours and labels, the titles and the pages' grid. No figure machinery, so both
the matplotlib sheet (:mod:`slicer.outputs.figures`) and a build's NumPy pages
(:mod:`slicer.outputs.sheet_png`) start from it."""

from __future__ import annotations

import math

import numpy as np
import xarray as xr
from matplotlib.colors import Normalize

from slicer.core.errors import SettingsError
from slicer.outputs.cube import cube_crs, slice_axis
from slicer.outputs.display import Display, relative_scale
from slicer.outputs.display_panels import (
    Frame,
    drawn_cells,
    panel_stride,
    range_labels,
    sample_stride,
)
from slicer.outputs.sheet_layout import Scale


def _sheet_title(cube: xr.DataArray, title: str | None, which: str = "") -> str:
    # which: the slices of this page, e.g. " 13-24 of 120"
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
    return f"{head}{which}\n" + ", ".join(parts)


def _quantity(cube: xr.DataArray) -> str:
    units = cube.attrs.get("units", "")
    name = str(cube.name or "value")
    # "1" is the CF/UDUNITS spelling of a dimensionless quantity.
    return f"{name} ({'dimensionless' if units in ('', '1') else units})"


def _units(cube: xr.DataArray) -> str:
    units = str(cube.attrs.get("units", ""))
    return "" if units in ("", "1") else f" {units}"


def _range_text(vmin: float, vmax: float, units: str, signed: bool) -> str:
    # A panel's own colour range, short enough for the line above its title.
    return f"\u00b1{vmax:.3g}{units}" if signed else f"{vmin:.3g} to {vmax:.3g}{units}"


class OverviewPlan:
    """What every page of an overview shares: the decimated panels, their colours, labels."""

    def __init__(self, cube: xr.DataArray, display: Display, *, title: str | None,
                 dpi: float, panels: list[np.ndarray] | None):
        slice_axis(cube)  # refuses anything that is not a cube
        if not (math.isfinite(float(dpi)) and float(dpi) > 0):
            raise SettingsError(f"dpi must be a positive number, got {dpi}", where="dpi")
        self.n = n = cube.shape[0]
        self.dpi, self.frame = float(dpi), Frame(cube)
        self.labels, self.quantity = range_labels(cube), _quantity(cube)
        self.cube, self.title = cube, title
        signed = str(cube.name or "").startswith("signed")
        # One pass over the data: the decimated panels, and the colour limits from them.
        self.stride = stride = panel_stride(cube, dpi=dpi)
        if panels is None:
            self.drawn = [drawn_cells(cube, i, stride) for i in range(n)]
        else:
            self.drawn = [np.asarray(p, dtype=np.float32) for p in panels]
            expected = (math.ceil(cube.shape[1] / stride), math.ceil(cube.shape[2] / stride))
            if len(self.drawn) != n or any(p.shape != expected for p in self.drawn):
                raise SettingsError(f"panels must be {n} arrays of {expected} cells "
                                    f"(every {stride}th cell)", where="panels")
        colours = display.colours(signed=signed)
        if display.per_slice:
            # A panel holds at most MAX_PANEL_CELLS**2 = MAX_SAMPLE_VALUES cells: all count.
            limits = [display.limits(p, signed=signed) for p in self.drawn]
            ticks, tick_labels, caption = relative_scale(display, signed=signed)
            units = _units(cube)
            self.scale = Scale(colours, [Normalize(*lim) for lim in limits],
                               ranges=[_range_text(*lim, units, signed) for lim in limits],
                               ticks=ticks, tick_labels=tick_labels, caption=caption)
        else:
            # Over the whole cube (a regular subsample of the drawn cells, sample_stride),
            # so that every page has the same colours.
            k = sample_stride(cube, dpi=dpi) // stride
            norm = Normalize(*display.limits([p[::k, ::k] for p in self.drawn],
                                             signed=signed))
            self.scale = Scale(colours, [norm] * n)

    def page(self, start: int, stop: int, *, page: tuple[int, int] | None = None) -> dict:
        """The drawing keywords of slices ``start:stop`` (those of
        :func:`slicer.outputs.sheet.draw_sheet` but the panels and grid); ``page`` = (number,
        count) when paged."""
        which = "" if page is None else f" {start + 1}-{stop} of {self.n}"
        return {"stride": self.stride, "frame": self.frame, "labels": self.labels[start:stop],
                "scale": self.scale.page(start, stop), "dpi": self.dpi,
                "title": _sheet_title(self.cube, self.title, which), "quantity": self.quantity,
                "page": None if page is None else f"page {page[0]} of {page[1]}"}

    def pages(self, per_page: int, max_columns: int | None = None
              ) -> tuple[int, int, list[tuple[int, int, tuple[int, int] | None]]]:
        """The pages of ``per_page`` panels: columns and rows of every page's grid (all
        pages the same size; the last may leave places empty) and each page's first and end
        slice and (number, count), None when one page holds all."""
        per_page = _check_per_page(per_page)
        on_page = min(self.n, per_page)
        ncols = _columns(on_page, max_columns)
        count = math.ceil(self.n / per_page)
        return ncols, math.ceil(on_page / ncols), [
            (i * per_page, min(self.n, (i + 1) * per_page),
             (i + 1, count) if count > 1 else None) for i in range(count)]

def _columns(n: int, max_columns: int | None) -> int:
    ncols = math.ceil(math.sqrt(n))
    if max_columns is not None:
        if int(max_columns) < 1:
            raise SettingsError(f"max_columns must be >= 1, got {max_columns}",
                                where="max_columns")
        ncols = min(ncols, int(max_columns))
    return ncols


def _check_per_page(per_page) -> int:
    if isinstance(per_page, bool) or not isinstance(per_page, int | np.integer) or per_page < 1:
        raise SettingsError(f"per_page must be a whole number >= 1, got {per_page!r}",
                            where="per_page")
    return int(per_page)


__all__ = ["OverviewPlan"]
