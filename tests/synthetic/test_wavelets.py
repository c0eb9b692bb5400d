"""Tests of slicer.synthetic.wavelets: the source wavelets."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import hilbert

from slicer.core.errors import SettingsError
from slicer.synthetic import wavelets as F

DT = 0.1  # ns
T = DT * np.arange(1024)


@pytest.mark.parametrize("kind", F.WAVELETS)
def test_wavelet_peak_one_at_zero_and_spectral_peak_at_centre_frequency(kind):
    w = F.wavelet(T - 51.2, kind=kind, frequency_ghz=0.4)
    assert np.argmax(w) == 512 and w[512] == pytest.approx(1.0)
    # Ricker (1953), Geophysics 18:10-40: the Ricker amplitude spectrum peaks at its frequency
    # parameter; a Gaussian-modulated cosine's spectrum peaks at the carrier (common practice).
    freqs = np.fft.rfftfreq(T.size, DT)
    peak = freqs[np.argmax(np.abs(np.fft.rfft(w)))]
    assert peak == pytest.approx(0.4, abs=freqs[1])


def test_ricker_zero_crossings():
    # Ricker (1953): (1 - 2 pi^2 f^2 t^2) exp(-pi^2 f^2 t^2) vanishes at t = +-1 / (pi f sqrt 2).
    f = 0.4
    t0 = 1.0 / (np.pi * f * np.sqrt(2.0))
    np.testing.assert_allclose(F.ricker([-t0, t0], f), 0.0, atol=1e-12)


def test_gaussian_cosine_envelope():
    # Taner, Koehler & Sheriff (1979), Geophysics 44:1041-1063, with Bedrosian's theorem: the
    # envelope of exp(-a t^2) cos(2 pi f t) is exp(-a t^2); scipy.signal.gausspulse's a for a
    # fractional bandwidth b at -6 dB is (pi f b)^2 / (4 ln 2). With f s ~ 0.37 the theorem
    # holds to about 1e-2 (check-values.md gives 6.2e-3 for f s = 0.4).
    f = 0.4
    w = F.wavelet(T - 51.2, kind="gaussian-cosine", frequency_ghz=f)
    a = (np.pi * f * F.GAUSSIAN_BANDWIDTH) ** 2 / (4.0 * np.log(2.0))
    np.testing.assert_allclose(np.abs(hilbert(w)), np.exp(-a * (T - 51.2) ** 2), atol=0.02)


def test_unknown_wavelet_and_bad_frequency_are_refused():
    with pytest.raises(SettingsError, match="wavelet"):
        F.wavelet(T, kind="boxcar", frequency_ghz=0.4)
    with pytest.raises(SettingsError, match="frequency"):
        F.wavelet(T, kind="ricker", frequency_ghz=0.0)


