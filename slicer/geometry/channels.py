"""Multi-channel antenna arrays: one recorded swath becomes one positioned Line per channel.

An array tows several antenna pairs side by side (and sometimes staggered); the positioning
system tracks one reference point.  The channel table gives every channel's offset from that
point in the frame of travel::

    channel,across,along

``across`` (m) is positive to the **right** of the direction of travel (seen from above, facing
forward), ``along`` (m) positive forward.  ``channel`` names match the swath's ``channel``
coordinate (compared as text, so ``3`` matches ``3``); a swath without one numbers its channels
0, 1, ... by position.

The frame-of-travel geometry below is shared with :mod:`slicer.geometry.positions` (a single antenna
offset from its GNSS receiver is a one-channel array): the direction of travel at a point is
the chord over ``smoothing`` metres of path centred on it, so fix noise and single-trace wobble
do not swing it.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import DISTANCE, TRACE, TWT, X, Y
from slicer.core.errors import InputFileError, SettingsError
from slicer.geometry.localgrid import _float_field, _read_table

if TYPE_CHECKING:
    import xarray as xr

#: Dimension of channels in a swath.
CHANNEL = "channel"
COLUMNS = ("channel", "across", "along")


# --- the frame of travel (shared with _positions) ---------------------------------------------


def _line_where(line: xr.DataArray) -> str:
    """The file (or name) of a line, for messages."""
    return str(line.attrs.get("source") or line.attrs.get("line") or "line")


def _finite_option(value: float, name: str, *, positive: bool = False) -> float:
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise SettingsError(f"must be a number, got {value!r}", where=name) from None
    if not math.isfinite(value) or (positive and value <= 0):
        kind = "a positive finite" if positive else "a finite"
        raise SettingsError(f"must be {kind} number, got {value!r}", where=name)
    return value


def _path_length(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Cumulative path length (m) along consecutive points, 0 at the first."""
    return np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))])


def _travel_direction(x: np.ndarray, y: np.ndarray, *, smoothing: float,
                      where: str) -> tuple[np.ndarray, np.ndarray]:
    """Unit vector of travel at every point: the chord over ``smoothing`` m of path around it.

    Points on the path are found by path length, so stationary points (zero steps) share the
    direction of the path through them and uneven spacing does not bias it.  Near the ends the
    chord is one-sided.
    """
    s = _path_length(x, y)
    if s[-1] <= 0:
        raise InputFileError("every position is the same; there is no direction of travel",
                             where=where)
    half = 0.5 * smoothing
    ahead, behind = np.minimum(s + half, s[-1]), np.maximum(s - half, 0.0)
    dx = np.interp(ahead, s, x) - np.interp(behind, s, x)
    dy = np.interp(ahead, s, y) - np.interp(behind, s, y)
    norm = np.hypot(dx, dy)
    # A chord that starts and ends at the same place (the path doubles back within it): take
    # the nearest point whose chord is defined.
    bad = norm <= 1e-12 * max(1.0, float(s[-1]))
    if bad.all():
        raise InputFileError("the path doubles back on itself everywhere; there is no direction "
                             "of travel", where=where)
    if bad.any():
        good = np.flatnonzero(~bad)
        nearest = good[np.clip(np.searchsorted(good, np.flatnonzero(bad)), 0, good.size - 1)]
        dx[bad], dy[bad], norm[bad] = dx[nearest], dy[nearest], norm[nearest]
    return dx / norm, dy / norm


def _offset(x, y, ux, uy, along: float, across: float) -> tuple[np.ndarray, np.ndarray]:
    """Move points ``along`` m forward and ``across`` m to the right of the unit vector (ux, uy).

    The right-hand normal of (ux, uy) in an east-north frame is (uy, -ux).
    """
    return x + along * ux + across * uy, y + along * uy - across * ux


