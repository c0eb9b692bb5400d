"""One survey-wide radar velocity from the hyperbola fits of many lines.

:func:`survey_velocity` applies these steps to the fits of :func:`~slicer.velocity.diffraction.
find_diffractions` (records without a line, position or strength skip the steps that need them):

1. **Secondary events are set aside.** On one line, a fit whose apex arrives at least half a
   period after a stronger apex (larger ``strength``) and lies within the first Fresnel zone
   of that apex along the line is not a target of its own: a wave scattered by the target and
   then reflected by a deeper interface (or by the far wall of a hollow pipe) arrives there,
   and its curve reads slower than the ground. The tolerance is the radius of the first
   Fresnel zone at the earlier apex, ``sqrt(lambda z / 2)`` with ``lambda = v T`` (``T`` the
   dominant period, ``z`` the apex depth): the along-line distance at which the earlier
   hyperbola has dropped by half a period below its apex (zero-offset geometry; common
   practice). A real target straight below a stronger one is set aside too; it stays listed.
2. **Linear targets are recognised and corrected.** A line crossing a linear target (wall,
   drain, pipe) at angle ``a`` sees a hyperbola of apparent velocity ``v / sin(a)`` with its
   apex where it crosses the target (a trace ``s`` along the line is ``s sin(a)`` from it;
   geometry, common practice). Fits on at least ``min_lines`` distinct lines whose apexes lie
   on one straight line in plan (within ``plan_tolerance``), with apex times within 10 % (or
   half a period) and apparent velocities within ``tolerance`` of each other, are taken as one
   linear target: its strike is the principal axis of the apexes, and every fit's velocity is
   multiplied by ``|sin(a)|`` for its own line, the error of the strike added (``|cot(a)|``
   times its standard error, relative).
3. **Groups.** The (corrected) fits are grouped by velocity: the modes of a kernel density of
   ``log(v)`` (Gaussian, bandwidth ``tolerance / 2``) each gather the fits within
   ``tolerance`` of their weighted median.
4. **Quality, and which group.** A fit's quality is its semblance score times
   ``1 - rms / (0.25 T)`` (the residual of its picks against the limit at which the search
   rejects a fit; 1 when the period is unknown). A group's quality is the sum over the
   distinct lines in it of the best quality on that line, so a group seen on many lines
   outweighs many fits on one line. Of the groups with at least ``min_count`` fits, the
   slowest whose quality reaches ``share`` (a third) of the best group's is taken. Why both:
   hyperbolas of linear targets the second step cannot recognise (seen on fewer than
   ``min_lines`` lines) can only read fast, which is why the slowest supported group was the
   rule; but that rule let a numerous secondary event (slower than the ground) win over
   better, true apexes. Now slow groups must also carry weight; and secondary events are
   removed first.
5. **Estimate.** The weighted median of the group with weights ``q / (s^2 + tau^2)``: ``q``
   the quality, ``s`` the fit's standard error and ``tau^2`` the scatter between fits beyond
   their own errors (random-effects weights, DerSimonian & Laird 1986, Controlled Clinical
   Trials 7:177-188). A median, because round targets fitted as points read a few per cent
   fast (see :mod:`~slicer.velocity.offset_fit`) and should not pull it.
6. **Uncertainty.** The fits' own standard errors understate it (neighbouring picks share
   noise; the ground varies). Lines are resampled with replacement (the bootstrap, Efron &
   Tibshirani 1993, An Introduction to the Bootstrap, ch. 6) within the chosen group and
   step 5 repeated; ``std_lines`` is the larger of the bootstrap standard deviation and the
   random-effects standard error. With fewer than five lines in the group its fits are
   resampled instead. Neither sees an error that every line shares, such as picks that
   arrive early by an amount growing with the angle from the apex (ground-coupled antennas
   beyond the critical angle): ``std_aperture`` is half the change of the step-5 estimate when
   every fit moves up, then down, by its own aperture uncertainty (``velocity_std_aperture``,
   :func:`~slicer.velocity.aperture.aperture_spread`; 0 for fits without one), and ``std`` is
   the two combined in quadrature, as independent errors.
7. **Disagreement.** Another group with ``min_count`` fits, a quarter of the chosen group's
   quality and a velocity more than 5 % away raises a :class:`~slicer.core.errors.SlicerWarning`,
   which gives half the widest such disagreement (``group_spread``, also in the result; not
   in ``std``, which is the chosen group's): the fits alone cannot always tell which group is
   right. On full-wave simulations of slow ground (relative permittivity 16 and 25,
   2026-12-04) a steel pipe fitted with a free radius read 8-13 % slow and an air-filled one
   fitted as a point 5-6 % fast; given their radii, both read within 1 %.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from slicer.core.errors import SettingsError, warn

__all__ = ["FitAssessment", "SurveyVelocity", "VelocityGroup", "survey_velocity"]

#: Relative difference between supported groups that raises a warning.
DISAGREEMENT = 0.05


class VelocityGroup(NamedTuple):
    """A group of consistent fits: ``velocity`` (m/ns), ``count``, ``lines``, ``quality``."""

    velocity: float
    count: int
    lines: int
    quality: float


class FitAssessment(NamedTuple):
    """What :func:`survey_velocity` made of one fit.

    ``velocity`` and ``velocity_std`` (m/ns) are corrected for the crossing angle of a linear
    target (``angle``, degrees between the line and the target, NaN for none); ``quality``
    is 0-1; ``reason`` is ``"kept"``, ``"secondary"``, ``"other group"`` or ``"unusable"``.
    """

    fit: object
    velocity: float
    velocity_std: float
    angle: float
    quality: float
    reason: str


class SurveyVelocity(NamedTuple):
    """Result of :func:`survey_velocity`.

    ``velocity`` and ``std`` (m/ns): the estimate and its standard uncertainty, ``std_lines``
    (bootstrap over lines) and ``std_aperture`` (systematic, from narrower apertures) in
    quadrature; ``group_spread``: half the widest disagreement with another well-supported
    group (0 for none); ``kept``: the fits used; ``fit_std``: the standard error from the fits' own
    errors and their scatter (random effects); ``groups``: every group, slowest first;
    ``assessed``: one :class:`FitAssessment` per fit given.
    """

    velocity: float
    std: float
    kept: list
    fit_std: float = math.nan
    groups: tuple = ()
    assessed: tuple = ()
    std_lines: float = math.nan
    std_aperture: float = 0.0
    group_spread: float = 0.0


def _attr(fits, name: str, default=math.nan) -> np.ndarray:
    return np.array([float(getattr(f, name, default)) for f in fits])


def _secondary(line, distance, time, depth, velocity, period, strength) -> np.ndarray:
    """Fits whose apex is below a stronger, earlier apex within its Fresnel radius."""
    out = np.zeros(line.size, bool)
    fresnel = np.sqrt(np.abs(velocity * period * depth) / 2.0)
    for i in np.nonzero(np.isfinite(fresnel) & np.isfinite(strength))[0]:
        below = ((line == line[i]) & (time >= time[i] + 0.5 * period[i])
                 & (np.abs(distance - distance[i]) <= fresnel[i]) & (strength < strength[i]))
        out |= below
    return out


def _linear_targets(pos, time, logv, line, period, *, tolerance, plan_tolerance, min_lines,
                    max_gap):
    """Chains of apexes along straight lines in plan: a list of index arrays.

    Greedy: the straight line through two alike apexes (apex times and velocities close) on
    different lines that gathers the most distinct lines, counting only apexes within
    ``plan_tolerance`` of it and connected to the pair by steps of at most ``max_gap`` along
    it (so that unrelated targets far apart do not line up by chance); then the next.
    """
    free = np.all(np.isfinite(pos), axis=1) & np.isfinite(time)
    slack = np.maximum(0.1 * time, np.where(np.isfinite(period), 0.5 * period, 0.0))
    alike = ((np.abs(time[:, None] - time[None, :]) <= np.minimum(slack[:, None], slack[None, :]))
             & (np.abs(logv[:, None] - logv[None, :]) <= tolerance))
    _, line_id = np.unique(line, return_inverse=True)
    plan_tolerance = min(plan_tolerance, _lattice_tolerance(pos, alike, line_id, free,
                                                            plan_tolerance))
    chains = []
    while True:
        best, best_count = None, min_lines - 1
        for i in np.nonzero(free)[0]:
            cand = np.nonzero(free & alike[i])[0]
            for j in cand[(line_id[cand] != line_id[i]) & (cand > i)]:
                d = pos[j] - pos[i]
                norm = math.hypot(*d)
                if norm > max_gap or norm < 1e-6:
                    continue
                u = d / norm
                rel = pos[cand] - pos[i]
                near = np.abs(u[0] * rel[:, 1] - u[1] * rel[:, 0]) <= plan_tolerance
                members, along = cand[near], (rel @ u)[near]
                order = np.argsort(along)
                members, along = members[order], along[order]
                # the run of steps <= max_gap that holds apex i
                cut = np.r_[0, np.cumsum(np.diff(along) > max_gap)]
                run = members[cut == cut[members.tolist().index(i)]]
                count = np.unique(line_id[run]).size
                if count > best_count:
                    best, best_count = (run, pos[i], u), count
        if best is None:
            return chains
        run, origin, u = best
        off = np.abs(u[0] * (pos[run, 1] - origin[1]) - u[1] * (pos[run, 0] - origin[0]))
        # one fit per line: the one nearest the axis
        idx = np.array([run[line_id[run] == g][np.argmin(off[line_id[run] == g])]
                        for g in np.unique(line_id[run])])
        chains.append(idx)
        free[idx] = False


#: Share of the spacing of alike apexes along one line that a linear target's apexes may lie
#: off its axis: a grid of bars 0.2 m apart (concrete) then allows 0.05 m, where the 0.15 m
#: default had chained apexes of neighbouring bars into a slanted "target" (velocity -16 %).
LATTICE_SHARE = 0.25


def _lattice_tolerance(pos, alike, line_id, free, plan_tolerance: float) -> float:
    """:data:`LATTICE_SHARE` of the median distance from an apex to the nearest alike apex
    on its own line, when most apexes have one closer than ``plan_tolerance /
    LATTICE_SHARE`` (a lattice of targets, which must not be confused with one another);
    else inf (two stones close together on one line do not narrow a wall's band)."""
    same = alike & (line_id[:, None] == line_id[None, :]) & free[:, None] & free[None, :]
    np.fill_diagonal(same, False)
    if not same.any():
        return math.inf
    dist = np.hypot(pos[:, None, 0] - pos[None, :, 0], pos[:, None, 1] - pos[None, :, 1])
    nearest = np.where(same, dist, np.inf).min(axis=1)[free]
    packed = (nearest > 0) & (nearest < plan_tolerance / LATTICE_SHARE)
    if packed.sum() <= 0.5 * nearest.size:
        return math.inf
    return LATTICE_SHARE * float(np.median(nearest[packed]))


def _strike(points: np.ndarray) -> tuple[float, float]:
    """Principal-axis direction (radians) of plan points and its standard error."""
    centred = points - points.mean(axis=0)
    _, _, vt = np.linalg.svd(centred, full_matrices=False)
    axis = vt[0]
    along = centred @ axis
    across = centred @ np.array([-axis[1], axis[0]])
    dof = max(points.shape[0] - 2, 1)
    sigma = max(math.sqrt(float(across @ across) / dof), 0.005)  # 5 mm: the picks' rounding
    return math.atan2(axis[1], axis[0]), sigma / math.sqrt(float(along @ along))


def _groups(u, tolerance, weights):
    """Member masks of the kernel-density modes of ``u = log(v)``, re-centred, distinct."""
    grid = np.arange(u.min() - tolerance, u.max() + tolerance, tolerance / 20)
    density = np.exp(-0.5 * ((grid[:, None] - u[None, :]) / (tolerance / 2)) ** 2).sum(axis=1)
    left, right = np.r_[-np.inf, density[:-1]], np.r_[density[1:], -np.inf]
    found = []
    for m in np.nonzero((density >= left) & (density >= right))[0]:
        members = np.abs(u - grid[m]) <= tolerance
        # re-centre on the group's own weighted median until it settles, so that a mode on
        # the shoulder of a larger group does not cut that group in two
        for _ in range(10):
            centre = math.log(_weighted_median(np.exp(u[members]), weights[members]))
            moved = np.abs(u - centre) <= tolerance
            if (moved == members).all() or not moved.any():
                break
            members = moved
        if not any((members == f).all() for f in found):
            found.append(members)
    return found


def _weighted_median(values: np.ndarray, weights: np.ndarray) -> float:
    order = np.argsort(values)
    cum = np.cumsum(weights[order])
    return float(values[order][np.searchsorted(cum, 0.5 * cum[-1])])


def _random_effects(v, s, q, shift=None):
    """Quality- and random-effects-weighted median and its standard error; with ``shift``,
    half the change of the median when every ``v`` moves by its ``shift`` up and down."""
    w = 1.0 / s ** 2
    mean_fixed = float((w * v).sum() / w.sum())
    k = v.size
    c = float(w.sum() - (w ** 2).sum() / w.sum())
    tau2 = max(0.0, (float((w * (v - mean_fixed) ** 2).sum()) - (k - 1)) / c) if c > 0 else 0.0
    ws = q / (s ** 2 + tau2)
    error = math.sqrt(float((ws ** 2 * (s ** 2 + tau2)).sum())) / float(ws.sum())
    # the median of normal errors has 1.2533 (sqrt(pi / 2)) times the standard error of the mean
    if shift is not None:
        return 0.5 * (_weighted_median(v + shift, ws) - _weighted_median(v - shift, ws))
    return _weighted_median(v, ws), 1.2533 * error


def _choose(v, s, q, line_id, *, tolerance, min_count, share):
    """``(members, groups)`` of steps 3-4; ``members`` is None without a supported group."""
    masks = _groups(np.log(v), tolerance, q / s ** 2)
    table = []
    for m in masks:
        best_per_line = {}
        for g, qi in zip(line_id[m], q[m], strict=True):
            best_per_line[g] = max(best_per_line.get(g, 0.0), qi)
        table.append((m, float(sum(best_per_line.values())), len(best_per_line)))
    supported = [t for t in table if t[0].sum() >= min_count]
    if not supported:
        return None, table
    top = max(t[1] for t in supported)
    # slowest first: the centre of each group
    supported.sort(key=lambda t: _weighted_median(v[t[0]], q[t[0]]))
    chosen = next(t for t in supported if t[1] >= share * top)
    return chosen[0], table


#: A survey velocity from fewer fits, or fewer lines, than these is named in a warning: a
#: handful of hyperbolas near the search's limits once read +16 % with a tight +-.
FEW_FITS, FEW_LINES = 6, 3


def survey_velocity(fits, *, tolerance: float = 0.05, min_count: int = 3,
                    share: float = 1 / 3, min_lines: int = 3, plan_tolerance: float = 0.15,
                    max_gap: float = 2.0, resamples: int = 400, seed: int = 0) -> SurveyVelocity:
    """A robust survey-wide velocity from many hyperbola fits (the rule: module docstring).

    Parameters
    ----------
    fits : sequence
        :class:`~slicer.velocity.diffraction.Diffraction` records, or anything with
        ``velocity`` and ``velocity_std`` (m/ns); ``line``, ``distance`` and ``x``, ``y`` (m),
        ``time`` (ns), ``depth`` (m), ``heading`` (degrees), ``period`` (ns), ``strength``,
        ``score`` and ``fit.rms_ns`` are used when present.
    tolerance : float
        Relative half-width of a group of consistent velocities.
    min_count : int
        Fewest fits a group needs to be believed.
    share : float
        Smallest quality, as a share of the best group's, of a slower group taken instead.
    min_lines : int
        Fewest distinct lines whose aligned apexes make a linear target.
    plan_tolerance : float
        Largest distance of an apex from the axis of its linear target, m.
    max_gap : float
        Largest step between neighbouring apexes of a linear target, m (a target crossed by
        lines ``L`` apart at angle ``a`` has steps ``L / sin(a)``: 2 m covers 0.5 m lines down
        to 15 degrees).
    resamples : int
        Bootstrap resamples; ``seed`` seeds them (the result is reproducible).

    Returns
    -------
    SurveyVelocity

    Raises
    ------
    SettingsError
        Bad options, fewer than ``min_count`` usable fits, or no group of ``min_count``
        consistent fits.
    """
    if not 0 < tolerance < 1:
        raise SettingsError(f"must be in (0, 1), got {tolerance!r}", where="tolerance")
    for name, value in (("min_count", min_count), ("min_lines", min_lines),
                        ("resamples", resamples)):
        if not (isinstance(value, int | np.integer) and value >= (2 if name == "min_lines"
                                                                   else 1)):
            raise SettingsError(f"must be a positive integer, got {value!r}", where=name)
    if not (0 < share <= 1 and plan_tolerance > 0 and max_gap > 0):
        raise SettingsError(f"share must be in (0, 1], plan_tolerance and max_gap positive, "
                            f"got {share!r}, {plan_tolerance!r}, {max_gap!r}",
                            where="survey_velocity")
    fits = list(fits)
    usable = np.array([math.isfinite(f.velocity) and f.velocity > 0 for f in fits], bool)
    if usable.sum() < min_count:
        raise SettingsError(f"{int(usable.sum())} usable hyperbola fits; at least {min_count} "
                            "are needed for a survey velocity", where="fits")
    v_app = np.where(usable, [f.velocity if u else 1.0 for f, u in zip(fits, usable,
                                                                      strict=True)], 1.0)
    std = _attr(fits, "velocity_std")
    std = np.where(np.isfinite(std) & (std > 0), std,
                   max(1e-6, 1e-3 * float(np.median(v_app[usable]))))
    line = np.array([str(getattr(f, "line", f"#{k}")) for k, f in enumerate(fits)])
    _, line_id = np.unique(line, return_inverse=True)
    period = _attr(fits, "period")
    time = _attr(fits, "time")
    rms = np.array([float(getattr(getattr(f, "fit", None), "rms_ns", math.nan)) for f in fits])
    q = _attr(fits, "score", 1.0) * np.where(np.isfinite(rms / period),
                                             1.0 - rms / (0.25 * period), 1.0)
    q = np.clip(np.nan_to_num(q, nan=1.0), 0.01, 1.0)
    secondary = usable & _secondary(line, _attr(fits, "distance"), time, _attr(fits, "depth"),
                                    v_app, period, _attr(fits, "strength"))
    use = usable & ~secondary

    # linear targets: correct each fit of a chain by |sin| of its crossing angle
    v, s, angle = v_app.copy(), std.copy(), np.full(len(fits), np.nan)
    pos = np.stack([_attr(fits, "x"), _attr(fits, "y")], axis=1)
    heading = np.radians(_attr(fits, "heading"))
    pos[~np.isfinite(heading)] = np.nan
    where = np.nonzero(use)[0]
    for chain in _linear_targets(pos[where], time[where], np.log(v_app[where]), line[where],
                                 period[where], tolerance=tolerance,
                                 plan_tolerance=plan_tolerance, min_lines=min_lines,
                                 max_gap=max_gap):
        idx = where[chain]
        strike, strike_std = _strike(pos[idx])
        a = strike - heading[idx]
        sin_a, cos_a = np.abs(np.sin(a)), np.abs(np.cos(a))
        v[idx] = v_app[idx] * sin_a
        s[idx] = np.hypot(std[idx] * sin_a, v_app[idx] * cos_a * strike_std)
        angle[idx] = np.degrees(np.arcsin(np.clip(sin_a, 0, 1)))

    members, table = _choose(v[use], s[use], q[use], line_id[use], tolerance=tolerance,
                             min_count=min_count, share=share)
    groups = tuple(sorted((VelocityGroup(_weighted_median(v[use][m], q[use][m]), int(m.sum()),
                                         n_lines, quality) for m, quality, n_lines in table),
                          key=lambda g: g.velocity))
    if members is None:
        vu = v[use]
        raise SettingsError(f"no {min_count} fits agree within {tolerance:.0%}; velocities "
                            f"range {vu.min():.3g}-{vu.max():.3g} m/ns", where="fits")
    chosen = where[members]
    estimate, fit_std = _random_effects(v[chosen], s[chosen], q[chosen])

    # bootstrap over lines (over fits when the group spans fewer than five lines), within the
    # chosen group: which group is chosen is the warning's business, not the error's
    rng = np.random.default_rng(seed)
    unit = line_id[chosen] if np.unique(line_id[chosen]).size >= 5 else np.arange(chosen.size)
    units = np.unique(unit)
    rows = [np.nonzero(unit == g)[0] for g in units]
    replicas = []
    for _ in range(resamples):
        idx = chosen[np.concatenate([rows[k] for k in rng.integers(0, units.size, units.size)])]
        replicas.append(_random_effects(v[idx], s[idx], q[idx])[0])
    spread = float(np.std(replicas, ddof=1)) if len(replicas) > 1 else math.nan
    error = max(fit_std, spread) if math.isfinite(spread) else fit_std
    # systematic: every fit moved by its aperture uncertainty (corrected like its velocity)
    aperture = np.nan_to_num(_attr(fits, "velocity_std_aperture", 0.0)) * v / v_app
    systematic = _random_effects(v[chosen], s[chosen], q[chosen], shift=aperture[chosen])

    top = next(quality for m, quality, _ in table if m is members)
    rivals = [g for g in groups if g.count >= min_count and g.quality >= 0.25 * top
              and abs(g.velocity / estimate - 1) > DISAGREEMENT]
    widest = 0.0
    if rivals:
        others = ", ".join(f"{g.velocity:.4f} m/ns ({g.count} fits on {g.lines} lines)"
                           for g in rivals)
        widest = 0.5 * max(abs(g.velocity - estimate) for g in rivals)
        warn(f"groups of hyperbola fits disagree by more than {DISAGREEMENT:.0%}: took "
             f"{estimate:.4f} m/ns ({chosen.size} fits on {np.unique(line_id[chosen]).size} "
             f"lines), not {others} (half the widest difference: {widest:.4f} m/ns). Pipes "
             "fitted without their radius read several per cent off either way: give "
             "--target-radius for pipes of known size, or check the velocity against a "
             "reflector of known depth")
    n_lines = int(np.unique(line_id[chosen]).size)
    if chosen.size < FEW_FITS or n_lines < FEW_LINES:
        warn(f"the survey velocity {estimate:.4f} m/ns rests on {chosen.size} fit(s) on "
             f"{n_lines} line(s) only: check it against the figures or a reflector of known "
             "depth before trusting it")
    kept_mask = np.zeros(len(fits), bool)
    kept_mask[chosen] = True
    reasons = np.where(kept_mask, "kept", np.where(secondary, "secondary", np.where(
        usable, "other group", "unusable")))
    assessed = tuple(FitAssessment(f, float(v[k]), float(s[k]), float(angle[k]), float(q[k]),
                                   str(reasons[k])) for k, f in enumerate(fits))
    return SurveyVelocity(estimate, math.hypot(error, systematic),
                          [fits[k] for k in chosen], float(fit_std), groups, assessed,
                          float(error), float(systematic), float(widest))
