"""Tests of slicer.processing.fk, the NumPy cores of migration (the migrated images themselves
are checked through slicer.processing.migration.migrate in test_migration.py).

Sources named beside the checks:
- Least squares (any numerical-analysis text): the weights that read a spectrum between its
  samples minimise the squared error over the record's times; checked against
  ``numpy.linalg.lstsq`` on the times sampled finely, and the spectrum they read against the
  discrete-time Fourier transform summed by its definition.
- The zero-offset constant-velocity migration of one impulse at time t is a semicircle of
  radius v t / 2 (Stolt 1978, Geophysics 43:23-48, the impulse response of the mapping): no
  energy may land farther along the line, so none may wrap around the padded FFT either.
- The 2-D discrete Fourier transform is separable (any signal-processing text): the transform
  along time acts on each trace alone, so how the traces are grouped into blocks cannot change
  the image beyond rounding, which the block tests check against ``scipy.fft`` per trace.
"""

import math

import numpy as np
import numpy.polynomial.polynomial as poly
import pytest
import scipy.fft
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.processing.fk import (
    TAPS,
    band_columns,
    spectral_weights,
    stolt_core,
    x_length,
)


def least_squares_weights(u: float, n: int, theta: float) -> np.ndarray:
    """The weights worked out by numpy's least squares on the record's times: the c_m with
    sum_m c_m exp(i (u - m) th) closest to 1 for -theta <= th <= theta, the integral of the
    squared error taken by 200-point Gauss-Legendre quadrature (numpy's leggauss; exact for
    polynomials of degree 399, so for these smooth integrands to rounding)."""
    nodes, quad = np.polynomial.legendre.leggauss(200)
    th, root = theta * nodes, np.sqrt(theta * quad)[:, None]
    basis = root * np.exp(1j * (u - np.arange(n))[None, :] * th[:, None])
    stacked = np.vstack([basis.real, basis.imag])  # real weights: both parts at once
    return np.linalg.lstsq(stacked, np.concatenate([root[:, 0], np.zeros(th.size)]),
                           rcond=None)[0]


@pytest.mark.parametrize(("n", "pad", "atol"), [(4, 2.0, 1e-7), (6, 1.5, 1e-7), (TAPS, 1.5, 1e-7),
                                               (TAPS, 1.25, 1e-7), (8, 4.0, 1e-6)])
def test_spectral_weights_are_the_least_squares_ones(n, pad, atol):
    # (at 4 times the record, the most allowed, the normal equations' condition number is
    # 3.5e9, and the two ways agree to 1e-6 of the weight or 1e-6: about what the float32
    # operator entries keep)
    theta = np.pi / pad  # a record lasting 1 / pad of the padded period, about its middle
    for u in np.linspace(-0.5, n - 0.5, 13):
        np.testing.assert_allclose(spectral_weights(np.array([u]), n, theta)[0],
                                   least_squares_weights(u, n, theta), rtol=atol, atol=atol)


def _worst_error(weights: np.ndarray, u: np.ndarray, n: int, theta: float) -> float:
    th = np.linspace(-theta, theta, 2001)
    read = (weights[:, :, None]
            * np.exp(1j * (u[:, None, None] - np.arange(n)[None, :, None]) * th)).sum(axis=1)
    return float(np.abs(read - 1).max())


def test_least_squares_read_the_record_better_with_less_padding_than_a_polynomial():
    # between the two middle nodes, over every time of the record: 8 weights with the record
    # padded to 1.5 times its length err less than the polynomial through 6 nodes (numpy's
    # polyfit) with twice the record, and the figures in spectral_weights' docstring hold
    u = np.linspace(TAPS / 2 - 1, TAPS / 2, 41)
    ours = _worst_error(spectral_weights(u, TAPS, np.pi / 1.5), u, TAPS, np.pi / 1.5)
    v = np.linspace(2, 3, 41)
    polynomial = np.array([[poly.polyval(x, poly.polyfit(np.arange(6), np.eye(6)[m], 5))
                            for m in range(6)] for x in v])
    theirs = _worst_error(polynomial, v, 6, np.pi / 2)
    assert 0.016 < ours < 0.0175 and 0.049 < theirs < 0.051


@settings(max_examples=60, deadline=None)
@given(nt=st.integers(24, 300), u=st.floats(TAPS / 2 - 1, TAPS / 2),
       echoes=st.lists(st.tuples(st.floats(0, 1), st.floats(-1, 1)), min_size=1, max_size=4),
       seed=st.integers(0, 2 ** 32 - 1))