def _with_positions(line: xr.DataArray, x: np.ndarray, y: np.ndarray, *,
                    distance: np.ndarray | None = None, note: str | None = None) -> xr.DataArray:
    """The line with per-trace ``x``, ``y`` and ``distance`` coordinates (m)."""
    x, y = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
    if distance is None:
        distance = _path_length(x, y)
    out = line.assign_coords({
        X: (TRACE, x, {"units": "m", "long_name": "easting"}),
        Y: (TRACE, y, {"units": "m", "long_name": "northing"}),
        DISTANCE: (TRACE, np.asarray(distance, dtype=np.float64),
                   {"units": "m", "long_name": "distance along line"}),
    })
    if note:
        out.attrs["positioning"] = note
    return out


# --- channel tables ----------------------------------------------------------------------------


@dataclass(frozen=True)
class ChannelTable:
    """Offsets of every channel from the swath's reference point (m).

    Attributes
    ----------
    channels : tuple of str
        Channel names, in table order, unique.
    across, along : tuple of float
        Offset of each channel (m): across positive to the right of travel, along forward.
    where : str
        The table file (or a label), for messages.
    """

    channels: tuple[str, ...]
    across: tuple[float, ...]
    along: tuple[float, ...]
    where: str = "channel table"

    def __post_init__(self):
        n = len(self.channels)
        if n == 0:
            raise SettingsError("a channel table needs at least one channel", where=self.where)
        if len(self.across) != n or len(self.along) != n:
            raise SettingsError(f"{n} channels but {len(self.across)} across and "
                                f"{len(self.along)} along offsets", where=self.where)
        if len(set(self.channels)) != n:
            dup = sorted({c for c in self.channels if self.channels.count(c) > 1})
            raise SettingsError(f"channel(s) {', '.join(dup)} listed twice", where=self.where)
        if not all(math.isfinite(v) for v in self.across + self.along):
            raise SettingsError("channel offsets must be finite", where=self.where)

    def offset(self, channel) -> tuple[float, float]:
        """``(across, along)`` of a channel (m)."""
        i = self.channels.index(str(channel))
        return self.across[i], self.along[i]


def read_channel_table(path: str | os.PathLike) -> ChannelTable:
    """Read a channel table CSV with header ``channel,across,along`` (offsets in m).

    Parameters
    ----------
    path : path-like
        The channel table (see the module docstring for the columns).

    Returns
    -------
    ChannelTable
        The channels in file order, names as text, offsets in m; ``where`` is ``path``.

    Raises
    ------
    InputFileError
        Missing file or columns, no channels, an empty channel name, a channel listed twice or
        an empty or non-numeric offset (naming ``file:row``).
    """
    path, _, rows = _read_table(path, "channel table", COLUMNS)
    channels, across, along = [], [], []
    seen: dict[str, str] = {}
    for number, fields in rows:
        where = f"{path}:{number}"
        name = fields.get("channel", "")
        if not name:
            raise InputFileError("column channel is empty", where=where)
        if name in seen:
            raise InputFileError(f"channel {name} is already listed at {seen[name]}",
                                 where=where)
        seen[name] = where
        across.append(_float_field(fields, "across", where))
        along.append(_float_field(fields, "along", where))
        channels.append(name)
    if not channels:
        raise InputFileError("channel table lists no channels", where=str(path))
    return ChannelTable(tuple(channels), tuple(across), tuple(along), where=str(path))


def _names(values) -> list[str]:
    return [str(v.item() if isinstance(v, np.generic) else v) for v in values]


