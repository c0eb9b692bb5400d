"""2-D migration of radar lines: Stolt f-k migration and Gazdag phase-shift migration.

Migration moves every reflection to where it came from: a diffraction hyperbola collapses to a
focus at its apex and dipping reflectors steepen to their true position. Both methods use the
exploding-reflector model of zero-offset data: every reflector fires at ``t = 0`` and the waves
travel one way at half the radar velocity, ``v / 2``, so that one-way time in that model is the
recorded two-way time.

* ``stolt`` (Stolt 1978, Geophysics 43:23-48): for one constant velocity, the 2-D spectrum
  ``P(kx, w)`` of the line is mapped onto the migrated spectrum
  ``M(kx, w') = P(kx, w) w' / w`` with ``w = sqrt(w'^2 + (v kx / 2)^2)``, interpolating in
  frequency.
* ``phase-shift`` (Gazdag 1978, Geophysics 43:1342-1351): the wavefield is continued downward
  one output sample at a time, multiplying by ``exp(i dt sqrt(w^2 - (v kx / 2)^2))`` with the
  interval velocity ``v`` of that step, and imaged at ``t = 0``; velocity may change with
  depth (flat layers).

The output keeps the line's time axis (the vertical two-way time of the migrated image), so
the rest of the pipeline - envelope, depth conversion, slices - runs unchanged.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
import scipy.fft
import xarray as xr

from slicer.core.conventions import DISTANCE, TRACE, TWT
from slicer.core.errors import SettingsError, warn
from slicer.core.physics import check_velocity
from slicer.processing.steps import _add_history, sample_interval

__all__ = ["interval_velocity", "migrate", "trace_spacing"]

#: Migration methods understood by :func:`migrate`.
METHODS = ("stolt", "phase-shift")

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
    if line.sizes[TRACE] < 2:
        raise SettingsError("migration needs at least two traces", where=name)
    steps = np.abs(np.diff(np.asarray(line[DISTANCE].values, dtype=float)))
    dx = float(np.median(steps))
    if not (math.isfinite(dx) and dx > 0):
        raise SettingsError("traces are not spaced along the line (median step 0 m)", where=name)
    spread = float(np.max(np.abs(steps - dx))) / dx
    if spread > UNEVEN_TOLERANCE:
        warn(f"{name}: trace steps vary by up to {spread:.0%} of the median "
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


def _kx_taper(nk: int, dx: float, taper: float) -> tuple[np.ndarray, np.ndarray]:
    """Wavenumbers (rad/m) of an ``nk``-point FFT and a cosine taper to zero at Nyquist.

    Dips steeper than the trace spacing samples wrap around in wavenumber (spatial aliasing);
    fading the outer ``taper`` fraction of the band keeps that energy from being mapped, at
    full strength, onto wrong dips.
    """
    kx = 2.0 * np.pi * scipy.fft.fftfreq(nk, d=dx)
    frac = np.abs(kx) / (np.pi / dx)
    weight = np.ones(nk)
    if taper > 0:
        edge = frac > 1.0 - taper
        weight[edge] = 0.5 * (1.0 + np.cos(np.pi * (frac[edge] - 1.0 + taper) / taper))
    return kx, weight


def _stolt_core(data: np.ndarray, *, dx: float, dt: float, t_first: float, velocity: float,
                taper: float, pad: int) -> np.ndarray:
    """Stolt migration of ``data`` (traces, samples) whose first sample lies at ``t_first``."""
    nx, nt = data.shape
    nk = scipy.fft.next_fast_len(2 * nx, real=False)  # room for the hyperbola tails to fold
    ntp = scipy.fft.next_fast_len(pad * nt, real=True)
    spectrum = scipy.fft.rfft2(data.astype(np.float64), s=(nk, ntp))
    w = 2.0 * np.pi * scipy.fft.rfftfreq(ntp, d=dt)
    kx, weight = _kx_taper(nk, dx, taper)
    # Referencing phase to the middle of the record makes the spectrum vary slowly along w, so
    # that linear interpolation between frequency samples is accurate; the reference is
    # removed again at the exact input frequency of each output sample.
    centre = t_first + 0.5 * nt * dt
    spectrum *= np.exp(1j * w * (centre - t_first))[None, :]
    ve = velocity / 2.0
    w_in = np.sqrt(w[None, :] ** 2 + (ve * kx[:, None]) ** 2)  # (nk, nw): input frequency
    pos = w_in / (w[1] - w[0])
    i0 = np.floor(pos).astype(np.int64)
    inside = i0 < w.size - 1  # beyond the Nyquist frequency there is no input
    i0 = np.where(inside, i0, 0)
    frac = pos - i0
    rows = np.arange(nk)[:, None]
    picked = spectrum[rows, i0] * (1.0 - frac) + spectrum[rows, i0 + 1] * frac
    with np.errstate(invalid="ignore", divide="ignore"):
        jacobian = np.where(w_in > 0, w[None, :] / w_in, 1.0)
    # input energy below w = ve |kx| is evanescent: no output frequency maps onto it, so the
    # mapping drops it
    migrated = np.where(inside, picked * jacobian, 0.0) * weight[:, None]
    migrated *= np.exp(-1j * w_in * centre + 1j * w[None, :] * t_first)
    return scipy.fft.irfft2(migrated, s=(nk, ntp))[:nx, :nt]


def _phase_shift_core(data: np.ndarray, *, dx: float, dt: float, t_first: float,
                      velocities: np.ndarray, taper: float, pad: int) -> np.ndarray:
    """Phase-shift migration; ``velocities[j]`` is the interval velocity below output sample j.

    There is no interpolation, so twice the record (``pad`` is ignored) keeps energy that
    continues above the surface, to negative times, from wrapping around onto t = 0.
    """
    nx, nt = data.shape
    nk = scipy.fft.next_fast_len(2 * nx, real=False)
    ntp = scipy.fft.next_fast_len(2 * nt, real=True)
    spectrum = scipy.fft.rfft2(data.astype(np.float64), s=(nk, ntp))
    w = 2.0 * np.pi * scipy.fft.rfftfreq(ntp, d=dt)
    kx, weight = _kx_taper(nk, dx, taper)
    spectrum *= weight[:, None]
    # the image at t is (1 / ntp) sum over all w; the negative frequencies add the complex
    # conjugate, so the positive half is weighted 2 and DC (and an even Nyquist) 1
    half = np.full(w.size, 2.0)
    half[0] = 1.0
    if ntp % 2 == 0:
        half[-1] = 1.0
    # Frequencies where the line has no energy cost time and add nothing: keep those up to the
    # last whose mean amplitude exceeds 1e-5 of the peak (-100 dB).
    power = np.abs(spectrum).mean(axis=0)
    keep = power > 1e-5 * power.max() if power.max() > 0 else np.zeros(w.size, bool)
    if not keep.any():
        return np.zeros((nx, nt))
    top = int(np.nonzero(keep)[0].max()) + 1
    # single precision: 1e-7 rounding per step stays far below the data's own precision
    field = (spectrum[:, :top] * half[:top]).astype(np.complex64)
    w, w2 = w[:top], w[:top] ** 2
    # From the record's clock (first sample at t_first) to absolute time, then continued down
    # to the first output time t_first (a fraction of a sample when time zero is corrected).
    kz2 = w2[None, :] - (0.5 * velocities[0] * kx[:, None]) ** 2
    field *= np.where(kz2 > 0, np.exp(1j * (t_first * np.sqrt(np.clip(kz2, 0.0, None))
                                            - w[None, :] * t_first)), 0.0).astype(np.complex64)
    image = np.empty((nt, nk), dtype=np.complex128)
    step_v, step = None, None
    for j in range(nt):
        image[j] = field.sum(axis=1)
        if j == nt - 1:
            break
        if velocities[j] != step_v:
            step_v = velocities[j]
            kz2 = w2[None, :] - (0.5 * step_v * kx[:, None]) ** 2
            # evanescent components (kz^2 < 0) decay: zero them
            step = np.where(kz2 > 0, np.exp(1j * dt * np.sqrt(np.clip(kz2, 0.0, None))),
                            0.0).astype(np.complex64)
        field *= step
    out = scipy.fft.ifft(image, axis=1)[:, :nx].real / ntp
    return out.T


def migrate(line: xr.DataArray, *, velocity, method: str = "stolt", layer_tops=None,
            tops: str = "twt", taper: float = 0.2, pad: int = 4) -> xr.DataArray:
    """Migrate a line (2-D, zero offset), before the envelope.

    The line must be time-zero corrected (``twt = 0`` at the surface). Samples at negative
    times (above the surface) are passed through unchanged and only the samples from the first
    non-negative time on are migrated; their clock (which may not start exactly at 0) is
    honoured by a phase shift, and the result is returned on the line's own ``twt`` axis. The
    traces are zero-padded to twice their number and the samples to ``pad`` times theirs so
    that the periodic FFT does not fold tails of hyperbolas back into the line. Traces are
    assumed evenly spaced at the median step of ``distance`` (:func:`trace_spacing`).

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
        migration, which honours velocities changing with depth (slower: one step per sample).
    layer_tops : sequence of float, optional
        Layer tops for ``phase-shift``, ascending from 0, in the unit given by ``tops``.
    tops : {"twt", "depth"}
        ``layer_tops`` in two-way time (ns) or depth (m).
    taper : float
        Fraction (0-1) of the wavenumber band, below the trace spacing's Nyquist wavenumber
        ``pi / dx``, over which a cosine taper fades steep, possibly aliased dips to zero.
    pad : int
        Zero-padding factor of the time axis for ``stolt`` (>= 2): more is more accurate for
        its interpolation in frequency. ``phase-shift`` always pads to twice the record.

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
    where = "--migration"
    if method not in METHODS:
        raise SettingsError(f"migration method must be one of {', '.join(METHODS)}, got "
                            f"{method!r}", where=where)
    if not 0 <= taper < 1:
        raise SettingsError(f"wavenumber taper must be in [0, 1), got {taper!r}", where=where)
    if not (isinstance(pad, int | np.integer) and pad >= 2):
        raise SettingsError(f"time padding must be an integer >= 2, got {pad!r}", where=where)
    dx = trace_spacing(line)
    dt = sample_interval(line)
    twt = np.asarray(line[TWT].values, dtype=float)
    # the first sample not above the surface (tolerating rounding in the time-zero shift)
    start = int(np.searchsorted(twt, -1e-6 * dt))
    if start >= twt.size - 1:
        raise SettingsError("no samples after time zero to migrate; correct time zero first",
                            where=str(line.attrs.get("source", line.attrs.get("line", "line"))))
    t_first = float(twt[start])
    constant = not callable(velocity) and layer_tops is None and np.ndim(velocity) == 0
    speed = interval_velocity(velocity, layer_tops=layer_tops, tops=tops,
                              where="--migration-velocity")
    if method == "stolt":
        if not constant:
            raise SettingsError("Stolt migration needs one constant velocity; use "
                                "method='phase-shift' for layers", where="--migration-velocity")
        v = float(speed(np.zeros(1))[0])
        core, kwargs, how = _stolt_core, {"velocity": v}, f"Stolt migration {v:g} m/ns"
    else:
        # interval velocity of each downward step, sampled at its middle
        steps = speed(t_first + (np.arange(twt.size - start) + 0.5) * dt)
        core, kwargs = _phase_shift_core, {"velocities": np.asarray(steps, dtype=float)}
        how = ("phase-shift migration " + (f"{steps[0]:g} m/ns" if constant else
               f"{steps.min():g}-{steps.max():g} m/ns (layered)"))

    def apply(samples: np.ndarray) -> np.ndarray:
        out = np.array(samples, dtype=np.float32, copy=True)
        out[..., start:] = core(np.asarray(samples[..., start:], dtype=np.float64), dx=dx,
                                dt=dt, t_first=t_first, taper=taper, pad=int(pad), **kwargs)
        return out

    data = line
    if data.chunks is not None:
        data = data.chunk({TRACE: -1, TWT: -1})
    out = xr.apply_ufunc(apply, data, input_core_dims=[[TRACE, TWT]],
                         output_core_dims=[[TRACE, TWT]], dask="parallelized",
                         output_dtypes=[np.float32], keep_attrs=True)
    out = out.transpose(*line.dims)
    attrs = dict(line.attrs)
    if constant:
        attrs["migration_velocity"] = float(speed(np.zeros(1))[0])
    out.attrs = attrs
    return _add_history(out, f"{how}, trace spacing {dx:.4g} m")
