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
puts between its own picks of the model echo and the straight-ray curve of the same target
(relative to the apex), refits, and repeats with the new fit (three passes). The picks, of the
data and of the model alike, are lags against the echo on the apex trace
(:mod:`slicer.velocity.lag_picks`), not envelope peaks: with the true velocity and geometry in
the model, the corrected envelope peaks of the fixture's pipes (below) lay 0.03-0.06 ns early
from 20 to 50 degrees, the corrected lags within 0.02 ns to 45 degrees (a pair of 12 mm
conductors in their place: 0.02-0.05 and 0.01 ns, so the envelope's residual was not the
pipes' size). Each pass fits the form :func:`~slicer.velocity.offset_fit.fit_apex` keeps
(point, or a free time offset: a round target of unknown radius), tested on the lags' own
residuals (no floor); an offset that makes the curve late is refused (a round target's echo
is early, ``-2 R / v``; time zero is the direct wave's less ``s / c``, so a delay of the
picks within the wavelet is in both and cancels). Because that leaves the velocity of a round
target to the shape of its picks, the systematic uncertainty of each fit holds half the
difference from the same procedure run on the envelope peaks (with their floor, a fiftieth of
a period): a model that describes the echo's change of shape corrects both pickers alike, and
what it does not describe moves them apart. The similarity threshold of the lags
(:data:`~slicer.velocity.lag_picks.MIN_SIMILARITY`, 0.95) is a choice: 0.90 gave the fixture
-2.2 %, 0.98 -1.8 % (measured 2026).

Measured 2026 on full-wave surveys made by ``tests/fullwave/make_survey.py`` (steel pipe,
radius 0.05 m centred 0.40 m deep; air-filled pipe, 0.075 m at 0.55 m; the geometric bias of
such round targets fitted as points is +7 and +8 %), survey velocity with envelope peaks and
point fits (the method before) -> with lags and the point-or-round test: the fixture (relative
permittivity 9, antennas 2 cm up) +3.6 +- 3.4 % -> -1.7 +- 2.7 % (the round form kept on 14 of
16 fits, radii 0.047-0.056 m for the steel pipe and 0.068-0.083 m for the air-filled one;
the other two, point fits at +4 %, fell outside the chosen group); antennas on the ground
+7.0 +- 2.5 % -> -1.6 +- 4.4 %; permittivity 4 (the pipes about one wavelength deep, where the
round form is not resolved even with the true geometry) +2.5 +- 3.2 % -> +3.0 +- 1.9 %, point
fits; the 12 mm conductors -0.7 +- 3.1 % -> -0.2 +- 1.1 %, point fits (the round form
refused). Without the coupling correction the fixture read +12.9 %. The antenna height's
uncertainty is carried as before: the spread of two refits at ``h -+ height_std`` is added to
each fit's systematic uncertainty (with point fits 2 cm more or less moved the fixture's
velocity by about 6 %; with a free offset much less, as the offset takes up most of it).

With a radius given for a target (``target_radius``), its curve is fitted as a round target of
that radius (:func:`~slicer.velocity.offset_fit.fit_offset_hyperbola`) and the model's target
sits at the centre, the echo ``2 R / v`` early. On the fixture, the pipes' radii given, with
envelope peaks: the steel pipe's fits 0.0985-0.0986 m/ns (-1.4 %), the air-filled pipe's
0.0995-0.1000 (-0.4 to +0.1 %), the survey 0.0985 +- 0.0030 m/ns; with lags (now) the steel
pipe's -1.3 %, the air-filled pipe's -1.7 to -1.8 %, the survey 0.0986 +- 0.0024 m/ns. With
envelope peaks, one radius of 0.05 m for both gave the air-filled pipe +1.7 %, one of 0.075 m
the steel pipe -3.9 % (a centimetre of radius is about 1 % of velocity at these depths;
measured 2026). The radius's uncertainty (``radius_std``) is carried like the height's.

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
from slicer.velocity.diffraction import _analytic
from slicer.velocity.diffraction_picks import pick_envelope
from slicer.velocity.lag_picks import MIN_SIMILARITY, lag_picks
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


def _model_peaks(data, t_axis, period, x, t_apex, apex, fit, height, half, lags=False):
    """Picks of the model echo at positions ``x`` (lags against its echo at the apex with
    ``lags``, else envelope peaks) less the straight-ray time of the same target, relative to
    the apex (ns; NaN where the model has no pick)."""
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
    straight = _straight(x, x0, centre, v, half)
    lead = t_apex - _straight(np.array([apex[0]]), x0, centre, v, half)[0]

    def predict(xs):
        return _straight(xs, x0, centre, v, half) + lead

    if lags:  # the model's own lags against its echo at the apex, as the data's are picked
        spectrum[:, 0] = 0.0
        spectrum[:freqs.size, 0] = wavelet * at_apex
        reference = np.fft.irfft(spectrum[:, 0], n=nfft)[:t_axis.size]
        found, times, _, _ = lag_picks(traces, x, t_axis, reference=reference, t_ref=t_apex,
                                       period=period, x0=x0, predict=predict, reach=np.inf,
                                       half_window=0.4 * period)
    else:  # the same band-pass and envelope as the picks
        env = np.abs(_analytic(traces.astype(np.float32), dt, 1.0 / period))
        found, times, _ = pick_envelope(env, x, t_axis, x0=x0, reach=np.inf,
                                        half_window=0.4 * period, predict=predict)
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


