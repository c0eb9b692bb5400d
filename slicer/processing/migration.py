"""2-D migration of radar lines: Stolt f-k migration and Gazdag phase-shift migration.

Migration moves every reflection to where it came from: a diffraction hyperbola collapses to a
focus at its apex and dipping reflectors steepen to their true position. Both methods use the
exploding-reflector model of zero-offset data: every reflector fires at ``t = 0`` and the waves
travel one way at half the radar velocity, ``v / 2``, so that one-way time in that model is the
recorded two-way time.

* ``stolt`` (Stolt 1978, Geophysics 43:23-48): for one constant velocity, the 2-D spectrum
  ``P(kx, w)`` of the line is mapped onto the migrated spectrum
  ``M(kx, w') = P(kx, w) w' / w`` with ``w = sqrt(w'^2 + (v kx / 2)^2)``, interpolating in
  frequency (least-squares weights on the nearest samples, for a signal that lasts the
  record; the whole mapping of a line is one sparse matrix, built once for lines of one size).
* ``phase-shift`` (Gazdag 1978, Geophysics 43:1342-1351): the wavefield is continued downward
  by multiplying by ``exp(i T sqrt(w^2 - (v kx / 2)^2))`` with the interval velocity ``v``
  over a two-way time ``T``, and imaged at ``t = 0``; velocity may change with depth (flat
  layers). Each layer of one velocity is crossed in one step, and the times within it are
  imaged with Stolt's mapping at its velocity, which is what the continuation sample by
  sample sums to; a velocity that changes at many depths is stepped sample by sample.

Only frequencies up to a few times the line's dominant frequency (or a given one: a build gives
its survey's, so that every line is migrated alike) are migrated (``band``); those above,
where a radar wavelet has next to nothing and noise much, pass through unchanged. The output
keeps the line's time axis (the vertical two-way time of the migrated image), so the rest of
the pipeline - envelope, depth conversion, slices - runs unchanged.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import DISTANCE, TRACE, TWT
from slicer.core.errors import SettingsError, warn
from slicer.core.line_checks import checked_line
from slicer.core.numbers import real
from slicer.core.physics import check_velocity
from slicer.processing.fk import in_blocks, phase_shift_core, stolt_blocks
from slicer.processing.trace_basics import add_history

if TYPE_CHECKING:
    import xarray as xr

#: A step on a block of traces: ``(traces, twt)`` samples in, the same shape out.
Block = Callable[[np.ndarray], np.ndarray]

__all__ = ["interval_velocity", "migrate", "migration_plan", "spacing_of", "trace_spacing"]

#: Migration methods understood by :func:`migrate`.
METHODS = ("stolt", "phase-shift")

#: Zero padding of the time axis (times the record) for Stolt's mapping (see :func:`migrate`).
PAD = 1.5

#: Relative spread of the trace steps above which :func:`trace_spacing` warns.
UNEVEN_TOLERANCE = 0.1


def trace_spacing(line: xr.DataArray) -> float:
    """Trace spacing (m) of a line: the median step of its ``distance`` coordinate.

    Migration assumes evenly spaced traces. Real lines are never quite even (wheel slip, a
    pause); the median step is the spacing that most of the line has. A warning is issued when
    steps differ from it by more than :data:`UNEVEN_TOLERANCE` (10 %) of it; interpolate such a
    line onto even positions first when accuracy matters.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)`` with a per-trace ``distance`` coordinate (m).
    """
    name = str(line.attrs.get("source", line.attrs.get("line", "line")))
    if DISTANCE not in line.coords:
        raise SettingsError("the line has no 'distance' coordinate to take a trace spacing from",
                            where=name)
    return spacing_of(line[DISTANCE].values, where=name)


def spacing_of(distance: np.ndarray, *, where: str = "line") -> float:
    """:func:`trace_spacing` of the traces at ``distance`` (m) along a line."""
    if len(distance) < 2:
        raise SettingsError("migration needs at least two traces", where=where)
    steps = np.abs(np.diff(np.asarray(distance, dtype=float)))
    dx = float(np.median(steps))
    if not (math.isfinite(dx) and dx > 0):
        raise SettingsError("traces are not spaced along the line (median step 0 m)", where=where)
    spread = float(np.max(np.abs(steps - dx))) / dx
    if spread > UNEVEN_TOLERANCE:
        warn(f"{where}: trace steps vary by up to {spread:.0%} of the median "
             f"{dx:.4g} m; migration assumes even spacing")
    return dx


def interval_velocity(velocity, *, layer_tops=None, tops: str = "twt",
                      where: str = "--migration-velocity") -> Callable[[np.ndarray], np.ndarray]:
    """Interval velocity (m/ns) as a function of vertical two-way time (ns).

    Parameters
    ----------
    velocity : float, sequence of float or callable
        One velocity for the whole section; or the interval velocity of each layer, with
        ``layer_tops``; or a function from two-way time (ns, array) to interval velocity.
    layer_tops : sequence of float, optional
        Top of each layer, ascending, the first 0: two-way time below time zero (ns) when
        ``tops="twt"``, depth (m) when ``tops="depth"``. A layer reaches down to the next top;
        the last one to the end of the record.
    tops : {"twt", "depth"}
        Unit of ``layer_tops``.
    where : str
        Option name used in error messages.

    Returns
    -------
    callable
        ``f(twt_ns) -> velocity`` (m/ns), vectorised.
    """
    if callable(velocity):
        if layer_tops is not None:
            raise SettingsError("give layer tops with a list of velocities, not a function",
                                where=where)

        def checked(twt):
            v = np.broadcast_to(np.asarray(velocity(np.asarray(twt, dtype=float)), dtype=float),
                                np.shape(twt))
            for value in np.unique(v):
                check_velocity(value, where=where)
            return v
        return checked
    if layer_tops is None:
        if np.ndim(velocity) != 0:
            raise SettingsError("several velocities need layer_tops", where=where)
        v = check_velocity(velocity, where=where)
        return lambda twt: np.full(np.shape(twt), v)
    try:
        speeds = np.atleast_1d(np.asarray(velocity, dtype=float))
        top = np.atleast_1d(np.asarray(layer_tops, dtype=float))
    except (TypeError, ValueError):
        raise SettingsError("velocities and layer tops must be numbers", where=where) from None
    if speeds.ndim != 1 or speeds.shape != top.shape:
        raise SettingsError(f"{speeds.size} velocities for {top.size} layer tops", where=where)
    for value in speeds:
        check_velocity(value, where=where)
    if not (np.isfinite(top).all() and top[0] == 0 and np.all(np.diff(top) > 0)):
        raise SettingsError("layer tops must ascend from 0", where=where)
    if tops == "depth":
        # two-way time of each top: the layers above it, each crossed twice at its velocity
        top = np.concatenate([[0.0], np.cumsum(2.0 * np.diff(top) / speeds[:-1])])
    elif tops != "twt":
        raise SettingsError(f"layer tops must be 'twt' (ns) or 'depth' (m), got {tops!r}",
                            where=where)
    return lambda twt: speeds[np.searchsorted(top, np.asarray(twt, dtype=float),
                                              side="right") - 1]


def migrate(line: xr.DataArray, *, velocity, method: str = "stolt", layer_tops=None,
            tops: str = "twt", taper: float = 0.2, pad: float = PAD,
            band: float | None = 4.0, frequency: float | None = None) -> xr.DataArray:
    """Migrate a line (2-D, zero offset), before the envelope.

    The line must be time-zero corrected (``twt = 0`` at the surface). Samples at negative
    times (above the surface) are passed through unchanged and only the samples from the first
    non-negative time on are migrated; their clock (which may not start exactly at 0) is
    honoured by a phase shift, and the result is returned on the line's own ``twt`` axis. The
    traces are zero-padded by the farthest any energy can move sideways (half the velocity
    times the record's length, and a little more) and the samples to ``pad`` times theirs, so
    that the periodic FFT does not fold tails of hyperbolas back into the line. Traces are
    assumed evenly spaced at the median step of ``distance`` (:func:`trace_spacing`). The
    work is done in single precision (float32 samples, complex64 spectra).

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``, ``twt`` in ns from time zero, per-trace ``distance`` (m).
    velocity : float, sequence of float or callable
        Radar velocity, m/ns: one value (``stolt`` or ``phase-shift``), or interval velocities
        by layer with ``layer_tops``, or a function of two-way time (``phase-shift`` only); see
        :func:`interval_velocity`. The exploding-reflector model uses half of it.
    method : {"stolt", "phase-shift"}
        Stolt (1978) f-k migration for a constant velocity, or Gazdag (1978) phase-shift
        migration, which honours velocities changing with depth: one step per layer (and
        Stolt's mapping within it) for up to 16 layers
        (:data:`slicer.processing.fk.MAX_LAYERS`), else one step per sample (much slower).
    layer_tops : sequence of float, optional
        Layer tops for ``phase-shift``, ascending from 0, in the unit given by ``tops``.
    tops : {"twt", "depth"}
        ``layer_tops`` in two-way time (ns) or depth (m).
    taper : float
        Fraction (0-1) of the wavenumber band, below the trace spacing's Nyquist wavenumber
        ``pi / dx``, over which a cosine taper fades steep, possibly aliased dips to zero.
    pad : float
        Zero-padding factor of the time axis (1.25 to 4): more is more accurate for Stolt's
        reading of the spectrum between its samples (:func:`slicer.processing.fk.spectral_weights`,
        least squares over the record on the eight nearest samples) and costs more. With the
        default 1.5 a diffractor's image is as close to Gazdag's sample steps as a polynomial
        through six samples came with twice the record, or closer (0.012 against 0.022
        relative RMS near the end of the record), for about three quarters of the work.
        ``phase-shift`` pads its layers the same way, plus the deepest layer top's share of the
        record, and to at least twice the record; stepped sample by sample, it always pads to
        twice the record.
    band : float or None
        Migrate the frequencies up to ``band`` times the line's dominant frequency (the peak
        of its mean amplitude spectrum); those above pass through unchanged. A radar wavelet
        holds next to nothing there (a Ricker wavelet's amplitude at four times its peak
        frequency is 5e-6 of the peak), while recorded noise often spreads up to the
        Nyquist frequency; leaving it out makes migration several times cheaper. None
        migrates every frequency.
    frequency : float, optional
        The dominant frequency (GHz) that ``band`` counts in, instead of the line's own: a
        build gives its survey's, so that every line migrates the same band (and lines of one
        size share one Stolt operator).

    Returns
    -------
    xarray.DataArray
        The migrated line, same dims, coordinates and dtype (float32), with the step appended
        to ``attrs["history"]`` and ``attrs["migration_velocity"]`` (m/ns, constant methods).

    Raises
    ------
    SettingsError
        Unknown method, velocity not between 0 and c, layered velocity with ``stolt``, a line
        without ``distance`` or with no sample at or after time zero, or a bad taper or pad.
    """
    import xarray as xr
    checked_line(line, step="migrate", traces=True)
    dx = trace_spacing(line)
    apply, how, v_const = migration_plan(
        np.asarray(line[TWT].values, dtype=float), dx=dx, velocity=velocity, method=method,
        layer_tops=layer_tops, tops=tops, taper=taper, pad=pad, band=band, frequency=frequency,
        where=str(line.attrs.get("source", line.attrs.get("line", "line"))))
    if line.chunks is None and line.dims == (TRACE, TWT):  # the build's case: one array
        out = line.copy(deep=False, data=apply(line.values))
    else:
        data = line.chunk({TRACE: -1, TWT: -1}) if line.chunks is not None else line
        out = xr.apply_ufunc(apply, data, input_core_dims=[[TRACE, TWT]],
                             output_core_dims=[[TRACE, TWT]], dask="parallelized",
                             output_dtypes=[np.float32], keep_attrs=True)
        out = out.transpose(*line.dims)
    attrs = dict(line.attrs)
    if v_const is not None:
        attrs["migration_velocity"] = v_const
    out.attrs = attrs
    return add_history(out, how)


def migration_plan(twt: np.ndarray, *, dx: float, velocity, method: str = "stolt",
                   layer_tops=None, tops: str = "twt", taper: float = 0.2, pad: float = PAD,
                   band: float | None = 4.0, frequency: float | None = None,
                   where: str = "line"
                   ) -> tuple[Callable[..., np.ndarray], str, float | None]:
    """The migration of :func:`migrate` for ``(..., trace, twt)`` samples on the axis ``twt``
    (ns), traces ``dx`` m apart: a function from samples to migrated float32 samples, the
    words for the history, and the velocity (m/ns) when it is one constant (else None).

    The function takes the steps before and after migration as keywords, ``prepare`` and
    ``finish`` (each from a block of ``(trace, twt)`` samples to the processed block), and runs
    them on each block of traces as Stolt transforms it along time (a build's line task:
    :func:`slicer.processing.fk.stolt_blocks`); phase shift gathers the prepared blocks into
    one array, migrates it whole and finishes it block by block
    (:func:`slicer.processing.fk.in_blocks`)."""
    if method not in METHODS:
        raise SettingsError(f"migration method must be one of {', '.join(METHODS)}, got "
                            f"{method!r}", where="--migration")
    if not 0 <= real(taper, where="taper") < 1:
        raise SettingsError(f"wavenumber taper must be in [0, 1), got {taper!r}",
                            where="--migration")
    if not (isinstance(pad, int | float | np.integer | np.floating) and 1.25 <= pad <= 4):
        raise SettingsError(f"time padding must be a factor from 1.25 to 4, got {pad!r}",
                            where="--migration")
    if band is not None and not (isinstance(band, int | float) and math.isfinite(band)
                                 and band >= 1):
        raise SettingsError(f"the migrated band must be at least 1 dominant frequency (or "
                            f"None for all), got {band!r}", where="--migration")
    if frequency is not None and not (isinstance(frequency, int | float)
                                      and math.isfinite(frequency) and frequency > 0):
        raise SettingsError(f"the dominant frequency of the migrated band must be a positive "
                            f"number of GHz, got {frequency!r}", where="--migration")
    if twt.size < 2:
        raise SettingsError("a line needs at least two samples per trace")
    dt = float(twt[1] - twt[0])
    # the first sample not above the surface (tolerating rounding in the time-zero shift)
    start = int(np.searchsorted(twt, -1e-6 * dt))
    if start >= twt.size - 1:
        raise SettingsError("no samples after time zero to migrate; correct time zero first",
                            where=where)
    t_first = float(twt[start])
    if abs(t_first) <= 1e-6 * dt:  # time zero on a sample, up to the shift's rounding
        t_first = 0.0
    constant = not callable(velocity) and layer_tops is None and np.ndim(velocity) == 0
    speed = interval_velocity(velocity, layer_tops=layer_tops, tops=tops,
                              where="--migration-velocity")
    if method == "stolt":
        if not constant:
            raise SettingsError("Stolt migration needs one constant velocity; use "
                                "method='phase-shift' for layers", where="--migration-velocity")
        v = float(speed(np.zeros(1))[0])
        core, kwargs, how = stolt_blocks, {"velocity": v}, f"Stolt migration {v:g} m/ns"
    else:
        # interval velocity of each downward step, sampled at its middle
        steps = speed(t_first + (np.arange(twt.size - start) + 0.5) * dt)
        core, kwargs = (in_blocks(phase_shift_core),
                        {"velocities": np.asarray(steps, dtype=float)})
        how = ("phase-shift migration " + (f"{steps[0]:g} m/ns" if constant else
               f"{steps.min():g}-{steps.max():g} m/ns (layered)"))

    def apply(samples: np.ndarray, *, prepare: Block | None = None,
              finish: Block | None = None) -> np.ndarray:
        """The migrated ``(trace, twt)`` samples, float32. ``prepare`` and ``finish``, each a
        function from a block of traces to the block processed (same shape), run on every
        block of traces before and after it is migrated, while the block is in cache."""
        samples = np.asarray(samples)
        if samples.ndim > 2:  # (..., trace, twt): each line in turn
            if samples.size == 0:
                return np.empty(samples.shape, dtype=np.float32)
            flat = samples.reshape(-1, *samples.shape[-2:])
            return np.stack([apply(one, prepare=prepare, finish=finish)
                             for one in flat]).reshape(samples.shape)
        out = np.empty(samples.shape, dtype=np.float32)

        def read(i: int, j: int) -> np.ndarray:
            block = samples[i:j] if prepare is None else prepare(samples[i:j])
            out[i:j, :start] = block[:, :start]  # above the surface: passed through
            return block[:, start:].astype(np.float32, copy=False)

        def write(i: int, j: int, migrated: np.ndarray) -> None:
            if finish is None:
                out[i:j, start:] = migrated
                return
            block = np.empty((j - i, samples.shape[1]), dtype=np.float32)
            block[:, :start] = out[i:j, :start]
            block[:, start:] = migrated
            out[i:j] = finish(block)

        core((samples.shape[0], samples.shape[1] - start), read, write, dx=dx, dt=dt,
             t_first=t_first, taper=taper, pad=float(pad), band=band, frequency=frequency,
             **kwargs)
        return out

    v_const = float(speed(np.zeros(1))[0]) if constant else None
    if frequency is not None and band is not None:
        how += f", frequencies to {band * frequency:.3g} GHz"
    return apply, f"{how}, trace spacing {dx:.4g} m", v_const
