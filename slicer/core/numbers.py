"""Options that must be real numbers, checked once: text, None, a sequence or a bool given
where a number belongs is one :class:`~slicer.core.errors.SettingsError` naming the option,
not a TypeError from deep inside NumPy."""

from __future__ import annotations

import numbers

import numpy as np

from slicer.core.errors import SettingsError


def real(value, *, where: str) -> float:
    """``value`` as a float if it is a real number (Python or NumPy; not a bool).

    Range checks stay with the caller, who knows the units; this only refuses what is not a
    number at all.

    Raises
    ------
    SettingsError
        ``value`` is not a real number.
    """
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise SettingsError(f"expected a number, got {value!r:.60}", where=where)
    return float(value)


def reals(values, *, where: str) -> np.ndarray:
    """``values`` (a number or an array of them) as a float64 array; one SettingsError naming
    ``where`` for text, None or objects in it."""
    try:
        return np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise SettingsError(f"expected numbers, got {values!r:.60}", where=where) from None


__all__ = ["real", "reals"]
