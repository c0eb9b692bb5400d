"""Options that must be real numbers, checked once: text, None, a sequence or a bool given
where a number belongs is one :class:`~slicer.core.errors.SettingsError` naming the option,
not a TypeError from deep inside NumPy."""

from __future__ import annotations

import decimal
import numbers

import numpy as np

from slicer.core.errors import SettingsError


def real(value, *, where: str) -> float:
    """``value`` as a float if it is one real number: a Python or NumPy number, a Decimal or
    Fraction, or a 0-d array of numbers (``cube.depth.max()``); not a bool, text or None.

    Range checks stay with the caller, who knows the units; this only refuses what is not a
    number at all.

    Raises
    ------
    SettingsError
        ``value`` is not one real number.
    """
    if not isinstance(value, bool | np.bool_ | str | bytes) and value is not None:
        if isinstance(value, numbers.Real | decimal.Decimal):
            return float(value)
        try:
            array = np.asarray(value)
        except (TypeError, ValueError):
            array = None
        if array is not None and array.ndim == 0 and array.dtype.kind in "iuf":
            return float(array)
    raise SettingsError(f"expected a number, got {value!r:.60}", where=where)


def reals(values, *, where: str) -> np.ndarray:
    """``values`` (a number or an array of them) as a float64 array; one SettingsError naming
    ``where`` for text, None or objects in it."""
    try:
        return np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise SettingsError(f"expected numbers, got {values!r:.60}", where=where) from None


__all__ = ["real", "reals"]
