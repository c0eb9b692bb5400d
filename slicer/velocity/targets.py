"""Radii the user knows for the diffracting targets, and which fit each applies to.

A round target of radius ``R`` fitted as a point reads fast, by about ``sqrt(c / (c - R))``
for its centre at depth ``c`` (the apex curvature of ``t = 2 (sqrt(c^2 + x^2) - R) / v``
against the point form; geometry; Shihab & Al-Nuaimy 2005, Subsurface Sensing Technologies
and Applications 6:151-166, for the curve), 7-8 % for the pipes of the full-wave fixture of
``tests/fullwave``. The radius and the velocity trade off along the curve, so a free radius
is only as good as the picks' shape: with envelope peaks, what the coupling model of
:mod:`slicer.velocity.coupling` left in them (0.03-0.05 ns early from 20 to 50 degrees off
the apex) pulled a free radius to two or three times its size and the velocity 8-15 % slow
(measured 2026 on the fixture); with lags against the apex echo (0.01-0.02 ns left) the
fixture's free radii come out 0.047-0.083 m and the velocity -1.7 %, but pipes about a
wavelength deep stay unresolved (the round form needs picks far down the flanks,
:mod:`slicer.velocity.offset_fit`). A radius known from the site (a pipe's outer diameter
from the utility's records, or one exposed in a pit) removes the ambiguity;
:func:`radius_for` gives each fit the radius of the target it belongs to.

A :class:`TargetRadius` holds a radius, its standard uncertainty and optionally a route: the
polyline of a linear target in plan (survey CRS, m). A fit whose apex lies within
:data:`ROUTE_TOLERANCE` of a route takes the nearest route's radius; one without a route is
the default for every other fit. Positions m.
"""

from __future__ import annotations

import math
import re
from typing import NamedTuple

import numpy as np

from slicer.core.errors import SettingsError
from slicer.velocity.models import _finite

__all__ = ["RADIUS_STD_SHARE", "ROUTE_TOLERANCE", "TargetRadius", "parse_target_radius",
           "radius_for", "target_radius"]

#: Largest distance in plan from a fit's apex to a target's route for the route's radius to
#: apply, m: about the accuracy of a utility's plotted route (an assumption, not a sourced
#: figure); nearer routes win.
ROUTE_TOLERANCE = 0.5

#: Default standard uncertainty of a given radius, as a share of it: the outer diameter of a
#: pipe is known to millimetres, but the radius its echo behaves as (its scattering centre at
#: a wavelength comparable to it) is not quite the geometric one. A tenth is an assumption.
RADIUS_STD_SHARE = 0.1


class TargetRadius(NamedTuple):
    """A known target radius (m) and its standard uncertainty (m); ``route``: the target's
    polyline in plan, a tuple of ``(x, y)`` in m, or empty for every fit off other routes."""

    radius: float
    std: float
    route: tuple = ()

    def to_json(self) -> dict:
        """``radius``, ``radius_std`` (m) and ``route`` (a list of ``[x, y]``, m)."""
        return {"radius": self.radius, "radius_std": self.std,
                "route": [list(p) for p in self.route]}


def _number(text, where: str) -> float:
    return _finite(text, where, "a radius, its uncertainty or a route coordinate (m)")


def target_radius(radius, *, std=None, route=(), where: str = "--target-radius") -> TargetRadius:
    """A checked :class:`TargetRadius`: ``0 < radius < 10`` m, ``std`` (default
    :data:`RADIUS_STD_SHARE` of the radius) ``>= 0``, a route of two or more distinct points.

    Parameters
    ----------
    radius : float
        The target's radius, m (anything that reads as a finite number).
    std : float, optional
        Its standard uncertainty, m, from 0 to under ``radius``.
    route : sequence of (float, float)
        The target's polyline in plan, ``(x, y)`` in m (survey CRS); empty for the default
        radius of every fit off other routes.
    where : str
        The option or file named in an error message.

    Returns
    -------
    TargetRadius
        Radius and std (m) as floats, the route as a tuple of ``(x, y)`` tuples.
    """
    r = _number(radius, where)
    if not 0 < r < 10:
        raise SettingsError(f"a radius must be between 0 and 10 m, got {radius!r}", where=where)
    s = RADIUS_STD_SHARE * r if std is None else _number(std, where)
    if not 0 <= s < r:
        raise SettingsError(f"the radius's uncertainty must be from 0 to under the radius, got "
                            f"{std!r}", where=where)
    points = tuple((_number(p[0], where), _number(p[1], where)) for p in route)
    if points and (len(points) < 2 or len(set(points)) < 2):
        raise SettingsError("a route needs two or more distinct points", where=where)
    return TargetRadius(r, s, points)


def parse_target_radius(text: str, *, where: str = "--target-radius") -> TargetRadius:
    """``R`` (every fit), ``R+-S`` (with its uncertainty) or either followed by
    ``@X1,Y1,X2,Y2[,...]`` (a route), metres."""
    match = re.fullmatch(r"\s*([^@+]+?)\s*(?:\+-\s*([^@]+?))?\s*(?:@(.*))?", str(text))
    if match is None:
        raise SettingsError(f"expected R, R+-S or R@X1,Y1,X2,Y2..., got {text!r}", where=where)
    radius, std, route = match.groups()
    points = ()
    if route is not None:
        values = route.split(",")
        if len(values) % 2:
            raise SettingsError(f"a route is pairs X,Y; got {len(values)} numbers", where=where)
        points = tuple(zip(values[::2], values[1::2], strict=True))
    return target_radius(radius, std=std, route=points, where=where)


def _distance_to_route(x: float, y: float, route) -> float:
    """Plan distance (m) from ``(x, y)`` to a polyline (segments' nearest points)."""
    p = np.asarray(route, dtype=float)
    a, b = p[:-1], p[1:]
    ab = b - a
    length2 = np.maximum((ab * ab).sum(axis=1), 1e-18)
    u = np.clip(((np.array([x, y]) - a) * ab).sum(axis=1) / length2, 0.0, 1.0)
    nearest = a + u[:, None] * ab
    return float(np.min(np.hypot(nearest[:, 0] - x, nearest[:, 1] - y)))


def radius_for(fits, targets) -> list[TargetRadius | None]:
    """The given radius that applies to each fit (None: none, fitted as found).

    Parameters
    ----------
    fits : sequence
        Records with ``x`` and ``y`` (m, the apex in plan; NaN without positions).
    targets : sequence of TargetRadius
        At most one without a route (the default).

    Returns
    -------
    list of TargetRadius or None
        Per fit: the nearest route's within :data:`ROUTE_TOLERANCE`, else the default.
    """
    targets = list(targets)
    defaults = [t for t in targets if not t.route]
    if len(defaults) > 1:
        raise SettingsError("give one radius without a route at most (the default)",
                            where="--target-radius")
    default = defaults[0] if defaults else None
    routed = [t for t in targets if t.route]
    out = []
    for f in fits:
        x, y = float(getattr(f, "x", math.nan)), float(getattr(f, "y", math.nan))
        best, best_d = default, ROUTE_TOLERANCE
        if math.isfinite(x) and math.isfinite(y):
            for t in routed:
                d = _distance_to_route(x, y, t.route)
                if d <= best_d:
                    best, best_d = t, d
        out.append(best)
    return out
