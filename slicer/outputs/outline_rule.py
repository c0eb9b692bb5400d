"""Which cells of a cube are anomalous: the rule behind :func:`slicer.outputs.outlines.outline`.

A cell is anomalous when all three hold:

1. **It stands out of its slice's background**: its contrast (value minus the slice's median)
   exceeds ``threshold`` robust standard deviations (1.4826 times the slice's median absolute
   deviation, a normal distribution's factor; common practice for outlier rules).
2. **It is not faint against the whole survey**: its contrast is at least ``floor`` times the
   strongest contrast in the cube. Processing leaves faint texture (interpolation seams,
   remnants of background removal); on quiet ground rule 1 alone outlines it.
3. **It is not the echo of a stronger reflector**: its contrast is at least ``fraction`` times
   the strongest contrast of every cell whose echo can reach it. A reflector at depth ``z``
   and plan distance ``r`` is seen from the surface point above a cell at the slant distance
   ``sqrt(r² + z²)``; where the slices are not migrated in 3-D (across the lines of a 2-D
   migrated survey), that echo lands in the slice holding the slant distance (a hyperbola's
   limb), and migration spreads it back up on the same circle (a smile). So the cells compared
   with a cell in window ``[top, bottom]`` are those of every slice whose slant distance from
   the cell's surface point, or the cell's from theirs, falls within the window widened by one
   slice thickness up and down (the pulse's own length), within a cone of
   :data:`BEAM_TANGENT` (plan distance over depth) under the antenna. Within its own slice
   this keeps a cell within ``fraction`` of the strongest cell nearer than
   ``sqrt((bottom + thickness)² - top²)`` (near the first Fresnel zone's radius): the
   anomaly's extent at a fixed fraction of its own peak, the way a width is measured at half
   maximum; below and above a reflector, its pulse's tail and its ringing drop out too.

Slice windows are depths: depth slices directly, time slices through the cube's velocity
(``attrs["velocity"]``, ``depth = v t / 2``), elevation slices as heights below the highest
slice top (exact on level ground). A time cube without a velocity skips rule 3.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import scipy.ndimage
import xarray as xr

from slicer.core.errors import SettingsError
from slicer.core.numbers import real

#: Tangent of the half-angle of the cone under the antenna within which echoes are compared
#: (0.7: 35 degrees). Ground-coupled antennas radiate most of their energy within a few tens of
#: degrees of vertical (common practice, from memory); a wider cone also costs time.
BEAM_TANGENT = 0.7

#: Defaults of the rule (chosen on two synthetic surveys: see the outlines module).
THRESHOLD, FRACTION, FLOOR = 3.0, 0.4, 0.02


def check_rule(threshold: float, fraction: float, floor: float) -> None:
    """Refuse settings of the rule that mean nothing (:class:`SettingsError`)."""
    threshold = real(threshold, where="--threshold")
    fraction, floor = real(fraction, where="--fraction"), real(floor, where="--floor")
    if not (math.isfinite(threshold) and threshold > 0):
        raise SettingsError(f"must be a positive number of robust deviations, got {threshold!r}",
                            where="--threshold")
    for name, value in (("fraction", fraction), ("floor", floor)):
        if not (math.isfinite(value) and 0 <= value <= 1):
            raise SettingsError(f"must be a fraction from 0 to 1, got {value!r}",
                                where=f"--{name}")


def slice_background(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Median and robust standard deviation (1.4826 x MAD) of every slice (NaN if empty)."""
    median = np.full(values.shape[0], np.nan)
    sigma = np.full(values.shape[0], np.nan)
    for k, band in enumerate(values):
        finite = band[np.isfinite(band)]
        if finite.size >= 3:
            median[k] = np.median(finite)
            sigma[k] = 1.4826 * np.median(np.abs(finite - median[k]))
    return median, sigma


def slice_windows(cube: xr.DataArray) -> tuple[np.ndarray, np.ndarray]:
    """Top and bottom of every slice window in the cube's own units (the slice coordinate
    itself where the cube has no window bounds)."""
    axis = str(cube.dims[0])
    tops = np.asarray(cube[f"{axis}_top"].values if f"{axis}_top" in cube.coords
                      else cube[axis].values, dtype=float)
    bottoms = np.asarray(cube[f"{axis}_bottom"].values if f"{axis}_bottom" in cube.coords
                         else cube[axis].values, dtype=float)
    return tops, bottoms


def depth_windows(cube: xr.DataArray) -> tuple[np.ndarray, np.ndarray] | None:
    """Top and bottom depth (m) of every slice window for the echo geometry, or None."""
    axis = str(cube.dims[0])
    tops, bottoms = slice_windows(cube)
    if axis == "twt":
        velocity = cube.attrs.get("velocity")
        if velocity is None:
            return None
        tops, bottoms = tops * float(velocity) / 2, bottoms * float(velocity) / 2
    elif axis == "elevation":
        surface = max(tops.max(), bottoms.max())
        tops, bottoms = surface - tops, surface - bottoms
    upper, lower = np.minimum(tops, bottoms), np.maximum(tops, bottoms)
    return np.maximum(upper, 0.0), np.maximum(lower, 0.0)


