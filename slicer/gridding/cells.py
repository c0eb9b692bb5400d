"""The check of a grid's cell size, apart from the gridding itself so that reading a build's
settings does not import scipy and xarray (the gridding's libraries): the fork server of a
build's worker processes then starts importing its own while the calling process imports
these."""

from __future__ import annotations

import math

from slicer.core.errors import SettingsError


def check_cell(cell: float, *, where: str = "--cell") -> float:
    """Return the cell size (m) if it is a positive finite number."""
    try:
        c = float(cell)
    except (TypeError, ValueError):
        raise SettingsError(f"cell size must be a number of metres, got {cell!r}",
                            where=where) from None
    if not math.isfinite(c) or c <= 0:
        raise SettingsError(f"cell size must be positive, got {c:g} m", where=where)
    return c


__all__ = ["check_cell"]