def _corrected_fit(x, t, w, data, t_axis, period, apex, height, separation, radius=0.0,
                   lags=True):
    """Correct-and-refit passes (none without a ``height``); the final fit (free time offset
    allowed without a given ``radius``) and the corrected picks.

    Each pass fits the form :func:`~slicer.velocity.offset_fit.fit_apex` keeps, so the model's
    target sits where that form puts it (a round target's centre ``R`` below its top). Lag
    picks are tested point-against-round on their own residuals (no floor: their systematic
    error is carried by the pickers' spread, :func:`correct_for_coupling`); envelope peaks
    with the floor of a fiftieth of a period (common practice, as in
    :mod:`slicer.velocity.diffraction`)."""
    half = separation / 2.0
    t_apex = float(t[int(np.argmin(np.abs(x - apex[0])))])
    precision = 0.0 if lags else period / 50

    def refit(xs, ts, ws):
        if radius > 0:
            return fit_offset_hyperbola(xs, ts, separation=separation, weights=ws, delay=False,
                                        radius=radius)
        best = fit_apex(xs, ts, separation=separation, weights=ws, precision=precision)
        if best.delay > 0:  # a late curve is no round target (its radius would be negative)
            return fit_offset_hyperbola(xs, ts, separation=separation, weights=ws,
                                        delay=False)
        return best

    fit = fit_offset_hyperbola(x, t, separation=separation, weights=w, delay=False,
                               radius=radius)
    keep, corrected = np.ones(x.size, bool), t
    for _ in range(_PASSES if height is not None else 0):
        shift = _model_peaks(data, t_axis, period, x, t_apex, apex, fit, height, half, lags)
        keep = np.isfinite(shift)
        corrected = t[keep] - shift[keep]
        fit = refit(x[keep], corrected, w[keep])
    fit = refit(x[keep], corrected, w[keep])
    return fit, (x[keep], corrected, w[keep])


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
        With ``antenna_height``, picked by lags against the apex echo (those whose echo
        correlates with it below
        :data:`~slicer.velocity.lag_picks.MIN_SIMILARITY` left out) and fitted as a point or
        a round target of free radius (module docstring); ``velocity_std_aperture`` holds
        half the difference from the refit of envelope peaks, in quadrature.
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
        x, t, amp = pick_envelope(env, distance, t_axis, x0=d.fit.x0,
                                  predict=d.fit.travel_time, reach=reach,
                                  half_window=0.3 * period)
        i = int(np.argmin(np.abs(distance - d.fit.x0)))
        apex = (distance[i], data[i])
        picks = {False: (x, t, amp)}
        if x.size and height is not None:  # lags against the apex echo, from its peak
            t_ref = float(t[int(np.argmin(np.abs(x - apex[0])))])
            lx, lt, la, similar = lag_picks(data, distance, t_axis, reference=data[i],
                                            t_ref=t_ref, period=period, x0=d.fit.x0,
                                            predict=d.fit.travel_time, reach=reach,
                                            half_window=0.3 * period)
            like = similar >= MIN_SIMILARITY
            picks[True] = (lx[like], lt[like], la[like])
        for key, (x, t, amp) in picks.items():
            strong = amp >= 0.2 * amp.max() if amp.size else amp.astype(bool)
            picks[key] = (x[strong], t[strong], amp[strong] ** 2)
        if picks.get(True, picks[False])[0].size < min_picks:
            out.append(d)
            continue
        try:
            fit, spread = _fit_with_spread(picks, data, t_axis, period, apex, height,
                                           height_std, separation, radius, radius_std,
                                           min_picks)
        except SettingsError:
            out.append(d)
            continue
        out.append(dataclasses.replace(d, velocity=fit.velocity, velocity_std=fit.velocity_std,
                                       time=fit.t0, depth=fit.depth, fit=fit,
                                       velocity_std_aperture=spread))
    return out


def _fit_with_spread(picks, data, t_axis, period, apex, height, height_std, separation,
                     radius, radius_std, min_picks):
    """The corrected fit of the lag picks (``picks[True]``; the envelope peaks
    ``picks[False]`` without them) and its systematic uncertainty: the aperture spread, the
    refits at the ends of the height's and the radius's uncertainty, and half the difference
    from the fit of the envelope peaks, each in quadrature (:func:`correct_for_coupling`)."""
    lags = True in picks
    x, t, w = picks[lags]
    args = (x, t, w, data, t_axis, period, apex)
    fit, corrected = _corrected_fit(*args, height, separation, radius, lags)
    spread = aperture_spread(*corrected, fit, min_picks=min_picks)[0]
    for dh, dr in ((height_std, 0.0), (0.0, radius_std)):
        if dh > 0 or dr > 0:
            v_lo, v_hi = (_corrected_fit(
                *args, None if height is None else max(0.0, height + sign * dh),
                separation, max(0.0, radius + sign * dr), lags)[0].velocity
                for sign in (-1, 1))
            spread = math.hypot(spread, 0.5 * abs(v_hi - v_lo))
    if lags and height is not None and picks[False][0].size >= min_picks:
        # the other picker of the same echo: a model that describes the echo's change of
        # shape corrects both alike; what it does not describe moves them apart
        try:
            other = _corrected_fit(*picks[False], data, t_axis, period, apex, height,
                                   separation, radius, False)[0]
            spread = math.hypot(spread, 0.5 * abs(other.velocity - fit.velocity))
        except SettingsError:
            pass
    return fit, spread
