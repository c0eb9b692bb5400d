"""Picks along a detected diffraction hyperbola and their fit (:func:`refine`): the second,
full-resolution stage of :func:`slicer.velocity.diffraction.find_diffractions`."""

from __future__ import annotations

import math

import numpy as np

from slicer.core.errors import SettingsError
from slicer.velocity.hyperbola import fit_hyperbola, hyperbola_time
from slicer.velocity.offset_fit import fit_apex, fit_offset_hyperbola


def pick_envelope(env: np.ndarray, distance: np.ndarray, t_axis: np.ndarray, *, x0: float, predict,
          reach: float, half_window: float):
    """Envelope-peak picks near the curve ``predict(x)`` within ``reach`` m of ``x0``."""
    dt = t_axis[1] - t_axis[0]
    near = np.nonzero(np.abs(distance - x0) <= reach)[0]
    pred = predict(distance[near])
    half = max(1, int(round(half_window / dt)))
    centre = np.rint((pred - t_axis[0]) / dt).astype(np.int64)
    ok = (centre - half >= 1) & (centre + half < t_axis.size - 1)
    near, centre = near[ok], centre[ok]
    if near.size == 0:
        return np.empty(0), np.empty(0), np.empty(0)
    cols = centre[:, None] + np.arange(-half, half + 1)
    win = env[near[:, None], cols]
    k = np.argmax(win, axis=1)
    interior = (k > 0) & (k < 2 * half)  # a peak on the window's edge belongs to another event
    i = centre + k - half
    y0, y1, y2 = env[near, i - 1], env[near, i], env[near, i + 1]
    denom = y0 - 2 * y1 + y2
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = np.where(denom < 0, 0.5 * (y0 - y2) / denom, 0.0)
    t = t_axis[0] + (i + np.clip(shift, -0.5, 0.5)) * dt
    return distance[near][interior], t[interior], y1[interior]


def _fit(x, t, w, radius, period, separation):
    if radius == "auto":  # picks are good to about a fiftieth of a period (common practice)
        return fit_apex(x, t, weights=w, precision=period / 50, separation=separation)
    if radius is False and separation > 0:
        return fit_offset_hyperbola(x, t, weights=w, separation=separation, delay=False)
    return fit_hyperbola(x, t, radius=bool(radius), weights=w)


#: Widest angle from vertical of the picks offered to the time-offset fit, degrees: the offset
#: is told from the velocity only by picks well down the flanks (beyond about 1.5 depths,
#: :mod:`slicer.velocity.offset_fit`); tan(70 degrees) = 2.7 depths.
OFFSET_ANGLE = 70.0


def refine(env, distance, t_axis, *, x0, t0, velocity, reach, period, radius, min_picks,
            separation, aperture):
    """Pick, fit, drop outlying picks and fit again: ``(fit, (x, t, weights))`` of the picks
    fitted, ``(None, None)`` when the picks fit badly.

    With ``radius="auto"`` a point fit is tried once more on picks over a wider reach (to
    :data:`OFFSET_ANGLE`), and the result kept only if the time-offset form wins there."""
    fit = picks = None
    passes = [(0.5 * period, reach), (0.3 * period, reach)]
    for half_window, wide in passes:
        if fit is None:
            def predict(x, x0=x0):
                return hyperbola_time(x, x0=x0, t0=t0, velocity=velocity)
        else:  # the fitted curve, with its radius when fitted
            x0, predict = fit.x0, fit.travel_time
        xs, ts, amp = pick_envelope(env, distance, t_axis, x0=x0, predict=predict, reach=wide,
                            half_window=half_window)
        strong = amp >= 0.2 * amp.max() if amp.size else amp.astype(bool)
        xs, ts, amp = xs[strong], ts[strong], amp[strong]
        if xs.size < min_picks:
            return (fit, picks) if wide > reach else (None, None)
        try:
            tried = _fit(xs, ts, amp ** 2, radius, period, separation)
            residual = np.abs(tried.travel_time(xs) - ts)
            good = residual <= max(3.0 * 1.4826 * np.median(residual), 0.05 * period)
            if good.sum() >= min_picks and not good.all():
                xs, ts, amp = xs[good], ts[good], amp[good]
                tried = _fit(xs, ts, amp ** 2, radius, period, separation)
        except SettingsError:
            return (fit, picks) if wide > reach else (None, None)
        if wide > reach and tried.shape != "offset":
            return fit, picks
        fit, picks = tried, (xs, ts, amp ** 2)
        if len(passes) == 2 and radius == "auto" and fit.shape == "point":
            wider = min(aperture, fit.depth * math.tan(math.radians(OFFSET_ANGLE)))
            if wider > reach:
                passes.append((0.3 * period, wider))
    return fit, picks


__all__ = ["OFFSET_ANGLE", "pick_envelope", "refine"]
