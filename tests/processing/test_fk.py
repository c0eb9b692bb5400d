"""Tests of slicer.processing.fk, the NumPy cores of migration (the migrated images themselves
are checked through slicer.processing.migration.migrate in test_migration.py).

Sources named beside the checks:
- Lagrange interpolation through n nodes reproduces every polynomial of degree below n exactly
  (any numerical-analysis text), checked against ``numpy.polynomial.polynomial.polyval``.
- The zero-offset constant-velocity migration of one impulse at time t is a semicircle of
  radius v t / 2 (Stolt 1978, Geophysics 43:23-48, the impulse response of the mapping): no
  energy may land farther along the line, so none may wrap around the padded FFT either.
"""

import math

import numpy as np
import numpy.polynomial.polynomial as poly
import pytest
import scipy.fft

from slicer.processing.fk import (
    TAPS,
    band_columns,
    lagrange_weights,
    stolt_core,
    x_length,
)


@pytest.mark.parametrize("n", [2, 4, TAPS, 8])
def test_lagrange_weights_reproduce_polynomials_below_their_order(n):
    rng = np.random.default_rng(n)
    coefficients = rng.normal(size=n)  # degree n - 1
    u = rng.uniform(-0.5, n - 0.5, 200)
    weights = lagrange_weights(u, n)
    assert weights.shape == (200, n)
    at_nodes = poly.polyval(np.arange(n), coefficients)
    np.testing.assert_allclose(weights @ at_nodes, poly.polyval(u, coefficients),
                               rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(lagrange_weights(np.arange(n, dtype=float), n), np.eye(n),
                               atol=1e-12)


@pytest.mark.parametrize("frequency", [0.25, 0.4, 0.9])
def test_the_band_reaches_four_times_the_dominant_frequency(frequency):
    # a sinusoid of `frequency` GHz on every trace: its peak is at frequency * ntp * dt samples
    dt, nt = 0.1, 500
    ntp = scipy.fft.next_fast_len(2 * nt, real=True)
    t = dt * np.arange(nt)
    data = np.tile(np.sin(2 * np.pi * frequency * t), (8, 1))
    spectrum = scipy.fft.rfft(data, n=ntp, axis=1)
    peak = round(frequency * ntp * dt)
    got = band_columns(spectrum, nt=nt, ntp=ntp, dt=dt, band=4.0)
    assert got == min(ntp // 2 + 1, 16 * math.ceil((4 * peak + 2) / 16))
    assert band_columns(spectrum, nt=nt, ntp=ntp, dt=dt, band=None) == ntp // 2 + 1
    silent = np.zeros_like(spectrum)
    assert band_columns(silent, nt=nt, ntp=ntp, dt=dt, band=4.0) == ntp // 2 + 1


def test_an_impulse_migrates_onto_its_semicircle_without_wrapping_around():
    # one spike at the first trace, 40 ns down, in ground of 0.1 m/ns: its image lies within
    # v t / 2 = 2 m (40 traces) of that trace; the far end of a 201-trace line must stay dark
    dx, dt, v, nx, nt = 0.05, 0.1, 0.1, 201, 512
    data = np.zeros((nx, nt), dtype=np.float32)
    t0 = 40.0
    data[0, int(t0 / dt)] = 1.0
    assert x_length(nx, dx, nt * dt, v) < 2 * nx  # less padding than the usual rule
    image = stolt_core(data, dx=dx, dt=dt, t_first=0.0, velocity=v, taper=0.2, pad=2,
                       band=None).astype(float)
    energy = (image ** 2).sum(axis=1)
    radius = int(round(v * t0 / 2 / dx))
    assert energy[:radius + 5].sum() > 0.99 * energy.sum()
    assert energy[nx // 2:].sum() < 1e-4 * energy.sum()


def test_released_operators_are_rebuilt_to_the_same_image():
    # releasing the kept operators (a worker moving on to tiles) frees them, and a later line
    # migrates exactly as before: the operator is a pure function of the line's sizes
    from slicer.processing.fk import release_operators, stolt_operator
    data = np.random.default_rng(3).standard_normal((60, 128)).astype(np.float32)
    kwargs = dict(dx=0.05, dt=0.1, t_first=0.0, velocity=0.1, taper=0.2, pad=2, band=None)
    first = stolt_core(data, **kwargs)
    assert stolt_operator.cache_info().currsize >= 1
    release_operators()
    assert stolt_operator.cache_info().currsize == 0
    np.testing.assert_array_equal(stolt_core(data, **kwargs), first)


def test_threads_asking_for_one_operator_at_once_build_it_once():
    # a threads build's first lines, one per worker, meet the cold cache together: each had
    # built its own operator (functools.lru_cache does not hold back a second caller); now
    # one builds it and the other finds it, the same object
    import threading

    from slicer.processing.fk import stolt_operator
    stolt_operator.cache_clear()
    args = (484, 972, 160, 0.05, 0.1, 0.1, 0.2, 25.6)  # a 401-trace line's sizes (27-45 ms)
    start, got = threading.Barrier(4), []

    def ask():
        start.wait()
        got.append(stolt_operator(*args))

    threads = [threading.Thread(target=ask) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    info = stolt_operator.cache_info()
    assert (info.misses, info.hits) == (1, 3)
    assert all(g is got[0] for g in got)
    stolt_operator.cache_clear()


@pytest.mark.parametrize("nk", [63, 64])
def test_every_operator_row_is_the_stolt_mapping_of_its_own_wavenumber(nk):
    """Each row of the Stolt operator, for negative wavenumbers too (the operator takes them
    from their mirrors, kx -> -kx), holds the mapping worked out here entry by entry from the
    docstring's definition: output (kx, w') reads the input at w = sqrt(w'^2 + (v kx / 2)^2)
    through the polynomial of the TAPS nearest frequency samples (numpy's polyfit through
    them, not slicer's Lagrange weights), times w' / w, the taper and the phase of the
    reference time. Odd and even nk (an even one has a Nyquist row of its own)."""
    from slicer.processing.fk import kx_taper, stolt_operator
    ntp, nw, dx, dt, v, taper, centre = 256, 48, 0.05, 0.2, 0.1, 0.2, 10.0
    op = stolt_operator.__wrapped__.__wrapped__(nk, ntp, nw, dx, dt, v, taper, centre)
    dw = 2 * np.pi / (ntp * dt)
    kx, weight = kx_taper(nk, dx, taper)
    rng = np.random.default_rng(3)
    checked = 0
    for k in [*rng.choice(nk, 12, replace=False), nk - 1, nk // 2, 1]:
        for jj in rng.choice(nw, 8, replace=False):
            got = op[[k * nw + jj], :].toarray().ravel()
            w_out = jj * dw
            w_in = math.hypot(w_out, 0.5 * v * kx[k])
            pos = w_in / dw
            if pos > nw - 1 or weight[k] == 0:
                assert not got.any()
                continue
            first = min(max(math.floor(pos) - (TAPS // 2 - 1), 0), nw - TAPS)
            nodes = first + np.arange(TAPS)
            # each node's weight: the interpolating polynomial of that node's unit vector
            basis = [poly.polyval(pos - first, poly.polyfit(np.arange(TAPS), np.eye(TAPS)[m],
                                                            TAPS - 1)) for m in range(TAPS)]
            scale = (w_out / w_in if w_in > 0 else 1.0) * weight[k]
            expected = np.zeros(nk * nw, dtype=complex)
            expected[k * nw + nodes] = (np.array(basis) * scale
                                        * np.exp(1j * centre * (nodes * dw - w_in)))
            np.testing.assert_allclose(got, expected, rtol=0, atol=2e-5 * max(1, abs(scale)))
            checked += 1
    assert checked > 40
