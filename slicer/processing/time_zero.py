"""Time zero: the direct wave's main peak picked on a line's mean trace, and the shift of the
time axis that puts ``twt = 0`` at the moment the transmitter fires.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import C_M_PER_NS, TRACE, TWT
from slicer.core.errors import SettingsError, warn
from slicer.core.line_checks import checked_line
from slicer.core.numbers import real
from slicer.core.physics import check_separation
from slicer.processing.trace_basics import (
    add_history,
    dominant_frequency_of,
    line_name,
    remove_baseline,
)

if TYPE_CHECKING:
    import xarray as xr

__all__ = ["correct_time_zero", "pick_time_zero", "pick_time_zero_of", "time_zero_of"]


#: Within one period of the direct wave's first crossing, the first lobe reaching this share
#: of the largest is its main peak: a wavelet of two nearly equal lobes (a Gaussian
#: derivative's) then gives every line the same lobe, where noise had flipped lines between
#: them, a half period apart.
LOBE_SHARE = 0.9


def _first_peak(trace: np.ndarray, threshold: float, period: int) -> float:
    """Fractional index of the main peak of ``|trace|`` within one period of its first
    crossing of ``threshold * max|trace|``: the first lobe there reaching :data:`LOBE_SHARE`
    of the largest."""
    a = np.abs(trace)
    top = a.max()
    if not np.isfinite(top) or top == 0:
        return math.nan
    first = int(np.argmax(a >= threshold * top))
    window = a[first:first + max(period, 1) + 1]
    i = first + int(np.argmax(window >= LOBE_SHARE * window.max()))
    while i + 1 < a.size and a[i + 1] > a[i]:  # up to that lobe's peak
        i += 1
    if 0 < i < a.size - 1:  # parabola through the peak and its neighbours: sub-sample time
        y0, y1, y2 = a[i - 1], a[i], a[i + 1]
        denom = y0 - 2 * y1 + y2
        if denom != 0:
            return i + 0.5 * (y0 - y2) / denom
    return float(i)


def pick_time_zero(line: xr.DataArray, *, threshold: float = 0.5) -> float:
    """Pick time zero (ns, on the line's current time axis) from the direct wave.

    The pick is made on the line's mean trace, after removing its slow baseline (a Gaussian
    running mean, sigma a twentieth of the record): the first sample whose absolute amplitude
    reaches ``threshold`` times the largest starts the first arrival, and the largest absolute
    amplitude within one dominant period after it is its main peak, refined to a fraction of a
    sample by a parabola through the peak. The direct (air-ground) wave is the strongest and
    earliest arrival on a ground-coupled antenna; its main peak is the project's definition of
    time zero (see the glossary in DEVELOPERS.md). Looking one period on keeps a side lobe
    that crosses the threshold first from being taken for the peak.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``.
    threshold : float
        Fraction (0-1] of the largest absolute amplitude that the direct wave must reach.

    Returns
    -------
    float
        Time zero, ns on the line's ``twt`` axis.
    """
    line = checked_line(line, step="pick_time_zero", traces=True)
    return pick_time_zero_of(line.data, line[TWT].values, mean=line.mean(TRACE).values,
                             threshold=threshold, where=line_name(line))


def pick_time_zero_of(samples: np.ndarray, twt: np.ndarray, *, mean: np.ndarray | None = None,
                      threshold: float = 0.5, frequency: float | None = None,
                      where: str = "line") -> float:
    """:func:`pick_time_zero` of plain ``(trace, twt)`` samples on the axis ``twt`` (ns);
    ``mean`` is their mean trace and ``frequency`` their :func:`dominant_frequency_of`, if
    already known."""
    threshold = real(threshold, where="--time-zero-threshold")
    if not 0 < threshold <= 1:
        raise SettingsError(f"time-zero threshold must be in (0, 1], got {threshold:g}",
                            where="--time-zero-threshold")
    if twt.size < 2:
        raise SettingsError("a line needs at least two samples per trace")
    dt = float(twt[1] - twt[0])
    if mean is None:  # as xarray's mean: NaN skipped
        mean = np.nanmean(samples, axis=0)
    mean = remove_baseline(np.asarray(mean, dtype=np.float64))
    if not np.any(mean):
        index = math.nan
    else:
        if frequency is None:
            frequency = dominant_frequency_of(samples, dt=dt, where=where)
        period = int(round(1.0 / (frequency * dt)))
        index = _first_peak(mean, threshold, period)
    if not math.isfinite(index):
        raise SettingsError("cannot pick time zero on a silent line; give --time-zero NS",
                            where=where)
    _warn_earlier_arrival(mean, index, period, threshold, twt, where)
    return float(twt[0] + index * dt)


#: An arrival more than a period before the picked one is named when it stands this many times
#: above the median level before it and reaches :data:`EARLIER_SHARE` of the largest.
EARLIER_NOISE, EARLIER_SHARE = 10.0, 0.05


def _warn_earlier_arrival(mean: np.ndarray, index: float, period: int, threshold: float,
                          twt: np.ndarray, where: str) -> None:
    """Warn when the mean trace holds a clear arrival before the picked one: the direct wave
    is the earliest arrival, and one weaker than ``threshold`` of a later reflector is passed
    over (every depth then comes out too shallow, silently)."""
    a = np.abs(mean)
    before = a[:max(0, int(index) - 2 * max(period, 1))]  # the picked arrival's flank excluded
    if before.size < 4:
        return
    k = int(np.argmax(before))
    if before[k] > max(EARLIER_NOISE * float(np.median(before)), EARLIER_SHARE * a.max()):
        dt = float(twt[1] - twt[0])
        warn(f"{where}: time zero picked at {twt[0] + index * dt:.2f} ns, but an earlier "
             f"arrival at {twt[k]:.2f} ns reaches {before[k] / a.max():.2f} of the strongest "
             f"(below the threshold {threshold:g}): if it is the direct wave, lower "
             "--time-zero-threshold or give --time-zero")


def correct_time_zero(line: xr.DataArray, *, time_zero: float | str = "auto",
                      threshold: float = 0.5, separation: float = 0.0) -> xr.DataArray:
    """Shift the time axis so that ``twt = 0`` at time zero.

    Only the ``twt`` coordinate changes (no resampling); samples before time zero keep negative
    times. ``attrs["time_zero_ns"]`` accumulates the shift applied.

    Time zero is the moment the transmitter fires. With the antennas ``s`` metres apart the
    direct air wave reaches the receiver ``s / c`` later, so a picked time zero is the direct
    wave's main peak minus ``s / c`` (``c`` = 0.2998 m/ns; a 0.1 m separation moves it
    0.33 ns). A time zero given in ns is taken as the firing time, as it is.

    Parameters
    ----------
    line : xarray.DataArray
        Dims ``(trace, twt)``.
    time_zero : float or "auto"
        Time zero in ns on the line's current time axis, or ``"auto"`` for
        :func:`pick_time_zero`.
    threshold : float
        Passed to :func:`pick_time_zero` when ``time_zero="auto"``.
    separation : float
        Transmitter-receiver separation (m), for a picked time zero.

    Returns
    -------
    xarray.DataArray
        The same samples (shared, not copied) on the shifted ``twt`` (ns);
        ``attrs["time_zero_ns"]`` and ``attrs["history"]`` extended.
    """
    line = checked_line(line, step="correct_time_zero", traces=True)
    twt = line[TWT].values
    t0, how = time_zero_of(line.data, twt, time_zero=time_zero, threshold=threshold,
                           separation=separation,
                           mean=line.mean(TRACE).values if time_zero == "auto" else None,
                           where=line_name(line))
    out = line.assign_coords({TWT: (TWT, twt - t0, line[TWT].attrs)})
    out.attrs = {**line.attrs, "time_zero_ns": float(line.attrs.get("time_zero_ns", 0.0)) + t0}
    return add_history(out, how)


def time_zero_of(samples: np.ndarray, twt: np.ndarray, *, time_zero: float | str = "auto",
                 threshold: float = 0.5, separation: float = 0.0,
                 mean: np.ndarray | None = None, frequency: float | None = None,
                 where: str = "line") -> tuple[float, str]:
    """Time zero (ns on ``twt``) of plain ``(trace, twt)`` samples as
    :func:`correct_time_zero` finds it, and the words for the history."""
    s = check_separation(separation)
    if isinstance(time_zero, str):
        if time_zero != "auto":
            raise SettingsError(f"time zero must be a number of ns or 'auto', got {time_zero!r}",
                                where="--time-zero")
        t0 = pick_time_zero_of(samples, twt, mean=mean, threshold=threshold,
                               frequency=frequency, where=where) - s / C_M_PER_NS
        how = (f"time zero {t0:.3f} ns (picked" +
               (f", direct wave minus {s:g} m / c)" if s else ")"))
    else:
        t0 = real(time_zero, where="--time-zero")
        if not math.isfinite(t0):
            raise SettingsError("time zero must be finite", where="--time-zero")
        how = f"time zero {t0:.3f} ns"
    if not twt[0] <= t0 < twt[-1]:
        raise SettingsError(
            f"time zero {t0:g} ns lies outside the record ({twt[0]:g} to {twt[-1]:g} ns)",
            where="--time-zero")
    return t0, how
