"""Hyperbola picks as cross-correlation lags against the echo on the apex trace.

An envelope peak follows the echo's energy centre. Where the echo changes shape along a
hyperbola's flanks (antennas coupled to the ground through the air-ground boundary: the
lateral wave and the wave entering below the antenna interfere, :mod:`slicer.velocity.coupling`)
the envelope's peak moves with the shape as well as with the delay, and a model of the shape
change must then reproduce the envelope exactly to correct it. The lag that best aligns a
trace with the echo on the trace at the apex (the maximum of their cross-correlation,
refined by a parabola through its neighbours) follows the phase of the bulk of the wavelet
instead; it is the classical time-delay estimator for a known waveform (Knapp & Carter 1976,
IEEE Trans. ASSP 24:320-327, from memory). The lag measures a delay only between like
waveforms, so each pick carries its normalised correlation coefficient (1 for a pure delay),
and :data:`MIN_SIMILARITY` drops picks whose echo has changed shape too much to be aligned.

Measured 2026 on the full-wave fixture of ``tests/fullwave`` (line FW03, true velocity, depth
and antenna height in the coupling model): the picks corrected by the model's own lags of the
model echo lie within 0.02 ns of the round-target curve to 45 degrees from the apex for the
steel pipe and the air-filled pipe (the model's envelope peaks left 0.03-0.06 ns); the same
survey re-simulated with two 12 mm conductors in place of the pipes left 0.01 ns with lags and
0.02-0.05 ns with envelope peaks, so the envelope's residual is not the pipes' size.

Times ns, positions m.
"""

from __future__ import annotations

import numpy as np

from slicer.velocity.diffraction import _analytic

__all__ = ["MIN_SIMILARITY", "lag_picks"]

#: Smallest normalised correlation coefficient of a trace's echo with the apex echo for its
#: lag to be kept as a pick: below it the echo's shape has changed so much that the lag is
#: no longer a delay. A choice of ours, no source, made after looking at the full-wave
#: fixture's similarity values (there 0.90 reads the velocity -2.2 %, 0.95 -1.7 %, 0.98
#: -1.8 %): 0.95 keeps shapes whose misfit energy is at most 5 % (1 - r for unit-energy
#: waveforms, half their squared difference).
MIN_SIMILARITY = 0.95


def _reference(trace: np.ndarray, t_axis: np.ndarray, t_ref: float, period: float):
    """The apex echo: ``trace`` tapered to zero beyond one period of ``t_ref`` (flat within
    half a period), ``(samples, first index)`` over +-1.5 periods."""
    dt = t_axis[1] - t_axis[0]
    gate = np.clip((period - np.abs(t_axis - t_ref)) / (0.5 * period), 0.0, 1.0)
    k0 = int(round((t_ref - t_axis[0]) / dt))
    m = int(round(1.5 * period / dt))
    lo, hi = max(0, k0 - m), min(t_axis.size, k0 + m + 1)
    return (trace * gate)[lo:hi], lo - k0


def lag_picks(traces, distance, t_axis, *, reference, t_ref: float, period: float, x0: float,
              predict, reach: float, half_window: float):
    """Pick each trace's echo near ``predict(x)`` by its lag against the apex echo.

    Parameters
    ----------
    traces : numpy.ndarray
        Samples, shape ``(traces, samples)`` (median-removed section, or model traces).
    distance : numpy.ndarray
        Position of each trace, m.
    t_axis : numpy.ndarray
        Time of each sample, ns (uniform).
    reference : numpy.ndarray
        The trace at the apex (same sampling), whose echo at ``t_ref`` is the waveform sought.
    t_ref : float
        Time of the apex echo (its envelope peak), ns: a trace whose echo is the apex echo
        delayed by ``tau`` is picked at ``t_ref + tau``.
    period : float
        Dominant period, ns: both are band-passed as the envelope picks are
        (:func:`~slicer.velocity.diffraction._analytic`), and the echo spans +-1 period.
    x0 : float
        Apex position, m.
    predict : callable
        Expected time of the echo at positions ``x`` (ns).
    reach : float
        Largest distance from ``x0`` of a pick, m.
    half_window : float
        Largest lag from the prediction searched, ns.

    Returns
    -------
    x, t, amplitude, similarity : numpy.ndarray
        Positions (m) and times (ns) of the picks, the envelope at each (trace units) and
        the normalised correlation coefficient of the aligned echoes (at most 1). Lags on
        the search window's edge (another event's) and echoes outside the record are left
        out.
    """
    dt = float(t_axis[1] - t_axis[0])
    band = _analytic(np.vstack([np.asarray(traces, np.float32),
                                np.asarray(reference, np.float32)[None]]), dt, 1.0 / period)
    signal, env = band.real[:-1].astype(float), np.abs(band[:-1])
    wave, start = _reference(band.real[-1].astype(float), t_axis, t_ref, period)
    norm_w = float(np.linalg.norm(wave))
    near = np.nonzero(np.abs(np.asarray(distance) - x0) <= reach)[0]
    half = max(1, int(round(half_window / dt)))
    k_ref = int(round((t_ref - t_axis[0]) / dt))
    out = []
    if near.size == 0 or norm_w == 0:
        return (np.empty(0),) * 4
    for i in near:
        centre = int(round((float(predict(np.array([distance[i]]))[0]) - t_axis[0]) / dt))
        shifts = np.arange(centre - half, centre + half + 1) - k_ref
        first = k_ref + start + shifts
        if first[0] < 0 or first[-1] + wave.size > t_axis.size:
            continue
        segments = np.lib.stride_tricks.sliding_window_view(signal[i], wave.size)[first]
        cc = segments @ wave
        k = int(np.argmax(cc))
        if k == 0 or k == cc.size - 1:
            continue
        y0, y1, y2 = cc[k - 1:k + 2]
        denom = y0 - 2 * y1 + y2
        frac = float(np.clip(0.5 * (y0 - y2) / denom, -0.5, 0.5)) if denom < 0 else 0.0
        seg_norm = float(np.linalg.norm(segments[k]))
        # the coefficient at the parabola's top (between samples), at most 1
        top = y1 - 0.25 * (y0 - y2) * frac
        sim = min(1.0, top / (norm_w * seg_norm)) if seg_norm > 0 else 0.0
        j = min(max(k_ref + shifts[k], 0), t_axis.size - 1)
        out.append((distance[i], t_ref + (shifts[k] + frac) * dt, float(env[i, j]), sim))
    if not out:
        return (np.empty(0),) * 4
    return tuple(np.array(c, dtype=float) for c in zip(*out, strict=True))