def test_the_spectrum_of_any_record_is_read_within_the_bound(nt, u, echoes, seed):
    # a record of nt samples holding a few echoes anywhere (the record's ends included, where
    # reading is hardest), zero-padded to 1.5 times its length: its spectrum read between
    # samples equals the discrete-time Fourier transform there (summed by its definition,
    # about the record's middle) within the worst error of the weights (under 1.75 %) times
    # the record's sum of absolute values; the bound follows from the triangle inequality
    s = np.zeros(nt)
    for where, amplitude in echoes:
        s[min(nt - 1, int(where * nt))] += amplitude
    ntp = scipy.fft.next_fast_len(math.ceil(1.5 * nt), real=False)
    centre = nt / 2
    spectrum = np.fft.fft(s, n=ntp) * np.exp(2j * np.pi * np.arange(ntp) * centre / ntp)
    first = int(np.random.default_rng(seed).integers(0, ntp - TAPS + 1))
    w = 2 * np.pi * (first + u) / ntp  # rad per sample
    exact = np.sum(s * np.exp(-1j * w * (np.arange(nt) - centre)))
    theta = np.pi * nt / ntp
    read = spectral_weights(np.array([u]), TAPS, theta)[0] @ spectrum[first:first + TAPS]
    assert abs(read - exact) <= 0.0175 * np.abs(s).sum() + 1e-9


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
    args = (484, 729, 128, 0.05, 0.1, 0.1, 0.2, 24.1, 24.1)  # a 401-trace line's sizes
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
    from the TAPS nearest frequency samples with least-squares weights for a signal within
    ``reach`` of the reference time (numpy's lstsq, not slicer's closed form), times w' / w,
    the taper and the phase of the reference time. Odd and even nk (an even one has a
    Nyquist row of its own)."""
    from slicer.processing.fk import kx_taper, stolt_operator
    ntp, nw, dx, dt, v, taper, centre, reach = 256, 48, 0.05, 0.2, 0.1, 0.2, 10.0, 12.0
    op = stolt_operator.__wrapped__.__wrapped__(nk, ntp, nw, dx, dt, v, taper, centre, reach)
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
            basis = least_squares_weights(pos - first, TAPS, reach * dw)
            scale = (w_out / w_in if w_in > 0 else 1.0) * weight[k]
            expected = np.zeros(nk * nw, dtype=complex)
            expected[k * nw + nodes] = (np.array(basis) * scale
                                        * np.exp(1j * centre * (nodes * dw - w_in)))
            np.testing.assert_allclose(got, expected, rtol=0, atol=2e-5 * max(1, abs(scale)))
            checked += 1
    assert checked > 40


@settings(max_examples=25, deadline=None)
@given(nx=st.integers(1, 70), step=st.integers(1, 80), shifted=st.booleans())
def test_any_blocks_of_traces_migrate_to_the_image_of_the_whole_line(nx, step, shifted):
    # Stolt's image is a property of the line, not of how its traces are handed in and out:
    # every block size gives the image of one block to rounding (the transforms along time
    # work trace by trace), and every block is read before the first is written (a caller's
    # steps after migration may reuse what it kept of the reads)
    from slicer.processing.fk import stolt_blocks
    rng = np.random.default_rng(nx * 100 + step)
    data = rng.standard_normal((nx, 96)).astype(np.float32)
    kwargs = dict(dx=0.05, dt=0.1, t_first=0.04 if shifted else 0.0, velocity=0.1,
                  taper=0.2, pad=1.5, band=None)
    whole = np.empty_like(data)
    stolt_blocks(data.shape, lambda i, j: data[i:j], lambda i, j, m: whole.__setitem__(
        slice(i, j), m), step=nx, **kwargs)
    events, got = [], np.full_like(data, np.nan)

    def read(i, j):
        events.append(("read", i, j))
        return data[i:j]

    def write(i, j, migrated):
        events.append(("write", i, j))
        got[i:j] = migrated

    stolt_blocks(data.shape, read, write, step=step, **kwargs)
    spans = [(i, min(i + step, nx)) for i in range(0, nx, step)]
    # the one step that sees every block at once is along time, trace by trace: scipy.fft's
    # transform of each trace alone equals its row of the whole line's
    ntp = scipy.fft.next_fast_len(math.ceil(1.5 * data.shape[1]), real=True)
    rows = np.stack([scipy.fft.rfft(trace, n=ntp) for trace in data])
    np.testing.assert_allclose(rows, scipy.fft.rfft(data, n=ntp, axis=1), rtol=0,
                               atol=1e-6 * float(np.abs(rows).max()))
    assert events == [("read", *s) for s in spans] + [("write", *s) for s in spans]
    scale = float(np.abs(whole).max())
    np.testing.assert_allclose(got, whole, rtol=0, atol=1e-6 * scale)
    np.testing.assert_array_equal(stolt_core(data, **kwargs), whole)


def test_a_whole_line_core_in_blocks_is_the_core():
    # in_blocks gathers the blocks into one array for a core that needs the whole line
    # (phase shift) and hands its image back by blocks: the core's own image, bit for bit
    from slicer.processing.fk import in_blocks, phase_shift_core
    data = np.random.default_rng(7).standard_normal((45, 80)).astype(np.float32)
    kwargs = dict(dx=0.05, dt=0.1, t_first=0.0, velocities=np.r_[np.full(40, 0.1),
                                                                  np.full(40, 0.08)],
                  taper=0.2, pad=2.0, band=None)
    got = np.full_like(data, np.nan)
    in_blocks(phase_shift_core)(data.shape, lambda i, j: data[i:j],
                                lambda i, j, m: got.__setitem__(slice(i, j), m), step=10,
                                **kwargs)
    np.testing.assert_array_equal(got, phase_shift_core(data, **kwargs))


@pytest.mark.parametrize("step", [0, -3, 2.5, True])
def test_a_block_of_no_traces_is_refused(step):
    # a block must hold a trace: 0 or a negative step had read nothing and written nothing,
    # silently (found by review)
    from slicer.core.errors import SettingsError
    from slicer.processing.fk import stolt_blocks
    data = np.ones((4, 32), dtype=np.float32)
    with pytest.raises(SettingsError, match="at least one trace") as info:
        stolt_blocks(data.shape, lambda i, j: data[i:j], lambda i, j, m: None, step=step,
                     dx=0.05, dt=0.1, t_first=0.0, velocity=0.1, taper=0.2, pad=1.5,
                     band=None)
    assert info.value.where == "step"
