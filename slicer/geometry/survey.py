"""A survey: its lines read from their files and placed on the ground."""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import DISTANCE, TWT
from slicer.core.errors import InputFileError, SettingsError
from slicer.core.numbers import real
from slicer.geometry.placement import even_positions, place_line
from slicer.geometry.positioning import channel_traces, positioned, source_of
from slicer.io.lines import SEGY_SUFFIXES, line_attrs
from slicer.io.linetable import LineEntry
from slicer.io.reading import LineInfo, line_info, read_line

if TYPE_CHECKING:
    import xarray as xr


@dataclass(frozen=True)
class SurveyInfo:
    """What the headers of all lines say, before any samples are read.

    Attributes
    ----------
    lines : tuple of LineInfo
        One per line, in table order.
    n_samples : int
        Samples per trace (the same on every line).
    sample_interval_ns : float
        Sample interval (ns), from the headers or the user.
    n_traces : int
        Total traces in the survey.
    """

    lines: tuple[LineInfo, ...]
    n_samples: int
    sample_interval_ns: float
    n_traces: int

    @property
    def record_ns(self) -> float:
        """Time from the first to the last sample of a trace (ns)."""
        return (self.n_samples - 1) * self.sample_interval_ns

    @property
    def record_span_ns(self) -> tuple[float, float]:
        """The times (ns, on the files' own clocks) every line's record covers: from the
        latest first sample to the earliest last one."""
        starts = [line.first_sample_ns for line in self.lines] or [0.0]
        return max(starts), min(starts) + self.record_ns


def survey_info(entries: Sequence[LineEntry], *,
                sample_interval_ns: float | None = None) -> SurveyInfo:
    """Read every line's headers and check that the lines agree with each other.

    Parameters
    ----------
    entries : sequence of LineEntry
        The survey's lines (at least one); a swath's channel counts only its own traces.
    sample_interval_ns : float, optional
        Sample interval, ns, taken instead of the headers' (which are then not compared).

    Returns
    -------
    SurveyInfo
        Each line's header summary, the common sample count and interval (ns), and the total
        trace count.

    Raises
    ------
    InputFileError
        A file is missing or unreadable, or its sample count or interval differs from the
        first line's.
    SettingsError
        No lines; no sample interval in the headers and none given, or one given that is not
        a positive number.
    """
    if not entries:
        raise SettingsError("a survey needs at least one line", where="lines")
    if sample_interval_ns is not None:
        sample_interval_ns = real(sample_interval_ns, where="--sample-interval")
        if not (math.isfinite(sample_interval_ns) and sample_interval_ns > 0):
            raise SettingsError(f"sample interval must be a positive number of ns, got "
                                f"{sample_interval_ns:g}", where="--sample-interval")
    infos = tuple(_entry_info(e) for e in entries)
    first = infos[0]
    for info in infos[1:]:
        if info.n_samples != first.n_samples:
            raise InputFileError(
                f"{info.n_samples} samples per trace, but {first.path.name} has "
                f"{first.n_samples}; lines of one survey must agree", where=str(info.path))
    if sample_interval_ns is None:
        intervals = [i.sample_interval_ns for i in infos]
        known = [(i, dt) for i, dt in zip(infos, intervals, strict=True) if dt is not None]
        if len(known) < len(infos):
            missing = next(i for i, dt in zip(infos, intervals, strict=True) if dt is None)
            raise SettingsError(
                f"{missing.path} holds no usable radar sample interval; give it in ns",
                where="--sample-interval")
        ref_info, ref = known[0]
        for info, dt in known[1:]:
            if not math.isclose(dt, ref, rel_tol=1e-3):
                raise InputFileError(
                    f"sample interval {dt:g} ns, but {ref_info.path.name} has {ref:g} ns; "
                    "lines of one survey must agree", where=str(info.path))
        sample_interval_ns = ref
    return SurveyInfo(lines=infos, n_samples=first.n_samples,
                      sample_interval_ns=float(sample_interval_ns),
                      n_traces=sum(i.n_traces for i in infos))


def _entry_info(entry: LineEntry) -> LineInfo:
    """The entry's file described; a swath's channel counts only its own traces."""
    import dataclasses

    info = line_info(entry.file)
    if entry.channel is None:
        return info
    return dataclasses.replace(info, n_traces=channel_traces(entry, info.n_traces))


