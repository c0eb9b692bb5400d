"""Survey geometry: where every trace of every line lies, from whatever the crew recorded.

:func:`prepare_survey` runs once before a build (start and end points from headers, local grid
to CRS, channels expanded); :func:`positioned` runs in each line's task and places its traces.
"""

from __future__ import annotations

import xarray as xr

from ._linetable import LineEntry


def prepare_survey(settings):
    """The settings with every line's start and end known in the survey CRS."""
    if settings.positions == "headers":
        from ._survey import ends_from_headers
        settings = settings.replace(lines=tuple(ends_from_headers(settings.lines)))
    return settings


def positioned(line: xr.DataArray, entry: LineEntry, settings) -> xr.DataArray:
    """``line`` with per-trace ``x``, ``y``, ``distance`` (m), from the entry and settings."""
    from ._survey import position_line
    return position_line(line, entry, positions=settings.positions)
