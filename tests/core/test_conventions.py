"""Tests of slicer.core.conventions: the speed of light, dimension names and units.

Sources named beside the checks:
- BIPM, "The International System of Units (SI)", 9th edition (2019), section 2.2: the speed
  of light in vacuum is a defining constant, c = 299 792 458 m/s exactly; table 7 (SI
  prefixes): nano = 1e-9, symbol n; table 2: unit symbols m (metre) and s (second).
"""

import math

import pytest

from slicer.core import conventions
from slicer.core.conventions import C_M_PER_NS, DEPTH, DISTANCE, SLICE, TRACE, TWT, UNITS, X, Y

#: c = 299 792 458 m/s exactly (SI Brochure, 9th ed., 2019, section 2.2).
C_SI_M_PER_S = 299_792_458
#: One nanosecond in seconds (SI Brochure, 9th ed., table 7: nano = 1e-9).
NS_PER_S = 1_000_000_000


def test_speed_of_light_is_the_si_value_in_metres_per_nanosecond():
    # both sides are the double nearest to 0.299 792 458, so they are equal exactly
    assert C_M_PER_NS == C_SI_M_PER_S / NS_PER_S
    # one metre of vacuum takes 1 / c = 3.335 640 95 ns one way [memory for the digits]
    assert 1.0 / C_M_PER_NS == pytest.approx(NS_PER_S / C_SI_M_PER_S, rel=1e-15)
    assert math.isclose(1.0 / C_M_PER_NS, 3.33564095, rel_tol=1e-9)


def test_dimension_names_are_distinct():
    names = [TRACE, TWT, DEPTH, X, Y, DISTANCE, SLICE]
    assert all(isinstance(n, str) and n for n in names)
    assert len(set(names)) == len(names)


@pytest.mark.parametrize(("name", "symbol"), [
    # time in nanoseconds, lengths in metres: SI Brochure, 9th ed., tables 2 and 7
    (TWT, "ns"), (DEPTH, "m"), (X, "m"), (Y, "m"), (DISTANCE, "m")])
def test_units_are_si_symbols(name, symbol):
    assert UNITS[name] == symbol


def test_units_name_only_dimensions_of_the_module():
    dims = {v for k, v in vars(conventions).items() if k.isupper() and isinstance(v, str)}
    assert set(UNITS) <= dims
