"""Reducing a survey to slice values: every line read, placed, processed and cut into windows.

Each line is one task (:func:`reduce_line`): a picklable :class:`LineJob` in, a few dozen
numbers per trace out, so lines run concurrently on any engine (:mod:`slicer.pipeline.engine`) and
only one line per worker is ever in memory. The first line runs first, alone: its record decides
which slice windows fit, and with ``dewow = "auto"`` its dominant frequency sets the dewow
window of every line (one filter for the whole survey).

Inside a task the line is plain arrays from the start
(:func:`slicer.geometry.survey.load_line_samples`: a table-placed SEG-Y line is read without a
DataArray, any other line through one), then
:func:`slicer.pipeline.line_chain.process_samples` and the window core: the same NumPy cores as
the labelled steps, which the tests hold it equal to, without building a DataArray for every
step (that glue had cost more than the floor of reading and taking envelopes).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import DEPTH, ELEVATION, TRACE, TWT
from slicer.core.errors import SettingsError, SlicerWarning
from slicer.geometry.survey import SurveyInfo, load_line, load_line_samples, survey_info
from slicer.gridding.elevation import elevation_limits, window_means_varying
from slicer.gridding.windows import (
    Windows,
    _window_means_core,
    make_windows,
    record_reach,
    window_limits,
)
from slicer.io.linetable import LineEntry
from slicer.io.reading import describe_file
from slicer.pipeline.elevation_slices import line_surface, plan_elevation_windows, survey_surface
from slicer.pipeline.engine import Engine, parse_scheduler
from slicer.pipeline.line_chain import migration_method, process_line, process_samples
from slicer.pipeline.settings import BuildSettings
from slicer.processing.steps import (
    correct_time_zero,
    dominant_frequency,
)
from slicer.velocity.models import ConstantVelocity

if TYPE_CHECKING:
    import xarray as xr


def nice_number(value: float) -> float:
    """The largest of 1, 2 or 5 times a power of ten that does not exceed ``value``."""
    if not math.isfinite(value) or value <= 0:
        raise ValueError(f"nice_number needs a positive value, got {value}")
    exponent = math.floor(math.log10(value))
    for m in (5, 2, 1):
        candidate = m * 10.0 ** exponent
        if candidate <= value * (1 + 1e-9):
            return float(f"{candidate:.12g}")
    return float(f"{10.0 ** exponent:.12g}")


def reach_depth(velocity, record_ns: float) -> float:
    """Depth (m) a record ``record_ns`` long reaches, everywhere, with a velocity or model."""
    if not hasattr(velocity, "profile"):
        return velocity * record_ns / 2
    if getattr(velocity, "lateral", False):
        return float(np.min(velocity.velocity)) * record_ns / 2
    from slicer.velocity.models import depth_of_time
    return float(depth_of_time(velocity, record_ns))


def default_windows(record_ns: float, velocity: float | None) -> Windows:
    """About twenty slices from the surface to the end of a record ``record_ns`` long."""
    if velocity is not None:
        reach, axis = reach_depth(velocity, record_ns), "depth"
    else:
        reach, axis = record_ns, "twt"
    step = nice_number(reach / 20)
    bottom = math.floor(reach / step + 1e-9) * step
    return make_windows(0.0, bottom, step, axis=axis)


def fit_windows(windows: Windows, record_ns: float, velocity: float | None,
                where: str) -> Windows:
    """Drop windows below the end of the record (warning); refuse if none is left."""
    keep = record_reach(record_ns, windows, velocity=velocity)
    unit = windows.units
    if not keep.any():
        reach = record_ns if windows.axis == TWT else reach_depth(velocity, record_ns)
        raise SettingsError(
            f"every slice reaches below the end of the record, which reaches {reach:.3g} "
            f"{unit} below time zero (a slice must end within it)", where=where)
    if not keep.all():
        dropped = windows.select(~keep)
        warnings.warn(f"{len(dropped)} slice(s) from {dropped.top[0]:g} {unit} down lie below "
                      f"the end of the record and are left out", SlicerWarning, stacklevel=2)
    return windows.select(keep)


@dataclass(frozen=True)
class LineJob:
    """Everything one line's task needs (picklable, for process and cluster engines)."""

    number: int
    entry: LineEntry
    settings: BuildSettings
    windows: Windows
    velocity: float | None
    interval_ns: float
    dewow_ns: float | None
    #: Tie correction ``(time_zero_ns, gain)`` of this line, or None (see
    #: :mod:`slicer.pipeline.survey_ties`).
    correction: tuple[float, float] | None = None
    #: The survey's dominant frequency (GHz) that the migrated band counts in, or None for
    #: each line's own (:func:`slicer.processing.migration.migrate`).
    frequency: float | None = None


