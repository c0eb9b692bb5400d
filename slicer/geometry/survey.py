"""A survey: its lines read from their files and placed on the ground."""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import xarray as xr

from slicer.core.errors import InputFileError, SettingsError
from slicer.geometry.placement import place_line
from slicer.geometry.positioning import channel_traces, positioned, source_of
from slicer.io.linetable import LineEntry
from slicer.io.reading import LineInfo, line_info, read_line


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


def survey_info(entries: Sequence[LineEntry], *,
                sample_interval_ns: float | None = None) -> SurveyInfo:
    """Read every line's headers and check that the lines agree with each other.

    Raises
    ------
    InputFileError
        A file is missing or unreadable, or its sample count or interval differs from the
        first line's.
    SettingsError
        No sample interval in the headers and none given.
    """
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
    """Read and place each line in turn (one line in memory at a time)."""
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
    """
    line = read_line(entry.file, sample_interval_ns=sample_interval_ns,
                     coordinates=source_of(entry, settings) == "headers")
    return positioned(line, entry, settings)
