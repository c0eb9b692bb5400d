"""Tests of slicer.processing.hilbert: the envelope's core, a block of traces at a time.

Reference: ``scipy.signal.hilbert`` (the analytic signal by FFT, Marple 1999) in double
precision, on the same zero padding to twice the record.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.fft
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st

import slicer.processing.hilbert as hilbert


def reference(x: np.ndarray) -> np.ndarray:
    n = x.shape[-1]
    nfft = scipy.fft.next_fast_len(2 * n, real=False)
    return np.abs(scipy.signal.hilbert(x.astype(np.float64), N=nfft, axis=-1)[..., :n])


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 40), st.integers(2, 70), st.integers(1, 9), st.integers(0, 2))
def test_blocks_of_any_size_give_scipys_envelope(traces, samples, block, leading):
    rng = np.random.default_rng(traces * 100 + samples)
    shape = (2,) * leading + (traces, samples)
    x = rng.normal(size=shape).astype(np.float32)
    nfft = scipy.fft.next_fast_len(2 * samples, real=False)
    saved = hilbert.BLOCK_BYTES
    hilbert.BLOCK_BYTES = block * 8 * (nfft // 2 + 1)  # blocks of `block` traces
    try:
        assert hilbert.block_traces(samples) == block
        got = hilbert.envelope_core(x)
    finally:
        hilbert.BLOCK_BYTES = saved
    assert got.shape == x.shape and got.dtype == np.float32
    peak = float(np.abs(x).max(initial=0.0)) or 1.0
    np.testing.assert_allclose(got, reference(x), atol=2e-6 * peak, rtol=0)


def test_one_trace_and_a_float64_line_are_taken_as_they_come():
    t = np.linspace(0, 1, 200)
    trace = np.cos(2 * np.pi * 20 * t) * np.exp(-((t - 0.5) / 0.1) ** 2)
    got = hilbert.envelope_core(trace)  # one trace, float64 in
    assert got.shape == trace.shape and got.dtype == np.float32
    np.testing.assert_allclose(got, reference(trace), atol=1e-6)


@pytest.mark.parametrize("samples", [512, 1000, 3])
def test_a_block_holds_about_the_set_bytes_of_spectrum(samples):
    nfft = scipy.fft.next_fast_len(2 * samples, real=False)
    per_trace = 8 * (nfft // 2 + 1)
    k = hilbert.block_traces(samples)
    assert k >= 1 and k * per_trace <= max(hilbert.BLOCK_BYTES, per_trace)
    assert (k + 1) * per_trace > hilbert.BLOCK_BYTES


@settings(max_examples=40, deadline=None)
@given(st.integers(1, 30), st.sampled_from(["scaled", "median", "mean", None]),
       st.booleans(), st.booleans(), st.booleans(), st.integers(1, 7), st.integers(0, 1))
def test_the_chain_by_blocks_equals_the_steps_one_after_another(traces, method, windowed,
                                                               dewow, envelope, block,
                                                               leading):
    # Reference: the single steps' cores applied in turn to the whole line (each tested
    # against its own reference in test_steps.py), whatever the blocks cut the line into
    from slicer.processing.background import background_core
    from slicer.processing.steps import _chain_core, _dewow_core, gain_curve
    rng = np.random.default_rng(traces)
    x = rng.normal(size=(2,) * leading + (traces, 64)).astype(np.float32)
    x += np.sin(np.arange(64) / 3.0).astype(np.float32)  # a background on every trace
    twt = np.arange(64) * 0.1
    background = None if method is None else {"method": method,
                                              "window": (5, 40) if windowed else None}
    factor = gain_curve(twt, kind="power", value=1.0)
    expected = x
    if dewow:
        expected = _dewow_core(expected, size=7)
    if background is not None:
        expected = background_core(expected, **background)
    expected = (expected * factor).astype(np.float32)
    if envelope:
        expected = hilbert.envelope_core(expected)
    nfft = scipy.fft.next_fast_len(128, real=False)
    saved = hilbert.BLOCK_BYTES
    hilbert.BLOCK_BYTES = block * 8 * (nfft // 2 + 1)
    try:
        got = _chain_core(x, size=7 if dewow else None, background=background, factor=factor,
                          take_envelope=envelope)
    finally:
        hilbert.BLOCK_BYTES = saved
    # the same arithmetic on every sample; FFTs batched differently may round differently
    peak = float(np.abs(expected).max())
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-6 * peak)
