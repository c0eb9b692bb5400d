"""Tests of slicer.velocity.lag_picks: hyperbola picks as cross-correlation lags.

Checked against properties outside the project:
- a delayed copy of a waveform correlates best with it at the delay (the shift theorem; the
  classical time-delay estimator, Knapp & Carter 1976, IEEE Trans. ASSP 24:320-327, from
  memory), with a correlation coefficient of 1 (Cauchy-Schwarz: equality only for
  proportional vectors);
- a waveform's Hilbert transform (a 90-degree phase rotation) is orthogonal to it at zero lag
  (Bracewell, The Fourier Transform and Its Applications, ch. 12, from memory): it is not the
  same shape at any lag, and its coefficient stays below the threshold.
"""

from __future__ import annotations

import numpy as np
import scipy.signal

from slicer.velocity.lag_picks import MIN_SIMILARITY, lag_picks

DT = 0.1  # ns
T = np.arange(300) * DT  # ns
F = 0.4  # GHz
PERIOD = 1 / F  # ns
T_REF = 10.0  # ns, the apex echo's time


def _ricker(centre: float) -> np.ndarray:
    """Ricker wavelet of F GHz centred at ``centre`` ns (Ryan 1994, CSEG Recorder, from
    memory)."""
    a = (np.pi * F * (T - centre)) ** 2
    return (1 - 2 * a) * np.exp(-a)


def test_delayed_copies_are_picked_at_their_delays():
    """Copies delayed by fractions of a sample are picked at ``t_ref`` plus the delay, to a
    hundredth of a sample (measured 2026: 0.0002 ns; parabola through the correlation's top,
    25 samples a period), with coefficients of 1 to 0.002 (measured: 0.9991)."""
    delays = np.linspace(-0.37, 0.83, 9)  # ns, not whole samples
    x = np.arange(delays.size) * 0.04  # m
    traces = np.stack([_ricker(T_REF + d) for d in delays])
    px, pt, amp, similar = lag_picks(
        traces, x, T, reference=_ricker(T_REF), t_ref=T_REF, period=PERIOD, x0=x[4],
        predict=lambda xs: T_REF + np.interp(xs, x, delays), reach=1.0, half_window=0.75)
    np.testing.assert_array_equal(px, x)
    assert np.abs(pt - (T_REF + delays)).max() < 0.01 * DT
    assert np.all((similar > 0.998) & (similar <= 1.0)), similar
    assert np.all(amp > 0)


def test_a_phase_rotated_echo_is_not_like_the_apex_echo():
    """The Hilbert transform of the apex echo is found (its best lag) but with a coefficient
    below :data:`MIN_SIMILARITY` (measured 2026: 0.89), so a pick of it would be left out."""
    rotated = np.imag(scipy.signal.hilbert(_ricker(T_REF)))
    _, pt, _, similar = lag_picks(
        rotated[None], np.array([0.0]), T, reference=_ricker(T_REF), t_ref=T_REF,
        period=PERIOD, x0=0.0, predict=lambda xs: np.full(xs.shape, T_REF), reach=1.0,
        half_window=0.75)
    assert pt.size == 1
    assert similar[0] < MIN_SIMILARITY, similar


def test_echoes_beyond_the_reach_or_the_record_are_left_out():
    """Traces farther than ``reach`` from the apex and echoes predicted past the record's
    end give no picks (nothing to align; common practice)."""
    x = np.array([0.0, 0.5, 1.0])
    traces = np.stack([_ricker(T_REF)] * 3)
    out = lag_picks(traces, x, T, reference=_ricker(T_REF), t_ref=T_REF, period=PERIOD,
                    x0=0.0, predict=lambda xs: np.where(xs > 0.7, 40.0, T_REF), reach=1.0,
                    half_window=0.75)
    np.testing.assert_array_equal(out[0], [0.0, 0.5])
    none = lag_picks(traces, x, T, reference=_ricker(T_REF), t_ref=T_REF, period=PERIOD,
                     x0=5.0, predict=lambda xs: np.full(xs.shape, T_REF), reach=1.0,
                     half_window=0.75)
    assert all(a.size == 0 for a in none)