def _split(swath) -> tuple[list[xr.DataArray], list[str], str]:
    """Per-channel lines (still at the reference point), their names, and the swath's name."""
    import xarray as xr
    if isinstance(swath, xr.DataArray):
        if set(swath.dims) != {CHANNEL, TRACE, TWT}:
            raise InputFileError(f"a swath must have dims (channel, trace, twt), got "
                                 f"{swath.dims}", where=_line_where(swath))
        for c in (X, Y):
            if c not in swath.coords or swath[c].dims != (TRACE,):
                raise InputFileError(f"the swath needs per-trace {c!r} of its reference point "
                                     "(dims (trace,)); position it first",
                                     where=_line_where(swath))
        swath = swath.transpose(CHANNEL, TRACE, TWT)
        n = swath.sizes[CHANNEL]
        names = (_names(swath[CHANNEL].values) if CHANNEL in swath.coords
                 else [str(i) for i in range(n)])
        lines = [swath.isel({CHANNEL: k}, drop=True) for k in range(n)]
        return lines, names, str(swath.attrs.get("line") or swath.name or "swath")
    lines = list(swath)
    if not lines:
        raise InputFileError("no channels given", where="swath")
    for k, line in enumerate(lines):
        if not isinstance(line, xr.DataArray) or set(line.dims) != {TRACE, TWT}:
            raise InputFileError(f"channel {k} is not a Line with dims (trace, twt)",
                                 where="swath")
        if X not in line.coords or Y not in line.coords:
            raise InputFileError(f"channel {k} has no per-trace x, y of the reference point; "
                                 "position it first", where=_line_where(line))
    if all("channel" in line.attrs for line in lines):
        names = [str(line.attrs["channel"]) for line in lines]
    else:
        names = [str(i) for i in range(len(lines))]
    base = str(lines[0].attrs.get("line") or "swath")
    return lines, names, base


def _match(names: Sequence[str], table: ChannelTable) -> None:
    """Refuse a table that does not describe exactly the swath's channels."""
    if len(set(names)) != len(names):
        dup = sorted({c for c in names if names.count(c) > 1})
        raise InputFileError(f"the swath names channel(s) {', '.join(dup)} twice",
                             where="swath")
    missing = [c for c in names if c not in table.channels]
    extra = [c for c in table.channels if c not in names]
    if len(names) != len(table.channels) or missing or extra:
        parts = [f"the table lists {len(table.channels)} channel(s), the swath has "
                 f"{len(names)} ({', '.join(names)})"]
        if missing:
            parts.append(f"swath channel(s) {', '.join(missing)} are not in the table")
        if extra:
            parts.append(f"table channel(s) {', '.join(extra)} are not in the swath")
        raise InputFileError("; ".join(parts), where=table.where)


def expand_channels(swath, table: ChannelTable | str | os.PathLike, *,
                    smoothing: float = 1.0) -> list[xr.DataArray]:
    """Split a multi-channel swath into one positioned Line per channel.

    Parameters
    ----------
    swath : xarray.DataArray or sequence of xarray.DataArray
        Either one array with dims ``(channel, trace, twt)`` and per-trace ``x``, ``y`` (m) of
        the reference point, or one Line per channel, each with ``x``, ``y`` of the reference
        point for its traces (channel names from ``attrs["channel"]`` when every line has it).
    table : ChannelTable or path-like
        The channel offsets, or the CSV to read them from (see :func:`read_channel_table`).
    smoothing : float
        Path length (m) over which the direction of travel is taken.

    Returns
    -------
    list of xarray.DataArray
        One Line per channel in the swath's order, with per-trace ``x``, ``y`` (the channel's
        own positions), ``distance`` (m, its own path length), ``attrs["line"]`` =
        ``"<swath line>-ch<channel>"`` and ``attrs["channel"]``, ``channel_across_m``,
        ``channel_along_m``.

    Raises
    ------
    InputFileError
        A table that disagrees with the swath (channel count, missing or extra channels), a bad
        table file, a swath without reference positions, or one that never moves while a
        channel is offset.
    SettingsError
        A bad ``smoothing``.
    """
    smoothing = _finite_option(smoothing, "smoothing", positive=True)
    if not isinstance(table, ChannelTable):
        table = read_channel_table(table)
    lines, names, base = _split(swath)
    _match(names, table)
    out = []
    for line, name in zip(lines, names, strict=True):
        across, along = table.offset(name)
        x = np.asarray(line[X].values, dtype=np.float64)
        y = np.asarray(line[Y].values, dtype=np.float64)
        if along or across:
            ux, uy = _travel_direction(x, y, smoothing=smoothing, where=_line_where(line))
            x, y = _offset(x, y, ux, uy, along, across)
        placed = _with_positions(line, x, y,
                                 note=f"channel {name}: {across:g} m right, {along:g} m ahead "
                                      "of the reference point")
        placed.attrs.update({"line": f"{base}-ch{name}", "channel": name,
                             "channel_across_m": float(across), "channel_along_m": float(along)})
        out.append(placed)
    return out
