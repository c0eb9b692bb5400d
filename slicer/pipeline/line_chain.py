"""The processing chain of a build, run on one placed line: time zero, dewow, background
removal, migration, gain and envelope, each as the build's settings say."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError, warn
from slicer.pipeline.settings import BuildSettings
from slicer.processing.background import parse_background
from slicer.processing.steps import correct_time_zero, envelope, process_chain
from slicer.velocity.models import ConstantVelocity

if TYPE_CHECKING:
    import xarray as xr


def dewow_window(settings: BuildSettings, dewow_ns: float | None) -> float | str | None:
    """The dewow window (ns) of a build, ``"off"``, or None for the default of :func:`dewow`.

    ``dewow_ns`` is the survey's window when ``settings.dewow`` is ``"auto"``.
    """
    if settings.dewow == "off":
        return "off"
    return float(settings.dewow) if settings.dewow != "auto" else dewow_ns


def migration_method(settings: BuildSettings) -> tuple[str, str | None]:
    """The migration a build runs, ``"stolt"``, ``"phase-shift"`` or ``"off"``, and why it is
    off when ``settings.migrate`` is ``"auto"`` but nothing can run (else None).

    ``"auto"`` migrates depth slices: Stolt for one velocity (a layered model whose layers all
    have one velocity counts as one), phase shift for layers. Time slices, a build without a
    velocity and a lateral model are not migrated; the last is said, because its depth slices
    then show each buried object's hyperbola flanks as well as the object itself.
    """
    from slicer.velocity.models import LayeredVelocity
    if settings.migrate != "auto":
        return settings.migrate, None
    model = settings.resolved_model
    if model is None or settings.times is not None:
        return "off", None  # time slices: migration is asked for by name
    if getattr(model, "lateral", False):
        return "off", ("no migration: the velocity model changes sideways, and no 2-D "
                       "migration here handles lateral change; give --migrate stolt to migrate "
                       "with its median velocity, or --migrate off")
    if isinstance(model, LayeredVelocity) and len(set(model.velocity)) > 1:
        return "phase-shift", None
    return "stolt", None


def process_line(line: xr.DataArray, settings: BuildSettings, *,
                 dewow_ns: float | None = None, keep_trace: bool = False,
                 frequency: float | None = None):
    """Run the processing chain of ``settings`` on one placed line; returns its envelope.

    The steps after time zero run fused on one array
    (:func:`slicer.processing.steps.process_chain`, equal to the single steps); migration
    (:func:`migration_method`) sits between background removal and gain, so the chain runs in
    two fused parts around it. A build's line task runs the same chain on plain arrays
    (:func:`process_samples`).

    Parameters
    ----------
    line : xarray.DataArray
        A placed line, dims ``(trace, twt)``, ``twt`` in ns, per-trace ``distance`` (m) for
        migration.
    settings : BuildSettings
        The build's settings: time zero, dewow, background, migration, gain.
    dewow_ns : float, optional
        The dewow window (ns) when ``settings.dewow`` is ``"auto"`` (a build resolves it
        once, from the first line); None takes it from this line's dominant frequency.
    keep_trace : bool
        Also return the processed trace and the direct wave's polarity (signed slices).
    frequency : float, optional
        The dominant frequency (GHz) the migrated band counts in (a build's is its first
        line's, for every line); None: this line's own.

    Returns
    -------
    xarray.DataArray or tuple
        The envelope (float32, ``twt`` from time zero, the steps in ``attrs["history"]``); with
        ``keep_trace``, ``(envelope, trace, polarity)``: also the processed trace before the
        envelope and the direct wave's polarity (+1 or -1, read before background removal;
        :func:`slicer.processing.polarity.direct_wave_polarity`).
    """
    separation = settings.antenna_separation or 0.0
    line = correct_time_zero(line, time_zero=settings.time_zero,
                             threshold=settings.time_zero_threshold, separation=separation)
    polarity = None
    if keep_trace:
        from slicer.processing.polarity import direct_wave_polarity
        from slicer.processing.steps import dominant_frequency
        # time zero sits before the direct wave's peak by the separation's air time
        reach = 1.0 / dominant_frequency(line) + separation / C_M_PER_NS
        polarity = direct_wave_polarity(line, period_ns=reach)
    window = dewow_window(settings, dewow_ns)
    method, _ = migration_method(settings)
    gain = settings.gain_curve
    if method == "off" and not keep_trace:
        return process_chain(line, dewow_ns=window, background=settings.background,
                             gain=gain)
    line = process_chain(line, dewow_ns=window, background=settings.background, gain=None,
                         take_envelope=False)
    if method != "off":
        line = migrate_line(line, settings, method=method, frequency=frequency)
    if not keep_trace:
        return process_chain(line, dewow_ns="off", background=None, gain=gain)
    trace = process_chain(line, dewow_ns="off", background=None, gain=gain,
                          take_envelope=False)
    return envelope(trace), trace, polarity


def migrate_line(line: xr.DataArray, settings: BuildSettings, *,
                 method: str | None = None, frequency: float | None = None) -> xr.DataArray:
    """Migrate one line with the build's velocity: Stolt for one velocity, phase shift for
    layers (a lateral model is migrated with its median velocity, which is said).

    ``method`` defaults to the one :func:`migration_method` chooses from ``settings``;
    ``frequency`` (GHz) as for :func:`slicer.processing.migration.migrate`.
    """
    from slicer.processing.migration import migrate
    return migrate(line, **migration_arguments(settings, method=method), frequency=frequency)


def migration_arguments(settings: BuildSettings, *, method: str | None = None) -> dict:
    """The keywords of :func:`slicer.processing.migration.migrate` (velocity, layer tops,
    method) that :func:`migrate_line` migrates a line of ``settings`` with."""
    from slicer.velocity.models import LayeredVelocity
    if method is None:
        method, _ = migration_method(settings)
    model = settings.resolved_model
    if isinstance(model, LayeredVelocity):
        if method == "stolt" and len(set(model.velocity)) == 1:
            return {"velocity": float(model.velocity[0]), "method": "stolt"}
        if method == "stolt":
            raise SettingsError("Stolt migration needs one velocity; use phase-shift with a "
                                "layered model", where="--migrate")
        return {"velocity": list(model.velocity), "layer_tops": list(model.top_time),
                "tops": "twt", "method": "phase-shift"}
    velocity = (model.velocity if isinstance(model, ConstantVelocity)
                else float(np.median(model.velocity)))
    return {"velocity": velocity, "method": method}


@dataclass
class ProcessedSamples:
    """One line processed as plain arrays (:func:`process_samples`)."""

    #: Envelope, ``(trace, twt)`` float32.
    envelope: np.ndarray
    #: Two-way time (ns) since time zero of every sample.
    twt: np.ndarray
    #: The processed trace before the envelope (with ``keep_trace``), else None.
    trace: np.ndarray | None
    #: The direct wave's polarity, +1 or -1 (with ``keep_trace``), else None.
    polarity: int | None
    #: Time zero (ns) on the file's time axis, as ``attrs["time_zero_ns"]``.
    time_zero_ns: float
    #: The steps, as ``attrs["history"]`` of :func:`process_line`'s envelope.
    history: str


def process_samples(samples: np.ndarray, twt: np.ndarray, settings: BuildSettings, *,
                    distance: np.ndarray | None = None, dewow_ns: float | None = None,
                    keep_trace: bool = False, time_zero_ns: float = 0.0, history: str = "",
                    frequency: float | None = None, where: str = "line") -> ProcessedSamples:
    """:func:`process_line` on plain ``(trace, twt)`` samples: the same cores in the same
    order, without a DataArray per step (a build's line task; the labelled steps cost more
    than the floor of reading and taking envelopes).

    ``twt`` (ns) is the samples' time axis, ``distance`` (m) their places along the line (for
    migration), ``time_zero_ns`` and ``history`` what the line carried in, ``frequency`` as
    for :func:`process_line`.
    """
    from slicer.processing.steps import (
        _chain_core,
        _envelope_core,
        chain_plan,
        chain_step,
        dominant_frequency_of,
        time_zero_of,
    )
    steps = [history] if history else []
    separation = settings.antenna_separation or 0.0
    window = dewow_window(settings, dewow_ns)
    own = None  # the line's dominant frequency: taken once, for time zero, polarity, dewow
    if settings.time_zero == "auto" or keep_trace or window is None:
        if twt.size < 2:
            raise SettingsError("a line needs at least two samples per trace", where=where)
        own = dominant_frequency_of(samples, dt=float(twt[1] - twt[0]), where=where)
        window = 1.5 / own if window is None else window
    t0, how = time_zero_of(samples, twt, time_zero=settings.time_zero,
                           threshold=settings.time_zero_threshold, separation=separation,
                           frequency=own, where=where)
    twt, polarity = twt - t0, None
    steps.append(how)
    if keep_trace:
        from slicer.processing.polarity import direct_wave_polarity_of
        reach = 1.0 / own + separation / C_M_PER_NS
        polarity = direct_wave_polarity_of(samples, twt, period_ns=reach, where=where)
    method, _ = migration_method(settings)
    if method == "off":  # one fused part: the envelope too, unless the trace is kept
        core, done = chain_plan(samples, twt, dewow_ns=window, background=settings.background,
                                gain=settings.gain_curve, take_envelope=not keep_trace)
        out = _chain_core(samples, **core)
        steps += done
    else:
        from slicer.processing.migration import migration_plan, spacing_of
        if distance is None:
            raise SettingsError("the line has no 'distance' coordinate to take a trace "
                                "spacing from", where=where)
        core, done = chain_plan(samples, twt, dewow_ns=window, background=settings.background,
                                gain=None, take_envelope=False)
        x, prepare = chain_step(samples, **core)
        # after migration: gain and envelope (unless the trace is kept); both parts run on
        # each block of traces as migration takes it and hands it back
        core, after = chain_plan(x, twt, dewow_ns="off", background=None,
                                 gain=settings.gain_curve, take_envelope=not keep_trace)
        migrated, how, _ = migration_plan(twt, dx=spacing_of(distance, where=where),
                                          **migration_arguments(settings, method=method),
                                          frequency=frequency, where=where)
        out = migrated(x, prepare=prepare, finish=chain_step(x, **core)[1])
        steps += [*done, how, *after]
    trace = None
    if keep_trace:
        trace, out = out, _envelope_core(out)
        steps.append("envelope")
    return ProcessedSamples(out, twt, trace if keep_trace else None, polarity,
                            time_zero_ns + t0, "; ".join(steps))


def processing_summary(settings: BuildSettings, dewow_ns: float | None = None) -> str:
    """One line describing the processing chain, for file tags and the overview.

    A build calls it once: when ``migrate = "auto"`` cannot migrate a lateral velocity model,
    this is where the build says so (a :class:`~slicer.core.errors.SlicerWarning`).
    """
    steps = [f"time zero {settings.time_zero} ns" if settings.time_zero != "auto"
             else "time zero auto (direct-wave pick per line)"]
    if settings.dewow != "off":
        window = dewow_ns if settings.dewow == "auto" else float(settings.dewow)
        steps.append(f"dewow {window:.2f} ns" if window else "dewow auto")
    background = parse_background(settings.background)
    if background is not None:
        steps.append(background.describe())
    method, why_off = migration_method(settings)
    if method != "off":
        steps.append(f"{method} migration")
    if why_off is not None:
        warn(why_off)
    steps.append(f"gain {settings.gain}" if settings.gain_curve else "no gain")
    steps.append("envelope (Hilbert)")
    if settings.attribute == "signed":
        steps.append("signed by each window's strongest reflection against the direct wave")
    if settings.antenna_separation:
        steps.append(f"antenna separation {settings.antenna_separation:g} m")
    if settings.level:
        steps.append("line levelling")
    return "; ".join(steps)
