"""Hyperbola picks corrected for antennas coupled to the ground through the air-ground boundary.

Antennas on or just above the ground (height ``h`` much less than a wavelength) radiate into it
through the boundary. Beyond its critical angle, ``asin(v / c)``, the echo of a buried target
is not the straight-ray wavelet: a lateral wave (along the surface in air, then into the ground
at the critical angle) and the wave entering straight below the antenna interfere, and the
envelope peaks on the flanks of a hyperbola arrive early, by 0.4-0.5 ns at 45 degrees on the
full-wave fixture of ``tests/fullwave`` (a 0.4 m deep pipe, 400 MHz, antennas 2 cm up); the
straight-ray fit then reads 10-13 % fast (:mod:`slicer.velocity.diffraction`, Known
limitation). The first-arrival (Fermat least-time, refracted) path does not describe those
envelope peaks: it leads the straight ray by 1.5 ns at 45 degrees, three times the picks'
lead, and fits with it (antenna height 0 or 2 cm) read 13-80 % slow (measured 2026).

This module models the whole waveform instead. The field in the ground of a line source at
height ``h`` above a half-space is the plane-wave (angular) spectrum

``G(x, z) = (i / 2 pi) int exp(i (kx x + kz0 h + kz1 z)) / (kz0 + kz1) dkx``

with ``kz_j = sqrt(k_j^2 - kx^2)`` (imaginary part >= 0) in air (0) and ground (1): each plane
wave of the free-space line source, ``(i / 4 pi) exp(i kz0 |z|) / kz0`` (the Weyl-type
expansion of ``(i / 4) H0(k r)``), times the transmission coefficient ``2 kz0 / (kz0 + kz1)``
of a field parallel to the boundary (Chew 1990, Waves and Fields in Inhomogeneous Media,
ch. 2, from memory; the free-space limit is checked against scipy's Hankel function in
``tests/velocity/test_coupling.py``). It holds the lateral wave and the evanescent coupling of
the air gap. By reciprocity the echo of a small target at ``(x0, z)`` seen by a transmitter at
``xt`` and a receiver at ``xr`` is ``W(f) G(xt - x0, z) G(xr - x0, z)``; a round target is the
same seen from every direction, so its radius and material go into ``W`` with the source's
wavelet. ``W`` is taken from the data: the echo on the trace nearest the apex divided by
``G G`` there (a damped, Wiener-type division).

:func:`correct_for_coupling` then corrects the picks of each fitted hyperbola by what the model
puts between its envelope peaks and the straight-ray curve of the same target (relative to the
apex), refits, and repeats with the new fit (three passes). What the correction leaves is the
ambiguity of a round target fitted with its shape (the radius against the velocity;
:mod:`slicer.velocity.offset_fit`). Measured 2026 on full-wave surveys made by
``tests/fullwave/make_survey.py`` (steel pipe, radius 0.05 m centred 0.40 m deep; air-filled
pipe, 0.075 m at 0.55 m; the geometric bias of such round targets fitted as points is +7 and
+8 %), survey velocity uncorrected -> corrected: the fixture (relative permittivity 9,
antennas 2 cm up) +12.9 -> +3.6 % (pipes +3.6 and +5.6 %); permittivity 4, 2 cm up
+10.2 -> +2.5 % (+2.5, +4.7 %); permittivity 9, antennas on the ground +10.7 -> +6.9 %
(+6.9, +7.2 %, the radius bias alone). The fits with a free time offset, with the coupling
modelled, stayed unresolved (-2 to -24 % line by line; jointly over the fixture's 8 lines,
-8 to -14 % for the steel pipe: :mod:`slicer.velocity.targets`). The result depends on the
antenna height: 2 cm more or less moves the fixture's velocity by about 6 %, so the spread of
two refits at ``h -+ height_std`` is added to each fit's systematic uncertainty.

With a radius given for a target (``target_radius``), its curve is fitted as a round target of
that radius (:func:`~slicer.velocity.offset_fit.fit_offset_hyperbola`) and the model's target
sits at the centre, the echo ``2 R / v`` early. On the fixture, the pipes' radii given: the
steel pipe's fits 0.0985-0.0986 m/ns (-1.4 %), the air-filled pipe's 0.0995-0.1000 (-0.4 to
+0.1 %), the survey 0.0985 +- 0.0030 m/ns; one radius of 0.05 m for both gave the air-filled
pipe +1.7 %, one of 0.075 m the steel pipe -3.9 % (a centimetre of radius is about 1 % of
velocity at these depths; measured 2026). The radius's uncertainty (``radius_std``) is carried
like the height's.

Times ns, positions and heights m, velocities m/ns, frequencies GHz.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import xarray as xr

from slicer.core.conventions import C_M_PER_NS, DISTANCE, TRACE, TWT
from slicer.core.errors import SettingsError
from slicer.core.physics import check_separation
from slicer.processing.migration import trace_spacing
from slicer.velocity.aperture import aperture_spread
from slicer.velocity.diffraction import _analytic, _pick
from slicer.velocity.offset_fit import fit_apex, fit_offset_hyperbola

__all__ = ["HEIGHT_STD", "correct_for_coupling", "line_source_field"]

#: Default uncertainty of the antenna height, m: the electrical centre of a real antenna is
#: not its housing's underside; a centimetre is an assumption, not a measured or sourced
#: figure. Its effect on the velocity is added to each fit's systematic uncertainty.
HEIGHT_STD = 0.01

#: Wavenumber grid of the spectrum: 8192 points 0.01 m apart in x (82 m, so the wrapped
#: field is negligible; wavenumbers to 314 rad/m, beyond the evanescent decay at 0.1 m
#: depth). Doubling either changed the field at 0.4 m depth by under 1 % (measured).
_N_K, _DX_K = 8192, 0.01

#: Passes of correct-and-refit.
_PASSES = 3


def _check_height(height: float, where: str) -> float:
    try:
        h = float(height)
    except (TypeError, ValueError):
        raise SettingsError(f"must be a number of metres, got {height!r}", where=where) from None
    if not (math.isfinite(h) and 0.0 <= h < 10.0):
        raise SettingsError(f"must be between 0 and 10 m, got {height!r}", where=where)
    return h


def _field(freqs, offsets, depth: float, velocity: float, height: float) -> np.ndarray:
    """``G`` (shape ``(freqs, offsets)``) for the ``exp(+i w t)`` convention of numpy's inverse
    FFT (the conjugate of the module docstring's ``exp(-i w t)`` form); 0 at 0 Hz."""
    kx = 2.0 * np.pi * np.fft.fftfreq(_N_K, _DX_K)
    xs = np.fft.fftshift(np.fft.fftfreq(_N_K, 1.0 / (_N_K * _DX_K)))
    offsets = np.asarray(offsets, dtype=float)
    out = np.zeros((len(freqs), offsets.size), complex)
    for i, f in enumerate(freqs):
        if f <= 0:
            continue
        k0, k1 = 2.0 * np.pi * f / C_M_PER_NS, 2.0 * np.pi * f / velocity
        kz0 = np.sqrt((k0 * k0 - kx * kx).astype(complex))
        kz1 = np.sqrt((k1 * k1 - kx * kx).astype(complex))
        # numpy's principal root has a non-negative real part; the imaginary parts are then
        # >= 0 for real wavenumbers (decaying away from the boundary), as required
        spectrum = np.exp(1j * (kz0 * height + kz1 * depth)) / (kz0 + kz1)
        g = np.fft.fftshift(1j * np.fft.ifft(spectrum) / _DX_K)
        out[i] = np.interp(offsets, xs, g.real) + 1j * np.interp(offsets, xs, g.imag)
    return np.conj(out)


def line_source_field(frequency, offset, *, depth: float, velocity: float,
                      height: float) -> xr.DataArray:
    """Field in the ground of a unit line source at ``height`` above it (module docstring).

    Parameters
    ----------
    frequency : array_like
        Frequencies, GHz (positive).
    offset : array_like
        Horizontal distances from the source, m.
    depth : float
        Depth below the surface, m (> 0).
    velocity : float
        Radar velocity of the ground, m/ns (below ``c``).
    height : float
        Height of the source above the ground, m (0 or more).

    Returns
    -------
    xarray.DataArray
        Complex, dims ``(frequency, offset)``, for the ``exp(-i w t)`` time convention (a
        delay ``t`` is ``exp(i w t)``), in units of the free-space line-source field
        ``(i / 4) H0(k r)``.
    """
    f = np.atleast_1d(np.asarray(frequency, dtype=float))
    x = np.atleast_1d(np.asarray(offset, dtype=float))
    if not (np.isfinite(f).all() and (f > 0).all()):
        raise SettingsError("frequencies must be positive GHz", where="frequency")
    if not (math.isfinite(depth) and depth > 0):
        raise SettingsError(f"must be a positive depth in m, got {depth!r}", where="depth")
    if not (math.isfinite(velocity) and 0 < velocity < C_M_PER_NS):
        raise SettingsError(f"must be between 0 and c, got {velocity!r}", where="velocity")
    g = np.conj(_field(f, x, depth, velocity, _check_height(height, "height")))
    return xr.DataArray(g, dims=("frequency", "offset"),
                        coords={"frequency": ("frequency", f, {"units": "GHz"}),
                                "offset": ("offset", x, {"units": "m"})},
                        attrs={"units": "1", "height": height, "depth": depth,
                               "velocity": velocity})


def _straight(x, x0, centre, velocity, half):
    """Straight-ray bistatic time to a point at depth ``centre`` (ns)."""
    return (np.hypot(x - half - x0, centre) + np.hypot(x + half - x0, centre)) / velocity


def _model_peaks(data, t_axis, period, x, t_apex, apex, fit, height, half):
    """Envelope peaks of the model echo at positions ``x`` less the straight-ray time of the
    same target, relative to the apex (ns; NaN where the model has no peak)."""
    dt = t_axis[1] - t_axis[0]
    nfft = 2 * t_axis.size
    freqs = np.fft.rfftfreq(nfft, dt)
    freqs = freqs[freqs <= 4.0 / period]  # the band-pass ends at four times the frequency
    v, x0 = fit.velocity, fit.x0
    offset = fit.delay - 2.0 * fit.radius / v  # a round target is its centre seen early
    centre = math.sqrt(max((v * (fit.t0 - offset) / 2) ** 2 - half * half,
                           (0.05 * v * fit.t0) ** 2))
    g = _field(freqs, np.concatenate([x - half - x0, x + half - x0, [apex[0] - half - x0,
                                                                     apex[0] + half - x0]]),
               centre, v, height)
    pair = g[:, :x.size] * g[:, x.size:2 * x.size]
    at_apex = g[:, -2] * g[:, -1]
    # the echo on the apex trace, windowed flat over +-0.75 period, tapered to 1.5 periods
    gate = np.clip((1.5 * period - np.abs(t_axis - t_apex)) / (0.75 * period), 0.0, 1.0)
    echo = np.fft.rfft(apex[1] * gate, n=nfft)[:freqs.size]
    damping = 1e-3 * float(np.max(np.abs(at_apex))) ** 2
    wavelet = echo * np.conj(at_apex) / (np.abs(at_apex) ** 2 + damping)
    spectrum = np.zeros((nfft // 2 + 1, x.size), complex)
    spectrum[:freqs.size] = wavelet[:, None] * pair
    traces = np.fft.irfft(spectrum, n=nfft, axis=0).T[:, :t_axis.size]
    # the same band-pass and envelope as the picks
    env = np.abs(_analytic(traces.astype(np.float32), dt, 1.0 / period))
    straight = _straight(x, x0, centre, v, half)
    lead = t_apex - _straight(np.array([apex[0]]), x0, centre, v, half)[0]
    found, times, _ = _pick(env, x, t_axis, x0=x0, reach=np.inf, half_window=0.4 * period,
                            predict=lambda xs: _straight(xs, x0, centre, v, half) + lead)
    peaks = np.full(x.size, np.nan)
    peaks[np.isin(x, found)] = times  # positions are distinct traces
    delay = peaks - straight
    return delay - delay[int(np.argmin(np.abs(x - apex[0])))]


def _section(line: xr.DataArray):
    """``(t_axis, samples, distance)`` of a time-zero corrected line from time zero on, its
    median trace removed, as :func:`~slicer.velocity.diffraction.find_diffractions` sees it."""
    twt = np.asarray(line[TWT].values, dtype=float)
    start = int(np.searchsorted(twt, -1e-6 * (twt[1] - twt[0])))
    data = np.asarray(line.transpose(TRACE, TWT).values[:, start:], dtype=np.float32)
    return (twt[start:], data - np.median(data, axis=0),
            np.asarray(line[DISTANCE].values, dtype=float))


def _corrected_fit(x, t, w, data, t_axis, period, apex, height, separation, radius=0.0):
    """Correct-and-refit passes (none without a ``height``); the final fit (free time offset
    allowed without a given ``radius``) and the corrected picks."""
    half = separation / 2.0
    t_apex = float(t[int(np.argmin(np.abs(x - apex[0])))])
    fit = fit_offset_hyperbola(x, t, separation=separation, weights=w, delay=False,
                               radius=radius)
    keep, corrected = np.ones(x.size, bool), t
    for _ in range(_PASSES if height is not None else 0):
        shift = _model_peaks(data, t_axis, period, x, t_apex, apex, fit, height, half)
        keep = np.isfinite(shift)
        corrected = t[keep] - shift[keep]
        fit = fit_offset_hyperbola(x[keep], corrected, separation=separation, weights=w[keep],
                                   delay=False, radius=radius)
    if radius > 0:
        final = fit
    else:
        final = fit_apex(x[keep], corrected, separation=separation, weights=w[keep],
                         precision=period / 50)
    return final, (x[keep], corrected, w[keep])


def correct_for_coupling(line: xr.DataArray, found, *, antenna_height: float | None,
                         separation: float = 0.0, height_std: float = HEIGHT_STD,
                         max_angle: float = 50.0, min_picks: int = 8,
                         target_radius: float | None = None,
                         radius_std: float = 0.0) -> list:
    """Refit hyperbolas found on a line with picks corrected for ground-coupled antennas.

    Parameters
    ----------
    line : xarray.DataArray
        The line the hyperbolas were found on, as given to
        :func:`~slicer.velocity.diffraction.find_diffractions` (time-zero corrected).
    found : sequence of Diffraction
        Its hyperbolas.
    antenna_height : float or None
        Height of the antennas above the ground, m (0 for antennas on it); None: the picks
        are not corrected, only refitted (with ``target_radius``).
    separation : float
        Transmitter-receiver separation, m.
    height_std : float
        Uncertainty of the antenna height, m: refits at ``antenna_height -+ height_std``
        (not below 0) give half their difference as a systematic velocity uncertainty, added
        in quadrature to ``velocity_std_aperture``.
    max_angle : float
        Widest angle from the apex of the picks, degrees (the search's default).
    min_picks : int
        Fewest picks of a refit; a hyperbola with fewer, or whose refit fails, is kept as
        found.
    target_radius : float, optional
        A radius known for the targets, m: every curve is fitted as a round target of that
        radius (:func:`~slicer.velocity.offset_fit.fit_offset_hyperbola`) instead of a point
        or a free time offset, whose velocity the radius cannot be told from (module
        docstring).
    radius_std : float
        Uncertainty of ``target_radius``, m: refits at ``target_radius -+ radius_std`` (not
        below 0) add half their difference, in quadrature, to ``velocity_std_aperture``.

    Returns
    -------
    list of Diffraction
        The refitted hyperbolas (velocity, time, depth and fit replaced; positions kept).
    """
    height = None if antenna_height is None else _check_height(antenna_height,
                                                               "antenna_height")
    height_std = _check_height(height_std, "height_std") if height is not None else 0.0
    radius = 0.0 if target_radius is None else _check_height(target_radius, "target_radius")
    radius_std = _check_height(radius_std, "radius_std") if radius > 0 else 0.0
    separation = check_separation(separation, where="separation")
    t_axis, data, distance = _section(line)
    dx = trace_spacing(line)
    out, envelopes = [], {}
    for d in found:
        period = d.period
        if period not in envelopes:  # one line has one dominant period: computed once
            envelopes[period] = np.abs(_analytic(data, t_axis[1] - t_axis[0], 1.0 / period))
        env = envelopes[period]
        reach = max(2 * dx, d.fit.depth * math.tan(math.radians(max_angle)))
        x, t, amp = _pick(env, distance, t_axis, x0=d.fit.x0, predict=d.fit.travel_time,
                          reach=reach, half_window=0.3 * period)
        strong = amp >= 0.2 * amp.max() if amp.size else amp.astype(bool)
        x, t, w = x[strong], t[strong], amp[strong] ** 2
        if x.size < min_picks:
            out.append(d)
            continue
        i = int(np.argmin(np.abs(distance - d.fit.x0)))
        apex = (distance[i], data[i])
        args = (x, t, w, data, t_axis, period, apex)
        try:
            fit, picks = _corrected_fit(*args, height, separation, radius)
            spread = aperture_spread(*picks, fit, min_picks=min_picks)[0]
            # refits at the ends of the height's and the radius's uncertainty
            for dh, dr in ((height_std, 0.0), (0.0, radius_std)):
                if dh > 0 or dr > 0:
                    v_lo, v_hi = (_corrected_fit(
                        *args, None if height is None else max(0.0, height + sign * dh),
                        separation, max(0.0, radius + sign * dr))[0].velocity
                        for sign in (-1, 1))
                    spread = math.hypot(spread, 0.5 * abs(v_hi - v_lo))
        except SettingsError:
            out.append(d)
            continue
        out.append(dataclasses.replace(d, velocity=fit.velocity, velocity_std=fit.velocity_std,
                                       time=fit.t0, depth=fit.depth, fit=fit,
                                       velocity_std_aperture=spread))
    return out
