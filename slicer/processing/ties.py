"""Ties at line crossings: where lines cross, how far their time zero and gain disagree there,
and the per-line corrections that make the whole network agree.

A time zero picked a little early on one line, or an antenna that coupled better on another,
shows where lines of two directions cross: the same ground gives the same trace on both lines,
shifted in time and scaled in amplitude. Measuring that shift and ratio at every crossing
(found by :func:`slicer.geometry.crossings.find_crossings`; :func:`measure_ties`) and solving the
network of ties by least squares (:func:`solve_ties`) gives one time-zero and one gain
correction per line (:func:`apply_ties`): the crossover (mis-tie) analysis of seismic and
potential-field surveys (common practice).

Sign conventions, used everywhere below:

* ``shift_ns`` of a tie is the time of an event on ``line_b`` minus its time on ``line_a``;
* a line's ``time_zero_ns`` correction ``d`` is a further time zero to subtract, as
  :func:`slicer.correct_time_zero` does (``twt -> twt - d``), so the network asks
  ``d_b - d_a = shift_ns``;
* ``log_ratio`` of a tie is ``ln(rms_b / rms_a)``; a line's ``log_gain`` ``g`` multiplies its
  amplitudes by ``exp(g)``, so the network asks ``g_a - g_b = log_ratio``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import scipy.interpolate
import scipy.signal
import scipy.sparse
import scipy.sparse.csgraph
import xarray as xr

from slicer.core.conventions import TRACE, TWT
from slicer.core.errors import SettingsError, SlicerError, warn
from slicer.geometry.crossings import CROSSING, _named, _require, find_crossings
from slicer.processing.steps import dominant_frequency

__all__ = ["CROSSING", "LINE", "apply_ties", "correct_line", "find_crossings", "measure_ties",
           "solve_ties"]

#: Dimension of a tie solution's per-line corrections.
LINE = "line"


# ---------------------------------------------------------------------------------- measuring

def _stack(line: xr.DataArray, position: float, half_width: int):
    """``(twt, trace, envelope, traces used)`` of ``line`` at fractional trace ``position``.

    Traces are weighted by a tent ``1 - |i - position| / (half_width + 1)`` (linear
    interpolation between the two traces either side for ``half_width = 0``). The envelope is
    the same mean of the traces' envelopes (:func:`scipy.signal.hilbert`), which, unlike the
    mean trace, keeps its amplitude where an event dips between the traces.
    """
    n = line.sizes[TRACE]
    if not (math.isfinite(position) and -0.5 <= position <= n - 0.5):
        raise SettingsError(f"trace position {position:g} is outside the line ({n} traces)",
                            where=str(line.attrs.get("line", "line")))
    reach = half_width + 1
    lo = max(int(math.floor(position - reach)) + 1, 0)
    hi = min(int(math.ceil(position + reach)), n)
    weight = np.clip(1.0 - np.abs(np.arange(lo, hi) - position) / reach, 0.0, None)
    weight /= weight.sum()
    part = line.isel({TRACE: slice(lo, hi)}).transpose(TRACE, TWT)
    samples = np.nan_to_num(np.asarray(part.values, dtype=np.float64))
    env = np.abs(scipy.signal.hilbert(samples, axis=-1))
    return np.asarray(line[TWT].values, dtype=np.float64), weight @ samples, weight @ env, part


def _tie(ta, a, env_a, tb, b, env_b, window, max_shift):
    """Shift (ns), log RMS envelope ratio and peak correlation of trace ``b`` against ``a``.

    Returns ``(shift, log_ratio, quality, problem)``; ``problem`` is None or a reason.
    """
    dt = float(ta[1] - ta[0])
    if not math.isclose(float(tb[1] - tb[0]), dt, rel_tol=1e-6):
        # another sample interval: a cubic spline puts b on a's interval, from b's first sample
        grid = tb[0] + dt * np.arange(int(math.floor((tb[-1] - tb[0]) / dt + 1e-9)) + 1)
        b = scipy.interpolate.make_interp_spline(tb, b, k=3)(grid)
        env_b = scipy.interpolate.make_interp_spline(tb, env_b, k=3)(grid)
        tb = grid
    w0, w1 = window or (max(ta[0], tb[0] + max_shift), min(ta[-1], tb[-1] - max_shift))
    ia = np.flatnonzero((ta >= w0) & (ta < w1))
    if ia.size < 4:
        return math.nan, math.nan, 0.0, "the window holds too few samples of line a"
    ib = np.flatnonzero((tb >= ta[ia[0]] - max_shift - dt) & (tb <= ta[ia[-1]] + max_shift + dt))
    if ib.size < ia.size + 2:
        return math.nan, math.nan, 0.0, "the records overlap too little"
    seg_a = a[ia[0]:ia[-1] + 1] - a[ia[0]:ia[-1] + 1].mean()
    seg_b = b[ib[0]:ib[-1] + 1]
    la = seg_a.size
    energy_a = float(seg_a @ seg_a)
    corr = scipy.signal.correlate(seg_b, seg_a, mode="valid")
    lags = scipy.signal.correlation_lags(seg_b.size, la, mode="valid")
    # energy of b under the window at every lag, about its own mean there: a normalised
    # (Pearson) cross-correlation, so the peak value is a quality between -1 and 1
    c1 = np.concatenate([[0.0], np.cumsum(seg_b)])
    c2 = np.concatenate([[0.0], np.cumsum(seg_b * seg_b)])
    total = c1[lags + la] - c1[lags]
    energy_b = np.clip(c2[lags + la] - c2[lags] - total * total / la, 0, None)
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = corr / np.sqrt(energy_a * energy_b)
    shifts = tb[ib[0]] + lags * dt - ta[ia[0]]
    allowed = np.flatnonzero((np.abs(shifts) <= max_shift + 1e-9) & np.isfinite(rho))
    if energy_a <= 0 or allowed.size < 3:
        return math.nan, math.nan, 0.0, "a silent trace"
    k = int(allowed[np.argmax(rho[allowed])])
    if k in (allowed[0], allowed[-1]):
        return math.nan, math.nan, 0.0, "the correlation peaks at the shift limit"
    y0, y1, y2 = rho[k - 1], rho[k], rho[k + 1]
    denom = y0 - 2 * y1 + y2
    frac = 0.5 * (y0 - y2) / denom if denom < 0 else 0.0  # parabola through the peak
    frac = min(max(frac, -0.5), 0.5)
    peak = y1 - 0.25 * (y0 - y2) * frac
    # RMS envelopes at the best whole-sample lag: the amplitude ratio of the two traces
    ea = env_a[ia[0]:ia[-1] + 1]
    eb = env_b[ib[0] + lags[k]:ib[0] + lags[k] + la]
    rms_a, rms_b = float(np.sqrt(np.mean(ea * ea))), float(np.sqrt(np.mean(eb * eb)))
    log_ratio = math.log(rms_b / rms_a) if rms_a > 0 and rms_b > 0 else math.nan
    return float(shifts[k] + frac * dt), log_ratio, float(min(peak, 1.0)), None


def measure_ties(lines: Sequence[xr.DataArray], crossings: xr.Dataset, *,
                 max_shift_ns: float | None = None, window: tuple[float, float] | None = None,
                 half_width: int = 0) -> xr.Dataset:
    """Time shift and amplitude ratio between the two lines at every crossing.

    Each line's trace at the crossing point is interpolated linearly between the two traces
    either side of it (at the fractional ``position_a`` / ``position_b`` of
    :func:`find_crossings`), or, with ``half_width > 0``, is a tent-weighted mean of that many
    more traces either side. The two traces are compared over the time ``window``: the time
    shift is the lag of the largest normalised cross-correlation
    (:func:`scipy.signal.correlate` and :func:`scipy.signal.correlation_lags`, ``valid``
    mode), refined to a fraction of a sample by a parabola through the peak and its
    neighbours (common practice); the amplitude ratio is the ratio of the RMS envelopes over
    the window at that lag; the quality is the peak correlation. A tie whose peak lies at the
    ``max_shift_ns`` limit, or that cannot be measured, gets NaN and quality 0 (warning).

    Averaging along a line steadies a noisy trace but smears events that dip along it (a
    hyperbola flank), differently on the two lines of a crossing, which biases the shift: on
    the network of ``tests/test_ties.py`` the worst line erred by 0.02 ns with
    ``half_width=0``, 0.05 ns with 1 and 0.11 ns with 2; hence the default 0. Samples are
    not interpolated (``twt`` axes offset by a fraction of a sample compare exactly through
    their coordinates) unless ``line_b`` has another sample interval (cubic spline).

    Parameters
    ----------
    lines : sequence of xarray.DataArray
        Lines (dims ``trace, twt``) named as in ``crossings``; any processing (time zero,
        dewow, gain) already applied, the same on every line.
    crossings : xarray.Dataset
        From :func:`find_crossings`.
    max_shift_ns : float, optional
        Largest shift searched (ns). Default one period of the dominant frequency of
        ``line_a`` near the crossing (:func:`slicer.dominant_frequency`): further
        than that the correlation may skip a cycle.
    window : (float, float), optional
        Two-way time gate ``[start, end)`` (ns on ``line_a``'s axis) compared, e.g. below the
        direct wave. Default the whole overlap of the two records.
    half_width : int
        Further traces averaged either side of the crossing (see above).

    Returns
    -------
    xarray.Dataset
        ``crossings`` plus ``shift_ns`` (ns, event time on ``line_b`` minus on ``line_a``),
        ``log_ratio`` (``ln(rms_b / rms_a)``), ``amplitude_ratio`` and ``quality`` (peak
        normalised correlation, <= 1).
    """
    named = _named(lines)
    if max_shift_ns is not None and not (math.isfinite(max_shift_ns) and max_shift_ns > 0):
        raise SettingsError(f"must be a positive number of ns, got {max_shift_ns!r}",
                            where="max_shift_ns")
    if window is not None:
        w0, w1 = (float(v) for v in window)
        if not (math.isfinite(w0) and math.isfinite(w1) and w0 < w1):
            raise SettingsError(f"must be (start, end) ns with start < end, got {window!r}",
                                where="window")
        window = (w0, w1)
    if int(half_width) != half_width or half_width < 0:
        raise SettingsError(f"must be a whole number >= 0, got {half_width!r}",
                            where="half_width")
    _require(crossings, ("line_a", "trace_a", "line_b", "trace_b"), "crossings")
    n = crossings.sizes.get(CROSSING, 0)
    at_a = crossings["position_a" if "position_a" in crossings else "trace_a"].values
    at_b = crossings["position_b" if "position_b" in crossings else "trace_b"].values
    shift, log_ratio, quality = np.full(n, np.nan), np.full(n, np.nan), np.zeros(n)
    problems = []
    for c in range(n):
        name_a, name_b = str(crossings["line_a"].values[c]), str(crossings["line_b"].values[c])
        for name in (name_a, name_b):
            if name not in named:
                raise SettingsError(f"crossing {c} names line {name!r}, which is not among "
                                    "the lines given", where="crossings")
        ta, a, env_a, part = _stack(named[name_a], float(at_a[c]), half_width)
        tb, b, env_b, _ = _stack(named[name_b], float(at_b[c]), half_width)
        limit = max_shift_ns
        if limit is None:
            try:
                limit = 1.0 / dominant_frequency(part)
            except SlicerError:
                problems.append(f"{c} ({name_a}/{name_b}: a silent trace)")
                continue
        shift[c], log_ratio[c], quality[c], why = _tie(ta, a, env_a, tb, b, env_b, window,
                                                          limit)
        if why:
            problems.append(f"{c} ({name_a}/{name_b}: {why})")
    if problems:
        warn(f"{len(problems)} tie(s) could not be measured and are left out: "
             + "; ".join(problems[:10]) + ("; ..." if len(problems) > 10 else ""))
    out = crossings.copy()
    out["shift_ns"] = (CROSSING, shift, {"units": "ns", "long_name":
                                         "event time on line_b minus on line_a"})
    out["log_ratio"] = (CROSSING, log_ratio, {"units": "Np", "long_name":
                                              "ln(rms amplitude on line_b / on line_a)"})
    out["amplitude_ratio"] = (CROSSING, np.exp(log_ratio), {"units": "1"})
    out["quality"] = (CROSSING, quality, {"units": "1", "long_name":
                                          "peak normalised cross-correlation"})
    return out


# ------------------------------------------------------------------------------------ solving

def _rms(values: np.ndarray) -> float:
    return float(np.sqrt(np.mean(values ** 2))) if values.size else math.nan


def solve_ties(ties: xr.Dataset, line_names: Sequence[str], *, reference: str | None = None,
               min_quality: float = 0.5) -> xr.Dataset:
    """Per-line time-zero and gain corrections that best agree with every tie.

    Each tie asks ``d_b - d_a = shift_ns`` and ``g_a - g_b = log_ratio`` (see the module
    docstring); all ties together are solved by weighted least squares
    (:func:`numpy.linalg.lstsq`), each tie weighted by its quality. Ties only fix differences
    between lines, so one more condition removes the common offset (the null space): with
    ``reference`` that line's corrections are 0; without, the corrections average 0 over the
    lines (the network keeps its mean time zero and mean gain). A network that does not
    connect every line is refused, naming the lines cut off.

    Parameters
    ----------
    ties : xarray.Dataset
        From :func:`measure_ties`.
    line_names : sequence of str
        The lines to correct; each must be tied, directly or through others, to the rest.
    reference : str, optional
        Line held fixed.
    min_quality : float
        Ties of lower quality (or not measured) are left out.

    Returns
    -------
    xarray.Dataset
        Dim ``line``: ``time_zero_ns`` (ns, to subtract from ``twt``), ``log_gain`` (Np),
        ``gain`` (``exp(log_gain)``, the amplitude factor) and ``ties`` (ties used per line).
        Dim ``crossing``: ``used``, and ``shift_residual_ns`` and ``log_ratio_residual``, the
        shift and log ratio left after correction (NaN where unused). Attrs: ``reference``,
        ``misfit_before_ns``, ``misfit_after_ns``, ``gain_misfit_before``,
        ``gain_misfit_after`` (RMS over the ties used, unweighted; gain in Np).
    """
    names = [str(n) for n in line_names]
    if not names:
        raise SettingsError("no lines to solve for", where="line_names")
    if len(set(names)) != len(names):
        raise SettingsError("line names repeat", where="line_names")
    if reference is not None and str(reference) not in names:
        raise SettingsError(f"{reference!r} is not among the lines", where="reference")
    if not 0 <= min_quality <= 1:
        raise SettingsError(f"must lie in [0, 1], got {min_quality!r}", where="min_quality")
    _require(ties, ("line_a", "line_b", "shift_ns", "log_ratio", "quality"), "ties")
    index = {n: i for i, n in enumerate(names)}
    la = np.asarray(ties["line_a"].values, dtype=str)
    lb = np.asarray(ties["line_b"].values, dtype=str)
    unknown = sorted((set(la) | set(lb)) - set(names))
    if unknown:
        raise SettingsError(f"ties name lines not in line_names: {', '.join(unknown)}",
                            where="ties")
    shift = np.asarray(ties["shift_ns"].values, dtype=np.float64)
    log_ratio = np.asarray(ties["log_ratio"].values, dtype=np.float64)
    quality = np.asarray(ties["quality"].values, dtype=np.float64)
    used = np.isfinite(shift) & np.isfinite(log_ratio) & (quality >= min_quality) & (la != lb)
    if (~used).any():
        warn(f"{int((~used).sum())} of {used.size} tie(s) left out (not measured or quality "
             f"below {min_quality:g})")
    ia = np.array([index[n] for n in la[used]], dtype=np.int64)
    ib = np.array([index[n] for n in lb[used]], dtype=np.int64)
    m, n = ia.size, len(names)
    graph = scipy.sparse.coo_array((np.ones(m), (ia, ib)), shape=(n, n))
    count, label = scipy.sparse.csgraph.connected_components(graph, directed=False)
    if count > 1:
        main = label[index[reference]] if reference is not None else np.argmax(
            np.bincount(label))
        cut = [names[k] for k in range(n) if label[k] != main]
        raise SettingsError(
            f"the tie network is not connected: {', '.join(cut)} "
            f"{'has' if len(cut) == 1 else 'have'} no chain of ties to "
            f"{reference if reference is not None else 'the other lines'}", where="ties")
    design = np.zeros((m, n))
    design[np.arange(m), ib], design[np.arange(m), ia] = 1.0, -1.0
    rhs = np.column_stack([shift[used], -log_ratio[used]])  # d_b - d_a; g_b - g_a
    weight = np.sqrt(quality[used])[:, None]
    a, b = design * weight, rhs * weight
    if reference is None:
        # the mean condition as one more equation: it can be met exactly by moving the whole
        # network, so it leaves the tie residuals of the least-squares solution unchanged
        solution = np.linalg.lstsq(np.vstack([a, np.ones((1, n))]),
                                   np.vstack([b, np.zeros((1, 2))]), rcond=None)[0]
    else:
        keep = np.arange(n) != index[reference]
        solution = np.zeros((n, 2))
        solution[keep] = np.linalg.lstsq(a[:, keep], b, rcond=None)[0]
    fitted = design @ solution
    res_t, res_g = np.full(used.size, np.nan), np.full(used.size, np.nan)
    res_t[used], res_g[used] = shift[used] - fitted[:, 0], log_ratio[used] + fitted[:, 1]
    per_line = np.bincount(np.concatenate([ia, ib]), minlength=n)
    crossing = ties[CROSSING].values if CROSSING in ties.coords else np.arange(used.size)
    return xr.Dataset(
        {"time_zero_ns": (LINE, solution[:, 0], {
            "units": "ns", "long_name": "time-zero correction (subtracted from twt)"}),
         "log_gain": (LINE, solution[:, 1], {"units": "Np", "long_name": "ln amplitude factor"}),
         "gain": (LINE, np.exp(solution[:, 1]), {"units": "1", "long_name": "amplitude factor"}),
         "ties": (LINE, per_line, {"units": "1"}),
         "used": (CROSSING, used),
         "shift_residual_ns": (CROSSING, res_t, {"units": "ns"}),
         "log_ratio_residual": (CROSSING, res_g, {"units": "Np"})},
        coords={LINE: np.array(names, dtype=str), CROSSING: crossing},
        attrs={"reference": str(reference) if reference is not None else "mean of all lines",
               "misfit_before_ns": _rms(shift[used]), "misfit_after_ns": _rms(res_t[used]),
               "gain_misfit_before": _rms(log_ratio[used]),
               "gain_misfit_after": _rms(res_g[used]), "n_ties": int(m)})


# ----------------------------------------------------------------------------------- applying

def apply_ties(lines: Sequence[xr.DataArray], solution: xr.Dataset) -> list[xr.DataArray]:
    """Apply a tie solution: shift each line's time axis and scale its amplitudes.

    Time zero is a coordinate shift in this project (no resampling): ``twt`` becomes
    ``twt - time_zero_ns`` and ``attrs["time_zero_ns"]`` grows by it, as in
    :func:`slicer.correct_time_zero`; amplitudes are multiplied by ``gain``. The
    step is recorded in ``attrs["history"]``. A line the solution does not know is returned
    unchanged (warning).

    Parameters
    ----------
    lines : sequence of xarray.DataArray
        Lines (dims ``trace, twt``) named by ``attrs["line"]``.
    solution : xarray.Dataset
        From :func:`solve_ties`.

    Returns
    -------
    list of xarray.DataArray
        The corrected lines, in the order given.
    """
    _require(solution, ("time_zero_ns", "gain"), "solution")
    known = {str(n): k for k, n in enumerate(solution[LINE].values)}
    out, missing = [], []
    for line in lines:
        name = str(line.attrs.get("line", ""))
        if name not in known:
            missing.append(name or "(unnamed)")
            out.append(line)
            continue
        out.append(correct_line(line, float(solution["time_zero_ns"].values[known[name]]),
                                float(solution["gain"].values[known[name]])))
    if missing:
        warn(f"no tie correction for {', '.join(missing)}; left unchanged")
    return out


def correct_line(line: xr.DataArray, time_zero_ns: float, gain: float) -> xr.DataArray:
    """One line's tie correction: ``twt -> twt - time_zero_ns`` and amplitudes times ``gain``.

    As :func:`slicer.correct_time_zero` does, the shift moves the ``twt``
    coordinate (no resampling) and adds to ``attrs["time_zero_ns"]``; the step goes into
    ``attrs["history"]``.
    """
    twt = line[TWT]
    corrected = (line * np.float32(gain)).astype(np.float32)
    corrected = corrected.assign_coords({TWT: (TWT, twt.values - time_zero_ns, twt.attrs)})
    step = tie_step(time_zero_ns, gain)
    history = line.attrs.get("history", "")
    corrected.attrs = {**line.attrs,
                       "time_zero_ns": float(line.attrs.get("time_zero_ns", 0.0)) + time_zero_ns,
                       "history": f"{history}; {step}" if history else step}
    corrected.name = line.name
    return corrected


def tie_step(time_zero_ns: float, gain: float) -> str:
    """The history words of a tie correction (:func:`correct_line`)."""
    return f"tie correction: time zero {time_zero_ns:+.3f} ns, gain {gain:.4g}"
