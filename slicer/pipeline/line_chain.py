"""The processing chain of a build, run on one placed line: time zero, dewow, background
removal, migration, gain and envelope, each as the build's settings say."""

from __future__ import annotations

import numpy as np
import xarray as xr

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError, warn
from slicer.pipeline.settings import BuildSettings
from slicer.processing.background import parse_background
from slicer.processing.steps import correct_time_zero, envelope, process_chain
from slicer.velocity.models import ConstantVelocity


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
                 dewow_ns: float | None = None, keep_trace: bool = False):
    """Run the processing chain of ``settings`` on one placed line; returns its envelope.

    ``dewow_ns`` fixes the dewow window when ``settings.dewow`` is ``"auto"`` (the build
    resolves it once, from the first line). The steps after time zero run fused on one array
    (:func:`slicer.processing.steps.process_chain`, equal to the single steps); migration
    (:func:`migration_method`) sits between background removal and gain, so the chain runs in
    two fused parts around it.

    With ``keep_trace`` it returns ``(envelope, trace, polarity)``: also the processed trace
    before the envelope and the direct wave's polarity (+1 or -1, read before background
    removal; :func:`slicer.processing.polarity.direct_wave_polarity`), for signed slices.
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
        line = migrate_line(line, settings, method=method)
    if not keep_trace:
        return process_chain(line, dewow_ns="off", background=None, gain=gain)
    trace = process_chain(line, dewow_ns="off", background=None, gain=gain,
                          take_envelope=False)
    return envelope(trace), trace, polarity


def migrate_line(line: xr.DataArray, settings: BuildSettings, *,
                 method: str | None = None) -> xr.DataArray:
    """Migrate one line with the build's velocity: Stolt for one velocity, phase shift for
    layers (a lateral model is migrated with its median velocity, which is said).

    ``method`` defaults to the one :func:`migration_method` chooses from ``settings``.
    """
    from slicer.processing.migration import migrate
    from slicer.velocity.models import LayeredVelocity
    if method is None:
        method, _ = migration_method(settings)
    model = settings.resolved_model
    if isinstance(model, LayeredVelocity):
        if method == "stolt" and len(set(model.velocity)) == 1:
            return migrate(line, velocity=float(model.velocity[0]), method="stolt")
        if method == "stolt":
            raise SettingsError("Stolt migration needs one velocity; use phase-shift with a "
                                "layered model", where="--migrate")
        return migrate(line, velocity=list(model.velocity), layer_tops=list(model.top_time),
                       tops="twt", method="phase-shift")
    velocity = (model.velocity if isinstance(model, ConstantVelocity)
                else float(np.median(model.velocity)))
    return migrate(line, velocity=velocity, method=method)


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
