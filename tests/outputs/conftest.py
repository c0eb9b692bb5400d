"""Shared checks of the output tests."""

from __future__ import annotations

import pytest


def _cf_failures(path) -> list[tuple[int, str, list[str]]]:
    """The failed checks of IOOS compliance-checker's cf:1.8 suite: (weight, name, messages).

    Weight 3 is compliance-checker's high priority (an error against CF), 2 medium, 1 low.
    """
    from compliance_checker.runner import CheckSuite

    suite = CheckSuite()
    suite.load_all_available_checkers()
    groups, errors = suite.run_all(suite.load_dataset(str(path)), ["cf:1.8"],
                                   skip_checks=[])["cf:1.8"]
    assert errors == {}  # the checker itself ran through
    assert len(groups) > 20  # and did check something
    return [(r.weight, r.name, r.msgs) for r in groups if r.value[0] != r.value[1]]


@pytest.fixture
def cf_failures():
    """Run IOOS compliance-checker's cf:1.8 suite on a file: see :func:`_cf_failures`."""
    return _cf_failures
