"""Ties over a whole survey during a build: measure, solve, report and (on request) apply.

With ``ties = "report"`` or ``"apply"`` a build first finds where lines of different directions
cross (:func:`slicer.geometry.crossings.find_crossings`, on every line's trace positions), then
processes the lines that cross (time zero, dewow and gain as the build does; no background
removal, migration or envelope) and keeps only the two traces either side of each crossing,
measures the time shift and amplitude ratio there (:func:`slicer.processing.ties.measure_ties`)
and solves the network for one time-zero and gain correction per line
(:func:`slicer.processing.ties.solve_ties`). The misfit before and after goes into the build
record; with ``"apply"`` each line's envelope is corrected
(:func:`slicer.processing.ties.correct_line`) before it is cut into slices.

Two extra passes over the files are the price: one for positions, one for the crossing traces.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import xarray as xr

from slicer.core.conventions import TRACE, TWT, X, Y
from slicer.core.errors import warn
from slicer.io.linetable import LineEntry
from slicer.processing.ties import correct_line

__all__ = ["correct_line", "tie_survey"]


@dataclass(frozen=True)
class TieJob:
    """One line's part of the tie pass (picklable)."""

    number: int
    entry: LineEntry
    settings: object
    interval_ns: float
    dewow_ns: float | None
    keep: tuple[int, ...] = ()


def tie_name(number: int, entry: LineEntry) -> str:
    """A unique, readable name for a line in the tie network."""
    from slicer.geometry.positioning import line_name
    return f"{number}:{line_name(entry)}"


def line_positions(job: TieJob) -> dict:
    """The placed trace positions of one line (m)."""
    from slicer.geometry.survey import load_line
    line = load_line(job.entry, job.settings, sample_interval_ns=job.interval_ns)
    return {"x": line[X].values, "y": line[Y].values}


def prepared_line(line: xr.DataArray, settings, dewow_ns: float | None) -> xr.DataArray:
    """The build's time zero, dewow and gain (no background removal, migration or envelope).

    Background removal is left out on purpose: flat reflectors, which it removes, are the
    steadiest events to tie on (on the network of ``tests/test_tienet.py`` it left 19 of 25
    ties above the quality cut; without it all 25 tie, the worst line within 0.014 ns). The
    direct wave it would also remove is shifted by the same time-zero error, so it may stay.
    """
    from slicer.pipeline.line_chain import dewow_window
    from slicer.processing.steps import correct_time_zero, process_chain
    line = correct_time_zero(line, time_zero=settings.time_zero,
                             threshold=settings.time_zero_threshold)
    return process_chain(line, dewow_ns=dewow_window(settings, dewow_ns), background=None,
                         gain=settings.gain_curve, take_envelope=False)


def crossing_traces(job: TieJob) -> dict:
    """The processed traces ``job.keep`` of one line, with their twt and positions."""
    from slicer.geometry.survey import load_line
    line = load_line(job.entry, job.settings, sample_interval_ns=job.interval_ns)
    line = prepared_line(line, job.settings, job.dewow_ns).transpose(TRACE, TWT)
    part = line.isel({TRACE: list(job.keep)})
    return {"values": np.asarray(part.values, dtype=np.float32),
            "twt": np.asarray(line[TWT].values), "x": part[X].values, "y": part[Y].values}


def _stub(name: str, x: np.ndarray, y: np.ndarray) -> xr.DataArray:
    """A line of positions only (no samples), enough to find crossings."""
    return xr.DataArray(np.zeros((x.size, 0), np.float32), dims=(TRACE, TWT),
                        coords={X: (TRACE, x), Y: (TRACE, y)}, attrs={"line": name})


def _brackets(position: float, n: int) -> tuple[int, float]:
    """The trace before a fractional ``position`` on a line of ``n`` traces, and the fraction."""
    p = min(max(float(position), 0.0), n - 1.0)
    i0 = min(int(math.floor(p)), n - 2)
    return i0, p - i0