def reduce_line(job: LineJob) -> dict:
    """Read, place, process and reduce one line: its trace x slice values and what was found.

    Returns
    -------
    dict
        ``values`` (traces, slices) float32, ``x``, ``y`` (m), ``line`` (the job number),
        ``time_zero_ns``, ``history``, ``image`` (the processed envelope, or signed trace,
        decimated for its radargram: a :class:`slicer.outputs.radargram.LineImage`, plain
        arrays; None with ``settings.radargrams`` off) and ``input`` (the file's size and
        SHA-256, for the record: taken here, where the file is read anyway, so the process
        that builds never reads the survey a second time; None for the second and later
        channels of a swath).
    """
    line = load_line_samples(job.entry, job.settings, sample_interval_ns=job.interval_ns)
    settings = job.settings
    signed = settings.attribute == "signed"
    # plain arrays throughout: the same cores as the labelled steps
    done = process_samples(
        line.values, line.twt, settings, dewow_ns=job.dewow_ns, keep_trace=signed,
        distance=line.distance,
        time_zero_ns=float(line.attrs.get("time_zero_ns", 0.0)),
        history=line.attrs.get("history", ""), frequency=job.frequency,
        where=str(line.attrs.get("source", line.attrs.get("line", "line"))))
    env, trace, twt, history = done.envelope, done.trace, done.twt, done.history
    time_zero_ns = done.time_zero_ns
    if job.correction is not None:  # as slicer.processing.ties.correct_line
        from slicer.processing.ties import tie_step
        shift, gain = job.correction
        env = (env * np.float32(gain)).astype(np.float32)
        trace = (trace * np.float32(gain)).astype(np.float32) if signed else None
        twt, time_zero_ns = twt - shift, time_zero_ns + shift
        history = f"{history}; {tie_step(shift, gain)}" if history else tie_step(shift, gain)
    separation = settings.antenna_separation or 0.0
    model = _resampling_model(job.windows, job.velocity)
    # elevation slices: each trace's windows at its own depth below its own ground
    surface = (line_surface(line.x, line.y, job.entry, settings, height=line.height)
               if job.windows.axis == ELEVATION else None)
    image = None
    if settings.radargrams:  # the processed line as its radargram shows it, decimated
        from slicer.outputs.radargram import PAGE_CELLS, line_image
        constant = job.velocity is not None and not hasattr(job.velocity, "profile")
        image = line_image(
            trace if signed else env, line.x, line.y, twt,
            name=line_name(job.entry, line.attrs), most=PAGE_CELLS,
            attrs={"line": line_name(job.entry, line.attrs),  # and how to draw it:
                   "velocity": job.velocity if constant and job.windows.axis != TWT else None,
                   "windows": window_times(job.windows, job.velocity, separation=separation),
                   **({} if surface is None else {"ground": [
                       float(surface[0]), float(surface[-1]), str(settings.datum)]})})
    axis = twt
    if model is not None:  # as depth_axis_for: onto a depth axis before cutting windows
        deepest = _deepest(job.windows, surface)
        env, axis = _to_depth(env, twt, deepest, model, line.x, line.y)
        trace = _to_depth(trace, twt, deepest, model, line.x, line.y)[0] if signed else None
    if surface is not None:
        lo, hi = elevation_limits(job.windows, surface, velocity=job.velocity,
                                  separation=separation, in_depth=model is not None)
        values = window_means_varying(env, axis_values=axis, top=lo, bottom=hi)
    else:
        lo, hi = window_limits(job.windows, job.velocity, separation=separation,
                               in_depth=model is not None)
        values = _window_means_core(env, twt=axis, t_top=lo, t_bottom=hi)
    if signed:
        from slicer.processing.polarity import leading_lobe_signs_core
        signs = leading_lobe_signs_core(trace, env, axis_values=axis, top=lo, bottom=hi)
        values = values * signs * done.polarity
    return {"values": np.asarray(values, dtype=np.float32),
            "x": line.x, "y": line.y, "line": job.number,
            "file": str(job.entry.file), "traces": line.values.shape[0],
            "time_zero_ns": time_zero_ns, "history": history, "image": image,
            "input": describe_file(job.entry.file) if job.entry.channel_index == 0 else None}


