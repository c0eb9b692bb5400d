"""Tests of slicer.core.numbers: what counts as one real number for an option."""

import decimal
import fractions

import numpy as np
import pytest
import xarray as xr

from slicer.core.errors import SettingsError
from slicer.core.numbers import real, reals


@pytest.mark.parametrize("value, expected", [
    (2, 2.0), (0.25, 0.25), (np.float32(0.5), 0.5), (np.int64(3), 3.0),
    (np.array(1.5), 1.5), (xr.DataArray(2.4).max(), 2.4),  # cube.depth.max(), say
    (decimal.Decimal("0.1"), 0.1), (fractions.Fraction(1, 4), 0.25), (float("nan"), None),
])
def test_one_number_in_any_of_its_everyday_forms_is_taken(value, expected):
    got = real(value, where="--x")
    assert np.isnan(got) if expected is None else got == pytest.approx(expected, rel=1e-7)


@pytest.mark.parametrize("value", ["2.0", b"2", None, True, np.bool_(False), [1.0],
                                   np.array([1.0, 2.0]), {"a": 1}, object(), np.array("x"),
                                   1 + 2j])
def test_anything_else_is_one_settings_error_naming_the_option(value):
    with pytest.raises(SettingsError, match="expected a number") as info:
        real(value, where="--x")
    assert info.value.where == "--x"


def test_arrays_of_numbers_and_their_refusal():
    np.testing.assert_array_equal(reals([1, 2.5], where="d"), [1.0, 2.5])
    with pytest.raises(SettingsError, match="expected numbers") as info:
        reals(["a", 1], where="depths")
    assert info.value.where == "depths"
