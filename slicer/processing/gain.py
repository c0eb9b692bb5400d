"""Gain: a curve of two-way time that every trace is multiplied by (NumPy cores).

:func:`slicer.processing.steps.apply_gain` applies it to a line; a build's fused chain
(:func:`slicer.processing.steps._chain_core`) to each block of traces.
"""

from __future__ import annotations

import math

import numpy as np

from slicer.core.errors import SettingsError

__all__ = ["MAX_GAIN_DB", "gain_core", "gain_curve"]


def gain_core(samples: np.ndarray, *, factor: np.ndarray) -> np.ndarray:
    """``samples`` (``(..., twt)``) times ``factor`` (one per sample), float32."""
    return (samples * factor).astype(np.float32, copy=False)


#: Largest gain (dB) a curve may reach: 10^15 in amplitude. float32 holds 7 significant digits
#: and overflows near 10^38, so a larger gain only amplifies rounding noise into infinities.
MAX_GAIN_DB = 300.0


def gain_curve(twt_ns: np.ndarray, *, kind: str, value: float) -> np.ndarray:
    """Gain factor against two-way time (ns since time zero).

    ``kind="power"``: ``(t / 1 ns) ** value`` for ``t > 0`` (compensates geometric spreading
    for ``value = 1``); ``kind="exp"``: ``10 ** (value * t / 20)`` with ``value`` in dB/ns
    (compensates attenuation). Samples at or before time zero keep gain 1.
    """
    t = np.clip(np.asarray(twt_ns, dtype=np.float64), 1.0, None)
    # Gains in dB, computed in logs so that no value overflows before it is judged.
    if kind == "power":
        decibels = 20.0 * value * np.log10(t)
    elif kind == "exp":
        decibels = value * (t - 1.0)
    else:
        raise SettingsError(f"gain must be 'none', 'power:P' or 'exp:DB_PER_NS', got {kind!r}",
                            where="--gain")
    top = float(np.max(decibels, initial=0.0))
    if not math.isfinite(top) or top > MAX_GAIN_DB:
        raise SettingsError(f"{kind}:{value:g} reaches {top:.3g} dB at {float(t.max()):g} ns, "
                            f"more than the {MAX_GAIN_DB:g} dB a float32 trace can carry "
                            "usefully; choose a smaller gain", where="--gain")
    return (10.0 ** (decibels / 20.0)).astype(np.float32)