def window_times(windows: Windows, velocity, *, separation: float = 0.0):
    """The slice windows as two-way times (ns) for a radargram: ``(top, bottom)``, or None when
    depth windows have no single velocity (a layered or lateral model) and for elevation
    windows (each trace has its own times)."""
    if windows.axis == TWT:
        return windows.top, windows.bottom
    if windows.axis == ELEVATION:
        return None
    if velocity is None or hasattr(velocity, "profile"):
        return None
    return window_limits(windows, velocity, separation=separation)


def line_name(entry: LineEntry, attrs: dict) -> str:
    """A line's name: the file's line name (its stem), with the channel of a swath."""
    name = str(attrs.get("line", entry.file.stem))
    return f"{name}_{entry.channel}" if entry.channel is not None else name


def _resampling_model(windows: Windows, model):
    """The velocity model a line must be resampled to depth with before its windows are cut
    (depth or elevation windows and a layered or lateral model), else None (see
    :func:`depth_axis_for`)."""
    if windows.axis not in (DEPTH, ELEVATION) or model is None or not hasattr(model, "profile"):
        return None
    return None if isinstance(model, ConstantVelocity) else model


def _deepest(windows: Windows, surface) -> float:
    """The deepest depth (m) any window reaches on a line."""
    if surface is None:
        return float(windows.bottom.max())
    return float(np.nanmax(surface)) - float(windows.bottom.min())


