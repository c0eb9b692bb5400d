"""Source wavelets of the synthetic radar: Ricker and Gaussian-modulated cosine.

Times are in nanoseconds and frequencies in gigahertz; every wavelet peaks at 1 at ``t = 0``.
"""

from __future__ import annotations

import numpy as np
from scipy.signal import gausspulse

from slicer.core.errors import SettingsError

#: Wavelet shapes understood by :func:`wavelet`.
WAVELETS = ("ricker", "gaussian-cosine")

#: Fractional bandwidth (at -6 dB) of the Gaussian-modulated cosine; GPR antennas are built for
#: a bandwidth about equal to their centre frequency (common practice).
GAUSSIAN_BANDWIDTH = 1.0

def ricker(t_ns, frequency_ghz: float) -> np.ndarray:
    """Ricker wavelet ``(1 - 2 (pi f t)^2) exp(-(pi f t)^2)``: peak value 1 at ``t = 0``.

    Parameters
    ----------
    t_ns : array_like
        Time relative to the wavelet's centre, ns.
    frequency_ghz : float
        Peak (centre) frequency of the amplitude spectrum, GHz.

    Returns
    -------
    numpy.ndarray
        Dimensionless amplitude, same shape as ``t_ns``.
    """
    arg = (np.pi * frequency_ghz * np.asarray(t_ns, dtype=float)) ** 2
    return (1.0 - 2.0 * arg) * np.exp(-arg)


def gaussian_cosine(t_ns, frequency_ghz: float) -> np.ndarray:
    """Gaussian-modulated cosine of centre frequency ``frequency_ghz``: peak value 1 at ``t = 0``.

    Uses :func:`scipy.signal.gausspulse` with a fractional bandwidth of
    :data:`GAUSSIAN_BANDWIDTH` at -6 dB.

    Parameters
    ----------
    t_ns : array_like
        Time relative to the wavelet's centre, ns.
    frequency_ghz : float
        Centre frequency, GHz.

    Returns
    -------
    numpy.ndarray
        Dimensionless amplitude, same shape as ``t_ns``.
    """
    return gausspulse(np.asarray(t_ns, dtype=float), fc=frequency_ghz, bw=GAUSSIAN_BANDWIDTH)


def wavelet(t_ns, *, kind: str, frequency_ghz: float) -> np.ndarray:
    """Source wavelet of the given ``kind`` (one of :data:`WAVELETS`), peak 1 at ``t = 0``.

    Parameters
    ----------
    t_ns : array_like
        Time relative to the wavelet's centre, ns.
    kind : {"ricker", "gaussian-cosine"}
        Wavelet shape.
    frequency_ghz : float
        Centre frequency, GHz (must be positive).

    Returns
    -------
    numpy.ndarray
        Dimensionless amplitude, same shape as ``t_ns``.

    Raises
    ------
    SettingsError
        If ``kind`` is unknown or the frequency is not positive.
    """
    if not frequency_ghz > 0:
        raise SettingsError(f"frequency must be positive, got {frequency_ghz!r} GHz",
                            where="frequency")
    if kind == "ricker":
        return ricker(t_ns, frequency_ghz)
    if kind == "gaussian-cosine":
        return gaussian_cosine(t_ns, frequency_ghz)
    raise SettingsError(f"unknown wavelet {kind!r}; expected one of {', '.join(WAVELETS)}",
                        where="wavelet")
