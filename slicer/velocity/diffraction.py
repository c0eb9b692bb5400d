"""Automatic search for diffraction hyperbolas and a survey-wide radar velocity from them.

Without any picks, :func:`find_diffractions` scans a line for hyperbolas: for every trial
velocity and every apex (position along the line, two-way time) the band-passed analytic
signal is summed along the hyperbola through that apex (a Kirchhoff-style diffraction stack)
and the stack is normalised into a semblance, the fraction of the energy along the curve that
adds up coherently (Neidell & Taner 1971, Geophysics 36:482-497; here with the complex trace,
so the measure does not depend on the wavelet's phase). Peaks of semblance over (position,
time, velocity) are then refined: picks are taken at the envelope peak nearest the predicted
time on every trace within the aperture and fitted with
:func:`~slicer.velocity.hyperbola.fit_hyperbola`; poor fits are rejected.

By default each set of picks is fitted both as a point and with a free time offset (which
absorbs a round target's radius, a time-zero error and a pick delay; the offset fit is tried
again on picks reaching further down the flanks) and the offset form kept only when the picks
carry it (:func:`~slicer.velocity.offset_fit.fit_apex`). With ``separation`` the fits use the
travel time of antennas that far apart. Each fit is refitted over narrower apertures for its
systematic uncertainty (:func:`~slicer.velocity.aperture.aperture_spread`).
:func:`survey_velocity` (defined in :mod:`slicer.velocity.combine`, re-exported here) combines
the fits of a whole survey.

Known limitation (measured 2026 with the independent 2-D FDTD solver of tests/fullwave and a
plane-wave-spectrum model of a line source above a half-space, transmission
``2 kz0 / (kz0 + kz1)`` per plane wave, Chew 1990, Waves and Fields in Inhomogeneous Media,
ch. 2, from memory): antennas on or just above the ground radiate into it through the
air-ground interface, and beyond its critical angle (``asin(v / c)``, 19.5 degrees in 0.1 m/ns
ground) the envelope peaks arrive early against the straight-ray time, by about 0.12 ns at
45 degrees with the antennas on the ground and 0.3-0.4 ns with them 2 cm up (a point target
0.4 m deep, 400 MHz); inside the critical angle an air gap ``h`` adds ``2 h cos(a) / c``
(``a`` the angle in air), which flattens the apex. Without an interface the picks follow the
straight ray to 0.002 ns (point, model) and 0.06 ns (a 5 cm steel pipe, FDTD) at 45 degrees.
The picks' shape then reads fast (+13 % on the full-wave fixture); no constant offset absorbs
it, and the scan's semblance and phase-based picks see the same delays (the wavelet's phase at
the envelope peak stays within 13 degrees of the apex's to 48 degrees; FDTD, antennas on the
ground). With the antenna height known, :func:`slicer.velocity.coupling.correct_for_coupling`
corrects the picks by that model and refits, on lags against the apex echo, as point or round
(-1.7 % on the fixture; -1.4 % with the radii given, :mod:`slicer.velocity.targets`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np
import scipy.fft
import scipy.ndimage
import xarray as xr

from slicer.core.conventions import DISTANCE, TRACE, TWT, UNITS, X, Y
from slicer.core.errors import SettingsError
from slicer.core.numbers import real
from slicer.core.physics import check_separation, check_velocity
from slicer.processing.migration import trace_spacing
from slicer.processing.steps import dominant_frequency, sample_interval
from slicer.velocity.aperture import aperture_spread
from slicer.velocity.combine import SurveyVelocity, survey_velocity
from slicer.velocity.diffraction_picks import refine
from slicer.velocity.hyperbola import HyperbolaFit

__all__ = ["Diffraction", "SurveyVelocity", "diffraction_table", "find_diffractions",
           "survey_velocity"]

#: Default trial velocities, m/ns: geometric steps of 6 % from 0.05 to 0.20 m/ns.
DEFAULT_VELOCITIES = tuple(float(v) for v in np.geomspace(0.05, 0.20, 25))


@dataclass(frozen=True)
class Diffraction:
    """A diffraction hyperbola found on a line and its fitted apex.

    Attributes
    ----------
    line : str
        Name of the line (``attrs["line"]``).
    trace : int
        Index of the trace nearest the apex.
    distance : float
        Apex position along the line, m.
    x, y : float
        Apex position in the survey CRS, m (interpolated between traces).
    time : float
        Two-way time of the apex, ns.
    depth : float
        Depth of the apex, ``velocity * time / 2``, m.
    velocity, velocity_std : float
        Fitted velocity and its standard error, m/ns.
    score : float
        Semblance (0-1) of the scan at the detection.
    fit : HyperbolaFit
        The full least-squares fit.
    heading : float
        Direction of the line at the apex, degrees anticlockwise from the CRS x axis (NaN
        without positions).
    period : float
        Dominant period of the line, ns.
    strength : float
        Coherent amplitude along the hyperbola (root of the stack power), in the data's units.
    velocity_std_aperture : float
        Systematic uncertainty of the velocity from refits over narrower apertures, m/ns
        (:func:`~slicer.velocity.aperture.aperture_spread`).
    """

    line: str
    trace: int
    distance: float
    x: float
    y: float
    time: float
    depth: float
    velocity: float
    velocity_std: float
    score: float
    fit: HyperbolaFit
    heading: float = math.nan
    period: float = math.nan
    strength: float = math.nan
    velocity_std_aperture: float = 0.0


def _analytic(samples: np.ndarray, dt: float, f_dom: float) -> np.ndarray:
    """Band-passed analytic signal along the last axis (one-sided spectrum, zero-padded)."""
    n = samples.shape[-1]
    nfft = scipy.fft.next_fast_len(2 * n, real=False)
    spectrum = scipy.fft.fft(samples, n=nfft, axis=-1)
    f = scipy.fft.fftfreq(nfft, d=dt)
    # pass 0.4-2.5 times the dominant frequency with raised-cosine flanks (to 0 and to 4
    # times it): wow and what is left of the direct wave's low end lie below, noise above
    lo, hi, top = 0.4 * f_dom, 2.5 * f_dom, 4.0 * f_dom
    gain = np.where(f < lo, 0.5 * (1.0 - np.cos(np.pi * np.clip(f, 0.0, None) / lo)), 1.0)
    gain = np.where(f > hi, 0.5 * (1.0 + np.cos(np.pi * np.clip((f - hi) / (top - hi), 0, 1))),
                    gain)
    gain = np.where(f > 0, 2.0 * gain, 0.0)  # one-sided: the analytic signal
    return scipy.fft.ifft(spectrum * gain, axis=-1)[..., :n].astype(np.complex64)


def _curves(t0: np.ndarray, velocities: np.ndarray, *, dx: float, step: int, dts: float,
            t_first: float, nt: int, aperture: float, max_angle: float, v_ref: float):
    """For each trace offset of the aperture: ``(shift, idx, use)``.

    ``shift`` is the offset in traces (both signs), ``idx`` the sample (shape
    ``(velocities, t0)``) of the hyperbola through each apex time at each velocity, ``nt``
    where the trace is not used. The aperture depends on the apex time only (the depth at
    ``v_ref``), so that every trial velocity sums the same traces and their stacks compare.
    """
    dxs = step * dx
    z = v_ref * np.maximum(t0, 0.0) / 2.0
    reach = np.clip(z * math.tan(math.radians(max_angle)), 2.0 * dxs, aperture)[None, :]
    for h in range(max(1, int(math.floor(aperture / dxs + 1e-9))) + 1):
        offset = h * dxs
        tt = np.sqrt(t0[None, :] ** 2 + (2.0 * offset / velocities[:, None]) ** 2)
        idx = np.rint((tt - t_first) / dts).astype(np.int64)
        use = (offset <= reach + 1e-9) & (idx < nt)
        idx = np.where(use, idx, nt)  # unused samples read a zero column
        for sign in ((1,) if h == 0 else (1, -1)):
            yield sign * h * step, idx, use


def _stack_scan(a: np.ndarray, t0: np.ndarray, velocities: np.ndarray, *, window: int,
                **geometry) -> np.ndarray:
    """Stack power ``|sum a|^2 / n^2`` over (apex trace, velocity, apex time ``t0``).

    Every trace is an apex (the phase along the flanks is too sensitive to the apex position
    for a coarser grid); the sums use every ``step``-th trace from the apex. A window of
    ``window`` samples along time smooths the coherent energy over about half a period.
    """
    nx, nt = a.shape
    padded = np.concatenate([a, np.zeros((nx, 1), a.dtype)], axis=1)
    num = np.zeros((nx, velocities.size, t0.size), np.complex64)
    valid, uses = [], []
    for shift, idx, use in _curves(t0, velocities, nt=nt, **geometry):
        lo, hi = max(0, -shift), min(nx, nx - shift)  # apexes that have this trace
        if hi <= lo:
            continue
        num[lo:hi] += np.take(padded[lo + shift:hi + shift], idx, axis=1)
        inside = np.zeros(nx, np.float32)
        inside[lo:hi] = 1.0
        valid.append(inside)
        uses.append(use.ravel())
    # traces summed at each apex: (apex trace x offset) @ (offset x velocity-time)
    count = (np.stack(valid, axis=1) @ np.stack(uses).astype(np.float32)).reshape(num.shape)
    coherent = scipy.ndimage.uniform_filter1d(np.abs(num) ** 2, window, axis=-1)
    return np.where(count > 0, coherent / np.maximum(count, 1.0) ** 2, 0.0).astype(np.float32)


def _semblance_at(a: np.ndarray, i: int, t0: np.ndarray, velocity: float, **geometry) -> float:
    """Semblance ``sum_t |sum a|^2 / (n sum_t sum |a|^2)`` at apex trace ``i`` over times ``t0``
    (Neidell & Taner 1971, with the complex trace)."""
    nx, nt = a.shape
    num = np.zeros(t0.size, np.complex128)
    den = np.zeros(t0.size)
    count = np.zeros(t0.size)
    for shift, idx, use in _curves(t0, np.array([velocity]), nt=nt, **geometry):
        if 0 <= i + shift < nx:
            values = np.where(use[0], a[i + shift, np.minimum(idx[0], nt - 1)], 0.0)
            num += values
            den += np.abs(values) ** 2
            count += use[0]
    total = float((count * den).sum())
    return float((np.abs(num) ** 2).sum() / total) if total > 0 else 0.0


def find_diffractions(line: xr.DataArray, *, velocities=None, aperture: float = 1.5,
                      max_angle: float = 50.0, threshold: float = 0.5,
                      min_time: float | None = None, frequency_ghz: float | None = None,
                      radius: bool | str = "auto", max_relative_std: float = 0.1,
                      min_picks: int = 8, separation: float = 0.0) -> list[Diffraction]:
    """Find diffraction hyperbolas on a line and fit each one, without picks.

    The line (time-zero corrected; samples before time zero are ignored) has its median trace
    subtracted (background removal) and is band-passed around its dominant frequency into an
    analytic signal. For every trial velocity, every trace as apex and every apex time (on
    samples decimated to about ten per period), the signal is summed along the hyperbola over
    traces about half a wavelength apart within the aperture. Local maxima of the stack power
    that stand above the section's noise and whose semblance reaches ``threshold`` are
    refined by :func:`~slicer.velocity.hyperbola.fit_hyperbola` on envelope-peak picks along the
    predicted curve, at full resolution, and kept when the fit is tight. Lines are
    independent: a survey can be searched line by line in parallel.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``, ``twt`` in ns from time zero, per-trace ``distance`` (m) and,
        when present, ``x`` and ``y`` (m).
    velocities : sequence of float, optional
        Trial velocities, m/ns, ascending; default :data:`DEFAULT_VELOCITIES` (0.05-0.20).
    aperture : float
        Largest horizontal distance from the apex used, m.
    max_angle : float
        Largest angle from vertical of the path to the apex, degrees: far traces at shallow
        apexes see mostly other events.
    threshold : float
        Smallest semblance (0-1) of a detection.
    min_time : float, optional
        Earliest apex time searched, ns; default two dominant periods, below what remains of
        the direct wave.
    frequency_ghz : float, optional
        Dominant frequency of the record, GHz; default
        :func:`~slicer.processing.trace_basics.dominant_frequency` of the line.
    radius : bool or "auto"
        ``False``: fit points; ``True``: fit the round-target form (radius as well; antennas
        together); ``"auto"``: fit the point form and the form with a free time offset (which
        absorbs a round target's radius, a time-zero error and a pick delay) and keep the
        latter only when the picks carry it (:func:`~slicer.velocity.offset_fit.fit_apex`).
    max_relative_std : float
        Largest relative standard error of the velocity of a kept fit.
    min_picks : int
        Fewest picks a kept fit must have.
    separation : float
        Transmitter-receiver separation, m: the fits use the bistatic travel time and depths
        ``sqrt((v t / 2)^2 - (s / 2)^2)`` (not with ``radius=True``).

    Returns
    -------
    list of Diffraction
        Sorted by decreasing score.

    Raises
    ------
    SettingsError
        Bad options, or a line without ``distance`` or samples after time zero.
    """
    name = str(line.attrs.get("line", line.attrs.get("source", "line")))
    try:
        v = np.asarray(DEFAULT_VELOCITIES if velocities is None else velocities, dtype=float)
    except (TypeError, ValueError):
        v = np.empty(0)
    if v.ndim != 1 or v.size < 3 or np.any(np.diff(v) <= 0):
        raise SettingsError("give three or more ascending trial velocities", where="velocities")
    for value in v:
        check_velocity(value, where="velocities")
    aperture, max_angle, threshold, max_relative_std = (
        real(value, where=option) for option, value in (
            ("aperture", aperture), ("max_angle", max_angle), ("threshold", threshold),
            ("max_relative_std", max_relative_std)))
    for option, value, ok in (("aperture", aperture, aperture > 0),
                              ("max_angle", max_angle, 0 < max_angle < 90),
                              ("threshold", threshold, 0 < threshold < 1),
                              ("max_relative_std", max_relative_std, max_relative_std > 0)):
        if not (math.isfinite(value) and ok):
            raise SettingsError(f"out of range: {value!r}", where=option)
    separation = check_separation(separation, where="separation")
    if radius not in (True, False, "auto"):
        raise SettingsError(f"must be True, False or 'auto', got {radius!r}", where="radius")
    least = 5 if radius is True else 4
    if not (isinstance(min_picks, int | np.integer) and min_picks >= least):
        raise SettingsError(f"must be an integer >= {least}, got {min_picks!r}",
                            where="min_picks")
    dx = trace_spacing(line)
    dt = sample_interval(line)
    twt = np.asarray(line[TWT].values, dtype=float)
    start = int(np.searchsorted(twt, -1e-6 * dt))
    if twt.size - start < 8:
        raise SettingsError("too few samples after time zero to search", where=name)
    t_axis = twt[start:]
    data = np.asarray(line.transpose(TRACE, TWT).values[:, start:], dtype=np.float32)
    data = data - np.median(data, axis=0)
    if frequency_ghz is None:
        f_dom = dominant_frequency(line)
    elif math.isfinite(real(frequency_ghz, where="frequency_ghz")) and frequency_ghz > 0:
        f_dom = float(frequency_ghz)
    else:
        raise SettingsError(f"must be a positive frequency in GHz, got {frequency_ghz!r}",
                            where="frequency_ghz")
    period = 1.0 / f_dom
    analytic = _analytic(data, dt, f_dom)
    env = np.abs(analytic)
    distance = np.asarray(line[DISTANCE].values, dtype=float)
    # no hyperbola reaches further than the line is long (a huge aperture looped for ever)
    aperture = min(aperture, max(float(np.ptp(distance)), dx))

    lam = math.sqrt(v[0] * v[-1]) / f_dom
    step = max(1, int(lam / 2 / dx))  # aperture traces about half a wavelength apart
    kt = max(1, int(period / 10 / dt))  # about ten samples per period
    scan = analytic[:, ::kt]
    dxs, dts = step * dx, kt * dt
    t0s = t_axis[0] + dts * np.arange(scan.shape[1])
    earliest = 2.0 * period if min_time is None else real(min_time, where="min_time")
    if not (math.isfinite(earliest) and earliest >= 0):
        raise SettingsError(f"must be a time after time zero (0 ns or more), got {earliest!r}",
                            where="min_time")
    searched = np.nonzero((t0s >= earliest) & (t0s <= t_axis[-1] - period))[0]
    if searched.size == 0:
        return []
    t0s = t0s[searched]
    window = max(1, int(round(0.5 * period / dts)))
    geometry = dict(dx=dx, step=step, dts=dts, t_first=t_axis[0], aperture=aperture,
                    max_angle=max_angle, v_ref=math.sqrt(v[0] * v[-1]))
    stack = _stack_scan(scan, t0s, v, window=window, **geometry)
    # The stack power (mean coherent amplitude squared) peaks where the high-amplitude part of
    # the curve lines up, at the apex and velocity; semblance, blind to amplitude, stays high
    # over a period or more around the apex, so it only vets the detections.
    best_v = np.argmax(stack, axis=1)
    power = np.take_along_axis(stack, best_v[:, None, :], axis=1)[:, 0, :]
    # a stack must stand well above the typical power of the section (mostly noise), or faint
    # coherent residues would count
    floor = 10.0 * float(np.median(np.abs(scan) ** 2))
    # a peak must top its neighbourhood of about a wavelength along the line (and a period in
    # time); half the aperture let a strong target's shoulder hide a weaker apex 0.9 m away
    size = (max(3, 2 * int(round(min(0.5 * aperture, lam) / dx)) + 1),
            max(3, 2 * int(round(period / dts)) + 1))
    peaks = (power == scipy.ndimage.maximum_filter(power, size=size, mode="nearest"))
    peaks &= power > floor

    xs = np.asarray(line[X].values, dtype=float) if X in line.coords else distance * np.nan
    ys = np.asarray(line[Y].values, dtype=float) if Y in line.coords else distance * np.nan
    order = np.argsort(distance)
    found: list[Diffraction] = []
    for i, j in sorted(zip(*np.nonzero(peaks), strict=True), key=lambda ij: -power[ij]):
        k = best_v[i, j]
        gate = t0s[max(0, j - window // 2):j + window // 2 + 1]
        score = _semblance_at(scan, i, gate, float(v[k]), **geometry)
        if score < threshold:
            continue
        # parabola through the stack power at neighbouring velocities (log scale)
        vk = v[k]
        if 0 < k < v.size - 1:
            s0, s1, s2 = stack[i, k - 1:k + 2, j]
            denom = s0 - 2 * s1 + s2
            if denom < 0:
                vk = float(np.exp(np.log(v[k]) + 0.5 * (s0 - s2) / denom
                                  * np.log(v[k + 1] / v[k])))
        x0, t0 = distance[i], t0s[j]
        reach = min(aperture, max(2 * dxs, vk * t0 / 2 * math.tan(math.radians(max_angle))))
        fit, picks = refine(env, distance, t_axis, x0=x0, t0=t0, velocity=vk, reach=reach,
                             period=period, radius=radius, min_picks=min_picks,
                             separation=separation, aperture=aperture)
        if (fit is None or fit.velocity_std > max_relative_std * fit.velocity
                or fit.rms_ns > 0.25 * period or abs(fit.x0 - x0) > 0.5 * reach
                or abs(fit.t0 - t0) > period or fit.t0 < earliest
                or not 0.7 * v[0] <= fit.velocity <= 1.3 * v[-1]):
            continue
        if any(abs(fit.x0 - d.distance) < 2 * dxs and abs(fit.t0 - d.time) < period
               for d in found):
            continue  # the same hyperbola reached from a side peak
        trace = int(np.argmin(np.abs(distance - fit.x0)))
        # the line's direction over the hyperbola's reach (zigzag lines run both ways)
        ends = fit.x0 + np.array([-reach, reach])
        ex, ey = (np.interp(ends, distance[order], c[order]) for c in (xs, ys))
        found.append(Diffraction(
            line=name, trace=trace, distance=fit.x0,
            x=float(np.interp(fit.x0, distance[order], xs[order])),
            y=float(np.interp(fit.x0, distance[order], ys[order])),
            time=fit.t0, depth=fit.depth, velocity=fit.velocity,
            velocity_std=fit.velocity_std, score=score, fit=fit,
            heading=math.degrees(math.atan2(ey[1] - ey[0], ex[1] - ex[0])), period=period,
            strength=math.sqrt(float(power[i, j])),
            velocity_std_aperture=aperture_spread(*picks, fit, min_picks=min_picks)[0]))
    return found


def diffraction_table(found) -> xr.Dataset:
    """The diffractions as a Dataset with dim ``diffraction``, units in attrs.

    Parameters
    ----------
    found : sequence of Diffraction

    Returns
    -------
    xarray.Dataset
        Variables ``line``, ``trace``, ``distance``, ``x``, ``y`` (m), ``time`` (ns),
        ``depth`` (m), ``velocity``, ``velocity_std`` (m/ns), ``radius`` (m; the equivalent
        radius of a fitted time offset), ``delay`` (ns), ``rms`` (ns),
        ``picks`` and ``score``.
    """
    found = list(found)
    units = {"trace": "1", "distance": UNITS[DISTANCE], "x": UNITS[X], "y": UNITS[Y],
             "time": UNITS[TWT], "depth": "m", "velocity": "m/ns", "velocity_std": "m/ns",
             "score": "1", "heading": "degree", "period": UNITS[TWT], "strength": "1",
             "velocity_std_aperture": "m/ns"}
    data = {}
    for f in fields(Diffraction):
        if f.name == "fit":
            continue
        values = np.array([getattr(d, f.name) for d in found],
                          dtype=object if f.name == "line" else float)
        if f.name == "line":
            values = values.astype(str)
        elif f.name == "trace":
            values = values.astype(np.int64)
        data[f.name] = ("diffraction", values, {"units": units[f.name]} if f.name in units
                        else {})
    data["radius"] = ("diffraction", np.array([d.fit.equivalent_radius for d in found], float),
                      {"units": "m"})
    data["delay"] = ("diffraction", np.array([d.fit.delay for d in found], float),
                     {"units": "ns"})
    data["rms"] = ("diffraction", np.array([d.fit.rms_ns for d in found], float),
                   {"units": "ns"})
    data["picks"] = ("diffraction", np.array([d.fit.n_points for d in found], np.int64),
                     {"units": "1"})
    return xr.Dataset(data, attrs={"description": "diffraction hyperbolas found by slicer"})