def _to_depth(samples: np.ndarray, twt: np.ndarray, deepest: float, model, x: np.ndarray,
              y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``samples`` resampled to the depth axis of :func:`depth_axis_for` down to ``deepest``
    (m), and that axis (m); ``x``, ``y`` (m) place the traces in a lateral model."""
    from slicer.velocity.models import _to_depth_core
    step = float(np.min(model.velocity)) * float(twt[1] - twt[0]) / 2
    depths = np.arange(0.0, max(deepest, 0.0) + 2 * step, step)
    if getattr(model, "lateral", False):
        tops, v, _ = model.profile(x, y)
    else:
        tops, v, _ = model.profile()
        v = np.broadcast_to(v, (samples.shape[0], v.size))
    return (_to_depth_core(samples, np.ascontiguousarray(v), twt=np.asarray(twt, dtype=float),
                           top_time=tops, depths=depths), depths)


def depth_axis_for(env: xr.DataArray, windows: Windows, model) -> xr.DataArray:
    """``env`` resampled to depth when depth windows meet a velocity that is not one number.

    With one velocity a depth window is a time window and nothing is resampled. With a
    layered or lateral model each trace is resampled to a depth axis whose step is the depth
    the slowest layer covers in one sample (so no sample is lost), then windows are cut in
    depth.
    """
    if windows.axis != "depth" or model is None or not hasattr(model, "profile"):
        return env
    if isinstance(model, ConstantVelocity):
        return env
    from slicer.velocity.models import to_depth_axis
    dt = float(env[TWT].values[1] - env[TWT].values[0])
    v_min = float(np.min(model.velocity))
    step = v_min * dt / 2
    depths = np.arange(0.0, float(windows.bottom.max()) + 2 * step, step)
    return to_depth_axis(env, model, depths=depths)


@dataclass
class Reduced:
    """The survey reduced to slice values: a trace x slice table plus what was learned."""

    table: xr.DataArray
    info: SurveyInfo
    windows: Windows
    dewow_ns: float | None
    lines: list[dict] = field(default_factory=list)
    #: The tie report (:func:`slicer.pipeline.survey_ties.tie_survey`), when ties were measured.
    ties: dict | None = None
    #: Size and SHA-256 of every line file (:func:`slicer.io.reading.describe_file`).
    inputs: list[dict] = field(default_factory=list)


def plan_windows(settings: BuildSettings, info: SurveyInfo) -> Windows | None:
    """The requested windows, checked against the record when time zero is fixed."""
    windows = settings.requested_windows
    if isinstance(settings.time_zero, str) or settings.slices_axis == ELEVATION:
        return windows  # elevation windows are fitted with the ground (reduce_survey)
    t0 = float(settings.time_zero)
    start, end = info.record_span_ns  # a NetCDF line's stored times may start late
    if not start <= t0 < end:
        raise SettingsError(f"time zero {settings.time_zero} ns lies outside the record "
                            f"({start:g} to {end:g} ns)", where="--time-zero")
    if windows is None:
        return None
    where = "--times" if settings.times is not None else "--depths"
    return fit_windows(windows, end - t0,
                       settings.resolved_velocity or settings.resolved_model, where)


#: Lines tried, from the first, for the survey's dominant frequency (a silent line has none).
FREQUENCY_LINES = 5


def _survey_frequency(settings: BuildSettings, info: SurveyInfo,
                      first: xr.DataArray) -> float | None:
    """The dominant frequency (GHz) of the first of the first :data:`FREQUENCY_LINES` lines
    that has one (a silent line has none; ``first`` is the first line, loaded), or None."""
    for k in range(min(FREQUENCY_LINES, len(settings.lines))):
        line = first if k == 0 else load_line(settings.lines[k], settings,
                                              sample_interval_ns=info.sample_interval_ns)
        line = correct_time_zero(line, time_zero=settings.time_zero,
                                 threshold=settings.time_zero_threshold)
        try:
            return dominant_frequency(line)
        except SettingsError:
            continue
    return None


def reduce_survey(settings: BuildSettings, *, engine: Engine | None = None,
                  info: SurveyInfo | None = None, progress: bool = True,
                  on_image=None) -> Reduced:
    """Read, place, process and reduce every line of the survey to its slice values.

    Parameters
    ----------
    settings : BuildSettings
        The build.
    engine : Engine, optional
        Where the line tasks run; default a pool of threads on this machine.
    info : SurveyInfo, optional
        The survey's headers, if already read.
    progress : bool
        Show a progress bar (on a terminal).
    on_image : callable, optional
        Called with each line's ``image`` (see :func:`reduce_line`), as the DataArray of
        :func:`slicer.outputs.radargram.display_image`, as its task returns, in line order;
        without it the images are dropped.

    Returns
    -------
    Reduced
        ``table``, dims ``(trace, slice)``, with per-trace ``x``, ``y`` (m) and ``line`` (the
        line's index in ``settings.lines``) and per-slice ``top``, ``bottom``; the survey's
        headers, the windows, the dewow window (ns, None when not automatic), each line's
        file, trace count, time zero (ns) and processing history, the tie report and the
        input files' sizes and checksums.
    """
    if engine is None:
        with Engine(parse_scheduler("threads")) as own:
            return reduce_survey(settings, engine=own, info=info, progress=progress,
                                 on_image=on_image)
    info = info or survey_info(settings.lines, sample_interval_ns=settings.sample_interval)
    velocity = settings.resolved_velocity or settings.resolved_model
    where = "--times" if settings.times is not None else "--depths"
    windows = plan_windows(settings, info)

    record_ns = (info.record_span_ns[1] - float(settings.time_zero)
                 if not isinstance(settings.time_zero, str) else None)
    dewow_ns, first, frequency = None, None, None
    # one migrated band for the survey (the first line's dominant frequency): every line is
    # migrated alike, and lines of one size share one Stolt operator (per-line bands built
    # 13 operators for the 81 lines of benchmarks/line_task.py, a third of the line tasks)
    migrated = migration_method(settings)[0] != "off"
    if settings.dewow == "auto" or migrated or windows is None or record_ns is None:
        first = load_line(settings.lines[0], settings, sample_interval_ns=info.sample_interval_ns)
    if settings.dewow == "auto" or migrated:
        frequency = _survey_frequency(settings, info, first)
        if settings.dewow == "auto":
            if frequency is None:
                raise SettingsError(f"no dominant frequency for the dewow window in the first "
                                    f"{FREQUENCY_LINES} lines (silent?); give the window in ns",
                                    where="--dewow")
            dewow_ns = 1.5 / frequency
        frequency = frequency if migrated else None
    elevation = settings.slices_axis == ELEVATION
    if windows is None or record_ns is None:
        env = process_line(first, settings, dewow_ns=dewow_ns, frequency=frequency)
        record_ns = float(env[TWT].values[-1])
        if not elevation:
            windows = (default_windows(record_ns, velocity) if windows is None
                       else fit_windows(windows, record_ns, velocity, where))
    if elevation:  # fitted to the ground's range and the depth the record reaches
        low, high = survey_surface(settings, info)
        reach = reach_depth(velocity, record_ns)
        windows = plan_elevation_windows(windows, low=low, high=high, reach=reach,
                                         step=nice_number(reach / 20))  # as default_windows
    ties, corrections = None, {}
    if settings.ties != "off":
        from slicer.pipeline.survey_ties import tie_survey
        ties, corrections = tie_survey(settings, engine=engine, info=info, dewow_ns=dewow_ns,
                                       progress=progress)
    jobs = [LineJob(k, entry, settings, windows, velocity, info.sample_interval_ns, dewow_ns,
                    corrections.get(k), frequency)
            for k, entry in enumerate(settings.lines)]
    sizes = [line.n_traces for line in info.lines]
    results, table = [], _TableFill(sum(sizes))
    for r in engine.map(reduce_line, jobs, desc="reading and processing", unit="trace",
                        progress=progress, weights=sizes):
        image = r.pop("image")  # handed on as it comes: never every line's image at once
        if image is not None and on_image is not None:
            on_image(image.labelled())  # labelled here: see LineImage
        table.add(r)  # the line's values, x and y go into the table, and from the result
        results.append(r)
    from slicer.processing.fk import release_operators
    release_operators()  # this process's, from line tasks run here (35-43 MB each at 1 M)
    inputs = [r["input"] for r in results if r["input"] is not None]
    return Reduced(table=table.table(windows), info=info, windows=windows,
                   inputs=inputs,
                   dewow_ns=dewow_ns, ties=ties,
                   lines=[{k: r[k] for k in ("file", "traces", "time_zero_ns", "history")}
                          for r in results])


def assemble_table(results: list[dict], windows: Windows) -> xr.DataArray:
    """Concatenate per-line results into one ``(trace, slice)`` table with positions."""
    values = np.concatenate([r["values"] for r in results], axis=0)
    x = np.concatenate([r["x"] for r in results])
    y = np.concatenate([r["y"] for r in results])
    line = np.concatenate([np.full(r["traces"], r["line"], np.int32) for r in results])
    return _table(values, x, y, line, windows)


def _table(values, x, y, line, windows: Windows) -> xr.DataArray:
    import xarray as xr
    u = windows.units
    return xr.DataArray(
        values, dims=(TRACE, "slice"), name="value",
        coords={"x": (TRACE, x, {"units": "m"}), "y": (TRACE, y, {"units": "m"}),
                "line": (TRACE, line),
                "top": ("slice", windows.top, {"units": u, "axis": windows.axis}),
                "bottom": ("slice", windows.bottom, {"units": u, "axis": windows.axis})})


class _TableFill:
    """:func:`assemble_table` filled line by line as the results come in: the table is held
    once, not also as every line's piece until they are joined (96 MB of values and 16 MB of
    positions at 1 M traces). ``traces`` (from the headers) sizes it; a line holding more
    traces than that grows it."""

    def __init__(self, traces: int):
        self.capacity, self.n, self.parts = traces, 0, None

    def add(self, r: dict) -> None:
        values, x, y, k = r.pop("values"), r.pop("x"), r.pop("y"), r["traces"]
        if self.parts is None:
            self.parts = [np.empty((self.capacity, *values.shape[1:]), values.dtype),
                          np.empty(self.capacity, x.dtype), np.empty(self.capacity, y.dtype),
                          np.empty(self.capacity, np.int32)]
        if self.n + k > self.capacity:
            self.capacity = 2 * (self.n + k)
            self.parts = [np.concatenate([p[:self.n], np.empty((self.capacity - self.n,
                                                                *p.shape[1:]), p.dtype)])
                          for p in self.parts]
        for part, piece in zip(self.parts, (values, x, y, r["line"]), strict=True):
            part[self.n:self.n + k] = piece
        self.n += k

    def table(self, windows: Windows) -> xr.DataArray:
        if self.parts is None:
            raise ValueError("no line in the survey")
        return _table(*(p[:self.n] for p in self.parts), windows)
