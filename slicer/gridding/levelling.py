"""Line levelling: removing line-to-line amplitude stripes from slices, keeping linear features.

A line recorded with a little more gain or better antenna coupling than its neighbours is
brighter in every slice along its whole length, and the plan view shows stripes. Levelling
estimates, per line and slice, how much brighter or darker the line is than its neighbours and
divides that out, before gridding.

Why the trace x slice table, not the gridded slices: on the table every value still belongs to
one line, so a line's level is measured on its own traces only; after gridding, cells between
lines blend two lines and the stripe is smeared across them.

Method, per slice and per set of parallel lines (lines within 15 degrees of one direction;
an orthogonal set is levelled on its own):

1. **Relative level of neighbouring lines.** For each line and each of the next two parallel
   lines beside it, every trace is paired with the other line's trace at the same position
   along the lines, and the level difference is the median over the pairs of
   ``log(value_a) - log(value_b)`` (or of ``value_a - value_b`` for ``kind="offset"``),
   after leaving out pairs more than 3 robust deviations from it (:func:`_clipped_median`).
   Pairing at the same along-line position cancels the smooth ground signal, so the
   differences are tightly spread. A bright feature on a fraction ``p < 1/2`` of the line
   would move a plain median to the ``1 / (2 (1 - p))`` quantile of the other differences
   (the 71 % quantile for ``p = 0.3``); a feature that stands out from that spread is left
   out instead and moves it not at all. A feature over most of the line's length, or one too
   faint to stand out (then its bias is small too), does move the level.
2. **Line levels.** Least squares (:func:`numpy.linalg.lstsq`) over the pairs gives each
   line's level relative to the set (mean 0).
3. **Stripe = level minus its smooth trend across the lines.** The trend is a robust locally
   weighted linear fit of the levels against the lines' across-line offsets (Cleveland 1979,
   "Robust locally weighted regression and smoothing scatterplots", JASA 74:829-836:
   weighted least squares with bisquare robustness weights, here with Gaussian weights of
   standard deviation ``neighbours`` line spacings instead of a tricube). A real trend across
   the survey (wetter ground to the north) is kept; what the lines do differently from their
   neighbours is divided out (``kind="gain"``) or subtracted (``kind="offset"``).

Limits: a feature running along a line over most of its length, and narrower across the lines
than about ``neighbours`` spacings, cannot be told from a stripe and is levelled away; so is an
across-line structure that is the same along the whole survey at that scale. A level that
drifts along a line is not corrected (one factor per line and slice).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import scipy.sparse
import scipy.sparse.csgraph
import xarray as xr

from slicer.core.conventions import SLICE, TRACE, X, Y
from slicer.core.errors import SettingsError, warn
from slicer.gridding.neighbours import table_arrays

#: Lines within this angle (degrees) of each other belong to one parallel set.
PARALLEL_DEGREES = 15.0
#: Each line is compared with this many parallel lines on each side (for the pairs).
PAIR_REACH = 2
#: Least number of paired traces for a level difference.
MIN_PAIRS = 5


def _median(values: np.ndarray) -> np.ndarray:
    """Median along axis 0 ignoring NaN (NaN where a column has none).

    Sorting puts NaN last, so the median of each column is read at the middle of its finite
    count; :func:`numpy.nanmedian` gives the same but loops over columns in Python when any
    NaN is present.
    """
    v = np.sort(np.asarray(values, dtype=np.float64), axis=0)
    if v.shape[0] == 0:
        return np.full(v.shape[1:], np.nan)
    count = (~np.isnan(v)).sum(axis=0)
    lo = np.take_along_axis(v, np.clip((count - 1) // 2, 0, None)[None], axis=0)[0]
    hi = np.take_along_axis(v, np.clip(count // 2, 0, v.shape[0] - 1)[None], axis=0)[0]
    return np.where(count > 0, 0.5 * (lo + hi), np.nan)


def _clipped_median(values: np.ndarray, *, cut: float = 3.0, rounds: int = 3) -> np.ndarray:
    """Median along axis 0 after leaving out values more than ``cut`` robust deviations away.

    The robust deviation is 1.4826 times the median absolute deviation (the Hampel
    identifier; Leys et al. 2013, J. Exp. Soc. Psychol. 49:764-766). A bright feature on a
    minority of the pairs sits far out in the differences and is left out, so it no longer
    moves the median to a higher quantile of the others.
    """
    v = np.array(values, dtype=np.float64)
    centre = _median(v)
    for _ in range(rounds):
        spread = 1.4826 * _median(np.abs(v - centre))
        keep = np.abs(v - centre) <= cut * spread + 1e-12
        centre = _median(np.where(keep, v, np.nan))
    return centre


class _Geometry:
    """Lines of a table: members, parallel sets, across-line offsets and trace pairs."""

    def __init__(self, x: np.ndarray, y: np.ndarray, line: np.ndarray):
        self.ids, inverse = np.unique(line, return_inverse=True)
        self.members = [np.flatnonzero(inverse == k) for k in range(len(self.ids))]
        self.points = np.column_stack([x, y])
        directions, centres, steps = [], [], []
        for m in self.members:
            p = self.points[m]
            centre = p.mean(axis=0)
            u = np.array([1.0, 0.0])
            if len(m) > 1:  # principal axis of the positions (its sign does not matter)
                u = np.linalg.svd(p - centre, full_matrices=False)[2][0]
            directions.append(u)
            centres.append(centre)
            gaps = np.diff(np.sort((p - centre) @ u))
            steps.append(float(np.median(gaps[gaps > 0])) if (gaps > 0).any() else math.nan)
        self.direction, self.centre = np.array(directions), np.array(centres)
        self.step = np.array(steps)
        self.sets = self._parallel_sets()

    def _parallel_sets(self) -> list[np.ndarray]:
        cos_tol = math.cos(math.radians(PARALLEL_DEGREES))
        label = np.full(len(self.ids), -1)
        heads: list[np.ndarray] = []
        for k, u in enumerate(self.direction):
            for s, h in enumerate(heads):
                if abs(float(u @ h)) >= cos_tol:
                    label[k] = s
                    break
            else:
                heads.append(u)
                label[k] = len(heads) - 1
        out = []
        for s, h in enumerate(heads):
            members = np.flatnonzero(label == s)
            across = self.centre[members] @ np.array([-h[1], h[0]])
            out.append((members[np.argsort(across, kind="stable")], np.sort(across), h))
        return out

    def pairs(self, members: np.ndarray, across: np.ndarray, u: np.ndarray):
        """Pairs of nearby parallel lines with the indices of their matched traces."""
        gaps = np.diff(across)
        spacing = float(np.median(gaps[gaps > 0])) if (gaps > 0).any() else math.inf
        out = []
        for i, k in enumerate(members):
            along_k = self.points[self.members[k]] @ u
            for j_pos in range(i + 1, min(i + 1 + PAIR_REACH, len(members))):
                j = members[j_pos]
                if across[j_pos] - across[i] > (PAIR_REACH + 0.5) * spacing:
                    break
                along_j = self.points[self.members[j]] @ u
                order = np.argsort(along_j)
                sorted_j = along_j[order]
                pos = np.clip(np.searchsorted(sorted_j, along_k), 1, len(sorted_j) - 1) \
                    if len(sorted_j) > 1 else np.zeros(len(along_k), dtype=np.int64)
                left = np.clip(pos - 1, 0, len(sorted_j) - 1)
                nearer = np.where(np.abs(sorted_j[left] - along_k)
                                  <= np.abs(sorted_j[pos] - along_k), left, pos)
                tol = np.nanmax([self.step[k], self.step[j]])
                ok = np.abs(sorted_j[nearer] - along_k) <= (tol if math.isfinite(tol) else 0)
                if ok.sum() >= MIN_PAIRS:
                    out.append((i, j_pos, self.members[k][ok],
                                self.members[j][order[nearer[ok]]]))
        return out, spacing


def _local_linear(pos: np.ndarray, levels: np.ndarray, sigma: float,
                  iterations: int = 2) -> np.ndarray:
    """Robust locally weighted linear fit of ``levels`` (lines x slices) at every ``pos``.

    Cleveland (1979): at each line a weighted least-squares line through the levels, weights
    Gaussian in across-line distance (cut at 3 sigma) times bisquare robustness weights
    ``(1 - (e / 6 s)^2)^2`` of the residuals ``e`` (``s`` their median absolute value),
    recomputed ``iterations`` times.
    """
    d = pos[None, :] - pos[:, None]
    w = np.exp(-0.5 * (d / sigma) ** 2) * (np.abs(d) <= 3 * sigma)
    robust = np.ones_like(levels)
    fit = levels.copy()
    for it in range(iterations + 1):
        s0, s1, s2 = w @ robust, (w * d) @ robust, (w * d * d) @ robust
        t0, t1 = w @ (robust * levels), (w * d) @ (robust * levels)
        det = s0 * s2 - s1 * s1
        with np.errstate(invalid="ignore", divide="ignore"):
            linear = (s2 * t0 - s1 * t1) / det
            fit = np.where(det > 1e-9 * np.maximum(s0 * s2, 1e-300), linear, t0 / s0)
        if it == iterations:
            break
        resid = levels - fit
        scale = np.median(np.abs(resid), axis=0)  # per slice (column)
        with np.errstate(invalid="ignore", divide="ignore"):
            u = np.where(scale > 0, resid / (6 * scale), 0.0)
        robust = np.clip(1 - u * u, 0, None) ** 2
    return fit


def _check_options(method: str, kind: str, neighbours: float) -> None:
    if method not in ("median", "mean"):
        raise SettingsError(f"method must be 'median' or 'mean', got {method!r}",
                            where="method")
    if kind not in ("gain", "offset"):
        raise SettingsError(f"kind must be 'gain' or 'offset', got {kind!r}", where="kind")
    if not (isinstance(neighbours, int | float) and math.isfinite(neighbours)
            and neighbours > 0):
        raise SettingsError(f"must be a positive number of line spacings, got {neighbours!r}",
                            where="neighbours")


def line_corrections(table: xr.DataArray, *, method: str = "median", kind: str = "gain",
                     neighbours: float = 2.0) -> xr.DataArray:
    """Per-line, per-slice levelling corrections of a trace x slice table.

    See the module docstring for the method.

    Parameters
    ----------
    table : xarray.DataArray
        Dims ``(trace, slice)`` with per-trace ``x``, ``y`` (m) and ``line``.
    method : {"median", "mean"}
        Statistic of the paired differences: the median resists features along part of a line;
        the mean does not (kept for comparison).
    kind : {"gain", "offset"}
        Stripes as factors (envelope slices, default; values <= 0 are left out of the
        statistics) or as offsets.
    neighbours : float
        Standard deviation, in line spacings, of the across-line weights of the trend.

    Returns
    -------
    xarray.DataArray
        Dims ``(line, slice)``: the factor to multiply (gain) or the offset to add to every
        value of the line; 1 (or 0) where a line has no parallel neighbour to compare with.
    """
    _check_options(method, kind, neighbours)
    values, x, y, line = table_arrays(table)
    geo = _Geometry(x, y, line)
    if kind == "gain":
        with np.errstate(invalid="ignore", divide="ignore"):
            f = np.where(values > 0, np.log(np.where(values > 0, values, 1.0)), np.nan)
    else:
        f = values
    n_lines, n_slices = len(geo.ids), values.shape[1]
    stripe = np.zeros((n_lines, n_slices))
    levelled = np.zeros(n_lines, dtype=bool)
    stat = _clipped_median if method == "median" else (lambda v: np.nanmean(v, axis=0))
    for members, across, u in geo.sets:
        pairs, spacing = geo.pairs(members, across, u)
        if not pairs:
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            diff = np.array([stat(f[a] - f[b]) for _, _, a, b in pairs])  # (pairs, slices)
            counts = np.array([np.isfinite(f[a] - f[b]).sum(axis=0) for _, _, a, b in pairs])
        diff[counts < MIN_PAIRS] = np.nan
        ia = np.array([p[0] for p in pairs])
        ib = np.array([p[1] for p in pairs])
        sigma = neighbours * (spacing if math.isfinite(spacing) else 1.0)
        valid = np.isfinite(diff)
        patterns, which = np.unique(valid, axis=1, return_inverse=True)
        for p, ok in enumerate(patterns.T):  # slices with the same valid pairs solve together
            cols = np.flatnonzero(which.ravel() == p)
            graph = scipy.sparse.coo_array((np.ones(ok.sum()), (ia[ok], ib[ok])),
                                           shape=(len(members),) * 2)
            _, label = scipy.sparse.csgraph.connected_components(graph, directed=False)
            for comp in np.unique(label):
                inside = np.flatnonzero(label == comp)
                if inside.size < 2:
                    continue
                rows = np.flatnonzero(ok & np.isin(ia, inside))
                index = np.searchsorted(inside, np.concatenate([ia[rows], ib[rows]]))
                design = np.zeros((rows.size + 1, inside.size))
                design[np.arange(rows.size), index[:rows.size]] = 1.0
                design[np.arange(rows.size), index[rows.size:]] = -1.0
                design[-1] = 1.0  # the levels average 0 (they are known up to a constant)
                rhs = np.vstack([diff[np.ix_(rows, cols)], np.zeros((1, cols.size))])
                level = np.linalg.lstsq(design, rhs, rcond=None)[0]
                trend = _local_linear(across[inside], level, sigma)
                stripe[np.ix_(members[inside], cols)] = level - trend
                levelled[members[inside]] = True
    if not levelled.all():
        lonely = ", ".join(str(v) for v in geo.ids[~levelled])
        warn(f"line(s) {lonely} have no overlapping parallel neighbour and are not levelled")
    if kind == "gain":
        data, units = np.exp(-stripe), "1"
    else:
        data, units = -stripe, table.attrs.get("units", "1")
    return xr.DataArray(
        data, dims=("line", SLICE), name=f"levelling_{kind}",
        coords={"line": geo.ids, **{k: v for k, v in table.coords.items()
                                    if v.dims == (SLICE,)}},
        attrs={"units": units, "long_name": "line levelling factor" if kind == "gain"
               else "line levelling offset"})


def level_lines(table: xr.DataArray, *, method: str = "median", kind: str = "gain",
                neighbours: float = 2.0) -> xr.DataArray:
    """Remove line-to-line stripes from a trace x slice table (before gridding).

    Applies :func:`line_corrections` (see the module docstring): each line's values are
    multiplied by its factor (``kind="gain"``) or shifted by its offset (``"offset"``).

    Parameters
    ----------
    table : xarray.DataArray
        Dims ``(trace, slice)`` with per-trace ``x``, ``y`` (m) and ``line``.
    method, kind, neighbours
        See :func:`line_corrections`.

    Returns
    -------
    xarray.DataArray
        The table levelled, same dims, coords and dtype; ``attrs["levelling"]`` says how.
    """
    corrections = line_corrections(table, method=method, kind=kind, neighbours=neighbours)
    _, inverse = np.unique(np.asarray(table["line"].values), return_inverse=True)
    per_trace = xr.DataArray(corrections.values[inverse], dims=(TRACE, SLICE))
    out = table * per_trace if kind == "gain" else table + per_trace
    out = out.astype(table.dtype)
    out.attrs = {**table.attrs, "levelling": f"line levelling ({method} of paired differences "
                                             f"with neighbouring lines, {kind}, trend over "
                                             f"{neighbours:g} line spacings)"}
    out.name = table.name
    return out


def stripe_amplitude(data: xr.DataArray, *, across: str = "y") -> xr.DataArray:
    """How striped slices are: RMS line-to-line difference of line medians over the level.

    For a trace x slice table, each line's median per slice is taken, and lines are ordered
    across each parallel set; the result is the RMS of the differences between neighbouring
    lines' medians divided by the median of all values of the slice. For a gridded cube
    (dims ``(..., y, x)``) the rows (``across="y"``, lines running west-east) or the columns
    (``across="x"``) stand in for the lines. 0 for a slice without stripes; a smooth trend
    across the lines adds its own small share. Meant for positive values (envelope slices).

    Parameters
    ----------
    data : xarray.DataArray
        A trace x slice table or a cube.
    across : {"y", "x"}
        For a cube: the dim along which lines follow each other.

    Returns
    -------
    xarray.DataArray
        One value per slice (dimensionless).
    """
    if isinstance(data, xr.DataArray) and set(data.dims) == {TRACE, SLICE}:
        values, x, y, line = table_arrays(data)
        geo = _Geometry(x, y, line)
        medians = np.array([_median(values[m]) for m in geo.members])  # (lines, slices)
        steps = [np.diff(medians[members], axis=0) for members, _, _ in geo.sets
                 if len(members) > 1]
        diffs = np.concatenate(steps) if steps else np.full((0, values.shape[1]), np.nan)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            rms = np.sqrt(np.nanmean(diffs ** 2, axis=0))
        out = xr.DataArray(rms / np.abs(_median(values)), dims=(SLICE,),
                           coords={k: v for k, v in data.coords.items() if v.dims == (SLICE,)})
    elif isinstance(data, xr.DataArray) and {X, Y} <= set(data.dims):
        if across not in (X, Y):
            raise SettingsError(f"must be 'x' or 'y', got {across!r}", where="across")
        other = X if across == Y else Y
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            rows = data.median(other, skipna=True)
            rms = np.sqrt((rows.diff(across) ** 2).mean(across, skipna=True))
            out = rms / np.abs(data.median((X, Y), skipna=True))
    else:
        raise SettingsError("expected a trace x slice table or a cube with dims y and x",
                            where="data")
    out.name = "stripe_amplitude"
    out.attrs = {"units": "1", "long_name": "RMS line-to-line difference of line medians "
                                            "over the median level"}
    return out
