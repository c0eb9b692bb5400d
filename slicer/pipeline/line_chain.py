"""The processing chain of a build, run on one placed line: time zero, dewow, background
removal, migration, gain and envelope, each as the build's settings say."""

from __future__ import annotations

import numpy as np
import xarray as xr

from slicer.core.errors import SettingsError
from slicer.pipeline.settings import BuildSettings
from slicer.processing.steps import (
    apply_gain,
    correct_time_zero,
    dewow,
    envelope,
    process_chain,
    remove_background,
)
from slicer.velocity.models import ConstantVelocity


def dewow_window(settings: BuildSettings, dewow_ns: float | None) -> float | str | None:
    """The dewow window (ns) of a build, ``"off"``, or None for the default of :func:`dewow`.

    ``dewow_ns`` is the survey's window when ``settings.dewow`` is ``"auto"``.
    """
    if settings.dewow == "off":
        return "off"
    return float(settings.dewow) if settings.dewow != "auto" else dewow_ns


def process_line(line: xr.DataArray, settings: BuildSettings, *,
                 dewow_ns: float | None = None) -> xr.DataArray:
    """Run the processing chain of ``settings`` on one placed line; returns its envelope.

    ``dewow_ns`` fixes the dewow window when ``settings.dewow`` is ``"auto"`` (the build
    resolves it once, from the first line). Without migration the steps after time zero run
    fused on one array (:func:`slicer.processing.steps.process_chain`, equal to the single steps);
    migration sits between background removal and gain, so it runs them one by one.
    """
    line = correct_time_zero(line, time_zero=settings.time_zero,
                             threshold=settings.time_zero_threshold)
    window = dewow_window(settings, dewow_ns)
    background = settings.background if settings.background != "off" else None
    if settings.migrate == "off":
        return process_chain(line, dewow_ns=window, background=background,
                             gain=settings.gain_curve)
    if window != "off":
        line = dewow(line, window_ns=window)
    if background is not None:
        line = remove_background(line, method=background)
    line = migrate_line(line, settings)
    if settings.gain_curve is not None:
        kind, value = settings.gain_curve
        line = apply_gain(line, kind=kind, value=value)
    return envelope(line)


def migrate_line(line: xr.DataArray, settings: BuildSettings) -> xr.DataArray:
    """Migrate one line with the build's velocity: Stolt for one velocity, phase shift for
    layers (a lateral model is migrated with its median velocity, which is said)."""
    from slicer.processing.migration import migrate
    from slicer.velocity.models import LayeredVelocity
    model = settings.resolved_model
    if isinstance(model, LayeredVelocity):
        if settings.migrate == "stolt":
            raise SettingsError("Stolt migration needs one velocity; use phase-shift with a "
                                "layered model", where="--migrate")
        return migrate(line, velocity=list(model.velocity), layer_tops=list(model.top_time),
                       tops="twt", method="phase-shift")
    velocity = (model.velocity if isinstance(model, ConstantVelocity)
                else float(np.median(model.velocity)))
    return migrate(line, velocity=velocity, method=settings.migrate)


def processing_summary(settings: BuildSettings, dewow_ns: float | None = None) -> str:
    """One line describing the processing chain, for file tags and the overview."""
    steps = [f"time zero {settings.time_zero} ns" if settings.time_zero != "auto"
             else "time zero auto (direct-wave pick per line)"]
    if settings.dewow != "off":
        window = dewow_ns if settings.dewow == "auto" else float(settings.dewow)
        steps.append(f"dewow {window:.2f} ns" if window else "dewow auto")
    if settings.background != "off":
        steps.append(f"background removal ({settings.background} trace)")
    if settings.migrate != "off":
        steps.append(f"{settings.migrate} migration")
    steps.append(f"gain {settings.gain}" if settings.gain_curve else "no gain")
    steps.append("envelope (Hilbert)")
    if settings.level:
        steps.append("line levelling")
    return "; ".join(steps)