@functools.lru_cache(maxsize=512)
def _ring(inner: int, outer: int, cell_mm: int) -> np.ndarray:
    """Footprint of the cells whose centres lie between two plan radii (in mm, cell in mm)."""
    cell = cell_mm / 1000.0
    n = math.ceil(outer / 1000.0 / cell)
    yy, xx = np.mgrid[-n:n + 1, -n:n + 1] * cell
    r = np.hypot(yy, xx)
    # a cell counts when any part of it may lie on the ring: half a cell of slack each side
    ring = (r >= inner / 1000.0 - cell / 2) & (r <= outer / 1000.0 + cell / 2)
    ring[n, n] |= inner / 1000.0 <= cell / 2
    return ring


def _echo_rings(tops: np.ndarray, bottoms: np.ndarray, k: int, cell: float):
    """``(j, ring)`` for every slice ``j`` whose echo can reach slice ``k`` (rule 3)."""
    thickness = np.abs(bottoms - tops)
    for j in range(tops.size):
        # the shallower window sends, the deeper receives (limb); or the reverse (smile)
        near, far = (j, k) if tops[j] <= tops[k] else (k, j)
        reach_lo = max(tops[far] - thickness[far], 0.0)
        reach_hi = bottoms[far] + thickness[far]
        outer = min(math.sqrt(max(reach_hi ** 2 - tops[near] ** 2, 0.0)),
                    BEAM_TANGENT * bottoms[far])
        inner = math.sqrt(max(reach_lo ** 2 - bottoms[near] ** 2, 0.0))
        if inner <= outer:
            yield j, _ring(round(inner * 1000), round(outer * 1000), round(cell * 1000))


def echo_survivors(contrast: np.ndarray, candidates: np.ndarray, tops: np.ndarray,
                   bottoms: np.ndarray, cell: float, fraction: float) -> np.ndarray:
    """The candidates that reach ``fraction`` of every contrast whose echo can reach them.

    ``contrast`` is ``(slice, y, x)`` with NaN as 0; ``candidates`` the cells to test;
    ``tops``/``bottoms`` are depths, m. The strongest senders are tried first, and each
    maximum filter runs only over the box around the candidates still standing (the result
    is the same as filtering whole slices).
    """
    strength = np.maximum(contrast, 0.0)
    peaks = strength.reshape(strength.shape[0], -1).max(axis=1)
    out = candidates.copy()
    for k in range(out.shape[0]):
        for j, ring in sorted(_echo_rings(tops, bottoms, k, cell), key=lambda p: -peaks[p[0]]):
            alive = out[k]
            if not alive.any() or fraction * peaks[j] <= contrast[k][alive].min():
                break  # nothing left, or no sender left that could reject anyone
            rows, cols = np.flatnonzero(alive.any(axis=1)), np.flatnonzero(alive.any(axis=0))
            n = ring.shape[0] // 2
            r0, r1 = max(rows[0] - n, 0), rows[-1] + n + 1
            c0, c1 = max(cols[0] - n, 0), cols[-1] + n + 1
            near = scipy.ndimage.maximum_filter(strength[j, r0:r1, c0:c1], footprint=ring,
                                                mode="constant", cval=0.0)
            box = (slice(rows[0], rows[-1] + 1), slice(cols[0], cols[-1] + 1))
            inner = near[rows[0] - r0:rows[-1] + 1 - r0, cols[0] - c0:cols[-1] + 1 - c0]
            alive[box] &= contrast[k][box] >= fraction * inner
    return out


def anomaly_mask(cube: xr.DataArray, *, threshold: float = THRESHOLD,
                 fraction: float = FRACTION, floor: float = FLOOR) -> np.ndarray:
    """Boolean ``(slice, y, x)``: the anomalous cells by the module's three rules (NaN: never).

    Parameters
    ----------
    cube : xarray.DataArray
        A cube (dims ``(depth|twt|elevation, y, x)``), with ``attrs["cell_size"]`` in m.
    threshold : float, keyword-only
        Robust standard deviations above the slice's median (rule 1).
    fraction : float, keyword-only
        Share of the strongest contrast whose echo can reach a cell that it must reach
        (rule 3; 0 turns the rule off).
    floor : float, keyword-only
        Share of the cube's strongest contrast that a cell must reach (rule 2; 0: off).
    """
    check_rule(threshold, fraction, floor)
    values = np.asarray(cube.values, dtype=np.float64)
    median, sigma = slice_background(values)
    with np.errstate(invalid="ignore"):
        contrast = values - median[:, None, None]
        out = (contrast > threshold * sigma[:, None, None]) & (sigma[:, None, None] > 0)
    contrast = np.where(np.isfinite(contrast), contrast, 0.0)
    if not out.any():
        return out
    out &= contrast >= floor * contrast.max()
    windows = depth_windows(cube) if fraction > 0 else None
    if windows is not None:
        out = echo_survivors(contrast, out, *windows, float(cube.attrs["cell_size"]), fraction)
    return out


__all__ = ["BEAM_TANGENT", "FLOOR", "FRACTION", "THRESHOLD", "anomaly_mask", "check_rule",
           "depth_windows", "echo_survivors", "slice_background", "slice_windows"]