def iter_lines(entries: Sequence[LineEntry], *, sample_interval_ns: float | None = None
               ) -> Iterator[xr.DataArray]:
    """Read and place each line in turn (one line in memory at a time).

    Parameters
    ----------
    entries : sequence of LineEntry
        The lines, each placed evenly from its start to its end point (:func:`place_line`),
        whatever its ``positions`` column says.
    sample_interval_ns : float, optional
        Sample interval, ns, instead of the files' own (see :func:`slicer.read_line`).

    Yields
    ------
    xarray.DataArray
        Each line in table order, with per-trace ``x``, ``y`` and ``distance`` (m).
    """
    for entry in entries:  # placed from the table: no trace-header coordinates are read
        line = read_line(entry.file, sample_interval_ns=sample_interval_ns, coordinates=False)
        yield place_line(line, entry)


def position_line(line: xr.DataArray, entry: LineEntry, *, positions: str = "table"
                  ) -> xr.DataArray:
    """Place a line from its table entry (``"table"``) or its own trace headers."""
    if positions == "headers":
        from slicer.geometry.positions import positions_from_headers
        return positions_from_headers(line)
    return place_line(line, entry)


def load_line(entry: LineEntry, settings, *, sample_interval_ns: float | None = None
              ) -> xr.DataArray:
    """Read one line of a survey and give every trace its ground position.

    Positions come from where ``settings`` and the entry say (see
    :mod:`slicer.geometry.positioning`). The file's trace-header coordinates are read only
    for a line placed from them (``headers``): table and track positions need none, and on
    SEG-Y that pass over every trace header was half of a line's reading time.

    Parameters
    ----------
    entry : LineEntry
        The line's row of the line table (for a swath, one channel's entry).
    settings : BuildSettings
        The survey's settings: positions source, CRS and track CRS, antenna offsets, trace
        spacing.
    sample_interval_ns : float, optional
        Sample interval, ns, instead of the file's own (see :func:`slicer.read_line`).

    Returns
    -------
    xarray.DataArray
        The line (only the entry's channel of a swath) with per-trace ``x``, ``y`` (m, survey
        CRS) and ``distance`` (m along the line).
    """
    line = read_line(entry.file, sample_interval_ns=sample_interval_ns,
                     coordinates=source_of(entry, settings) == "headers")
    return positioned(line, entry, settings)


@dataclass(frozen=True)
class PlacedSamples:
    """A placed line as plain arrays: what a build's line task takes from :func:`load_line`.

    ``values`` (traces, samples) float32; ``twt`` (ns); ``x``, ``y`` (m, survey CRS);
    ``distance`` (m along the line) and ``height`` (m, a GNSS track's) where the line has
    them, else None; ``attrs`` the line's attrs.
    """

    values: np.ndarray
    twt: np.ndarray
    x: np.ndarray
    y: np.ndarray
    distance: np.ndarray | None
    height: np.ndarray | None
    attrs: dict

    @classmethod
    def of(cls, line: xr.DataArray) -> PlacedSamples:
        """The arrays of a placed Line DataArray."""
        def coord(name):
            return line[name].values if name in line.coords else None
        return cls(line.values, line[TWT].values, line["x"].values, line["y"].values,
                   coord(DISTANCE), coord("height"), dict(line.attrs))


def load_line_samples(entry: LineEntry, settings, *, sample_interval_ns: float | None = None
                      ) -> PlacedSamples:
    """:func:`load_line` as plain arrays (the same samples, positions and attrs).

    A SEG-Y line placed evenly from its table row (no channel of a swath, no distance marks,
    no resampling to a trace spacing) is read without building a DataArray: 2-3 ms of a
    line task's CPU less (1.3 against 3.1 ms for a line of 800 traces, 2.9 against 5.8 ms for
    2000), most of it holding the GIL, which a threads build's tasks share. Any other line
    goes through :func:`load_line`.
    """
    if (entry.file.suffix.lower() in SEGY_SUFFIXES and source_of(entry, settings) == "table"
            and entry.channel is None and entry.marks is None
            and settings.trace_spacing is None):
        from slicer.io.segy import read_segy_samples
        values, interval = read_segy_samples(entry.file, sample_interval_ns=sample_interval_ns)
        x, y, distance = even_positions(entry, values.shape[0])
        twt = interval * np.arange(values.shape[1], dtype=np.float64)
        return PlacedSamples(values, twt, x, y, distance, None,
                             line_attrs(entry.file, interval_ns=interval))
    return PlacedSamples.of(load_line(entry, settings, sample_interval_ns=sample_interval_ns))