def tie_survey(settings, *, engine, info, dewow_ns, progress) -> tuple[dict, dict]:
    """Measure and solve the ties of a survey.

    Returns
    -------
    report : dict
        ``mode``, ``crossings``, ``ties_used``, ``misfit_before_ns``, ``misfit_after_ns``,
        ``gain_misfit_before``, ``gain_misfit_after`` (RMS of ln amplitude ratios, Np),
        ``applied`` and per line ``corrections`` (``line``, ``file``, ``time_zero_ns``,
        ``gain``).
    corrections : dict
        ``{line number: (time_zero_ns, gain)}`` when ``settings.ties == "apply"``, else empty.

    Raises
    ------
    SettingsError
        The tie network does not connect every line (naming those cut off).
    """
    from slicer.processing.ties import find_crossings, measure_ties, solve_ties
    entries = settings.lines
    names = [tie_name(k, e) for k, e in enumerate(entries)]
    jobs = [TieJob(k, e, settings, info.sample_interval_ns, dewow_ns)
            for k, e in enumerate(entries)]
    sizes = [line.n_traces for line in info.lines]
    placed = list(engine.map(line_positions, jobs, desc="ties: positions", unit="trace",
                             progress=progress, weights=sizes))
    crossings = find_crossings([_stub(n, p["x"], p["y"]) for n, p in zip(names, placed,
                                                                          strict=True)])
    report = {"mode": settings.ties, "crossings": int(crossings.sizes["crossing"]),
              "ties_used": 0, "applied": False, "corrections": []}
    if report["crossings"] == 0:
        warn("ties: no crossings between lines of different directions; nothing to tie")
        return report, {}
    index = {n: k for k, n in enumerate(names)}
    keep: dict[int, set[int]] = {}
    for side in ("a", "b"):
        for name, pos in zip(crossings[f"line_{side}"].values,
                             crossings[f"position_{side}"].values, strict=True):
            k = index[str(name)]
            i0, _ = _brackets(pos, placed[k]["x"].size)
            keep.setdefault(k, set()).update((i0, i0 + 1))
    tied = sorted(keep)
    if len(tied) < len(entries):
        warn(f"ties: {len(entries) - len(tied)} line(s) cross no other line and keep their "
             "time zero and gain")
    part_jobs = [TieJob(k, entries[k], settings, info.sample_interval_ns, dewow_ns,
                        tuple(sorted(keep[k]))) for k in tied]
    parts = dict(zip(tied, engine.map(crossing_traces, part_jobs, desc="ties: crossings",
                                      unit="line", progress=progress), strict=True))
    lines = [xr.DataArray(parts[k]["values"], dims=(TRACE, TWT),
                          coords={TWT: parts[k]["twt"], X: (TRACE, parts[k]["x"]),
                                  Y: (TRACE, parts[k]["y"])}, attrs={"line": names[k]})
             for k in tied]
    compact = crossings.copy()
    for side in ("a", "b"):
        positions, traces = [], []
        for name, pos in zip(crossings[f"line_{side}"].values,
                             crossings[f"position_{side}"].values, strict=True):
            k = index[str(name)]
            i0, frac = _brackets(pos, placed[k]["x"].size)
            j0 = int(np.searchsorted(part_jobs[tied.index(k)].keep, i0))
            positions.append(j0 + frac)
            traces.append(j0 + int(round(frac)))
        compact[f"position_{side}"] = ("crossing", np.array(positions))
        compact[f"trace_{side}"] = ("crossing", np.array(traces, dtype=np.int64))
    ties = measure_ties(lines, compact)
    solution = solve_ties(ties, [names[k] for k in tied])
    report.update({
        "ties_used": int(solution.attrs["n_ties"]),
        "misfit_before_ns": solution.attrs["misfit_before_ns"],
        "misfit_after_ns": solution.attrs["misfit_after_ns"],
        "gain_misfit_before": solution.attrs["gain_misfit_before"],
        "gain_misfit_after": solution.attrs["gain_misfit_after"],
        "applied": settings.ties == "apply",
        "corrections": [{"line": names[k], "file": str(entries[k].file),
                         "time_zero_ns": float(solution["time_zero_ns"].values[j]),
                         "gain": float(solution["gain"].values[j])}
                        for j, k in enumerate(tied)]})
    if settings.ties != "apply":
        return report, {}
    return report, {k: (float(solution["time_zero_ns"].values[j]),
                        float(solution["gain"].values[j])) for j, k in enumerate(tied)}
