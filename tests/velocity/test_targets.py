"""Tests of slicer.velocity.targets: radii known for the targets and which fit each applies to.

Sources: the distance from a point to a segment is that to its nearest point, the projection
clamped to the segment (Euclidean geometry); the worked distances are by hand.
"""

import math
from types import SimpleNamespace

import pytest

from slicer.core.errors import SettingsError
from slicer.velocity.targets import (
    RADIUS_STD_SHARE,
    ROUTE_TOLERANCE,
    TargetRadius,
    parse_target_radius,
    radius_for,
    target_radius,
)


@pytest.mark.parametrize("text, radius, std, route", [
    ("0.05", 0.05, 0.05 * RADIUS_STD_SHARE, ()),
    ("0.05+-0.002", 0.05, 0.002, ()),
    ("0.1@0.75,-1,0.75,3", 0.1, 0.1 * RADIUS_STD_SHARE, ((0.75, -1.0), (0.75, 3.0))),
    (" 0.1 +- 0 @0,0,1,1,2,0", 0.1, 0.0, ((0.0, 0.0), (1.0, 1.0), (2.0, 0.0))),
])
def test_parse_reads_radius_uncertainty_and_route(text, radius, std, route):
    t = parse_target_radius(text)
    assert t.radius == pytest.approx(radius) and t.std == pytest.approx(std)
    assert t.route == route
    assert t.to_json() == {"radius": t.radius, "radius_std": t.std,
                           "route": [list(p) for p in route]}


@pytest.mark.parametrize("text", ["", "x", "0", "-0.1", "12", "0.05+-0.05", "0.05+-x",
                                  "0.05@1,2,3", "0.05@1,1,1,1", "0.05@1,1", "nan"])
def test_parse_refuses_bad_text(text):
    with pytest.raises(SettingsError, match="target-radius"):
        parse_target_radius(text)


def _fit(x, y):
    return SimpleNamespace(x=x, y=y)


def test_each_fit_takes_the_nearest_route_within_tolerance_else_the_default():
    default = target_radius(0.03)
    along_y = target_radius(0.05, route=((1.0, 0.0), (1.0, 4.0)))
    bent = target_radius(0.1, route=((3.0, 0.0), (3.0, 2.0), (5.0, 2.0)))
    fits = [_fit(1.2, 2.0),     # 0.2 m from along_y (perpendicular foot inside the segment)
            _fit(1.0, 4.3),     # 0.3 m beyond along_y's end (the end point is nearest)
            _fit(2.1, 1.0),     # 1.1 from along_y, 0.9 from bent: neither, the default
            _fit(4.0, 2.4),     # 0.4 m from bent's second leg
            _fit(2.7, 2.0),     # 0.3 from bent, 1.7 from along_y
            _fit(math.nan, 1.0)]  # no position: the default
    assert radius_for(fits, [default, along_y, bent]) == [along_y, along_y, default, bent,
                                                          bent, default]
    # without a default, fits off every route take none
    assert radius_for(fits, [along_y, bent])[2] is None
    # nearer route wins: 0.45 m from along_y, 0.2 m from a second route at x = 1.65
    other = target_radius(0.075, route=((1.65, 0.0), (1.65, 4.0)))
    assert radius_for([_fit(1.45, 1.0)], [along_y, other]) == [other]
    assert ROUTE_TOLERANCE == 0.5  # the documented figure the worked distances are set about


def test_one_default_at_most():
    with pytest.raises(SettingsError, match="one radius without a route"):
        radius_for([_fit(0, 0)], [target_radius(0.05), target_radius(0.07)])


def test_target_radius_is_a_named_tuple_of_metres():
    t = target_radius(0.05, std=0.001, route=[(0, 0), (1, 0)])
    assert isinstance(t, TargetRadius) and t == (0.05, 0.001, ((0.0, 0.0), (1.0, 0.0)))
