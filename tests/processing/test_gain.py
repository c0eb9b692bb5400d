"""Tests of slicer.processing.gain: the gain curve's limit."""

import re

import numpy as np
import pytest

from slicer.core.errors import SettingsError
from slicer.processing.gain import gain_core, gain_curve


def test_the_core_multiplies_each_sample_by_its_factor():
    samples = np.arange(12, dtype=np.float32).reshape(3, 4)
    factor = np.array([1, 2, 3, 4], dtype=np.float32)
    out = gain_core(samples, factor=factor)
    assert out.dtype == np.float32
    np.testing.assert_array_equal(out, samples * factor[None, :])


@pytest.mark.parametrize("kind, value, reach_db", [
    # exp: value dB/ns over (100 - 1) ns; power: 20 P log10(100 ns)
    ("exp", 1e300, 9.9e301), ("exp", 3.1, 306.9), ("power", 7.6, 304.0),
    ("power", 1e300, 4e301),
])
def test_gain_beyond_what_float32_carries_is_refused(kind, value, reach_db):
    t = np.linspace(0.0, 100.0, 1001)
    reach = re.escape(f"{reach_db:.3g}")
    with pytest.raises(SettingsError, match=rf"--gain: .* reaches {reach} dB at 100 ns, more "
                                            "than the 300 dB"):
        gain_curve(t, kind=kind, value=value)


def test_gain_up_to_the_limit_stays_finite():
    t = np.linspace(0.0, 100.0, 1001)
    g = gain_curve(t, kind="exp", value=3.0)  # 297 dB at 100 ns
    assert np.all(np.isfinite(g)) and g[-1] == pytest.approx(10 ** (297 / 20), rel=1e-5)
