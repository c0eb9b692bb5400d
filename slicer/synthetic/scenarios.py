"""Ready-made synthetic surveys on uneven ground, for tests of topographic correction.

Sloping scenario (:func:`slope_survey`) - invented for this project, it describes no real site:
a 12 m x 8 m grid (EPSG:32633, south-west corner at 513000 E, 4651000 N) on a hillside that
rises 10 % towards the north-east (0.08 m/m east, 0.06 m/m north; 3-4-5, so the steepest
grade is exactly 0.10), from 120.00 m above the site datum at the south-west corner to 121.44 m
at the north-east one.  Under it lie, at absolute elevations (m above the datum):

* a level gravel floor at 119.45 m across the whole grid, 0.55 m down at the south-west corner
  and 1.99 m at the north-east one;
* a level drain at 119.75 m running south-north 6 m east of the west edge (0.73 m down at its
  south end, 1.21 m at its north end);
* a stone at 119.95 m (its top) under (513008.55, 4651002.05), 0.857 m down.

Every reflector lies below the lowest corner of the ground, so no antenna stands below any.

Lines run west to east every 0.5 m with traces every 0.05 m, walked in zigzag (17 lines of 241
traces); the radar is the demo's (400 MHz, 512 samples at 0.1 ns, time zero at 3.0 ns) and the
ground velocity 0.1 m/ns, so the floor arrives at most 39.8 ns after time zero.  Depths are
given down from the level plane at 122.0 m (``Ground.reference_elevation``).
"""

from __future__ import annotations

from slicer.synthetic.forward import Layer, LineTarget, PointTarget
from slicer.synthetic.surveys import PlannedLine, Radar, grid_lines
from slicer.synthetic.terrain import Ground, Slope

__all__ = ["SLOPE_ELEVATIONS", "slope_survey"]

#: Absolute elevations (m above the datum) in :func:`slope_survey`: the floor, the drain, the
#: top of the stone, and the plane depths are measured down from.
SLOPE_ELEVATIONS = {"floor": 119.45, "drain": 119.75, "stone": 119.95, "reference": 122.0}


def slope_survey() -> tuple[Ground, Radar, list[PlannedLine], str]:
    """The invented sloping scenario described in this module's docstring.

    Returns
    -------
    ground : Ground
        Velocity 0.1 m/ns, 3 dB/m, a :class:`~slicer.synthetic.terrain.Slope` surface and
        ``reference_elevation`` 122.0 m; targets: the drain, the stone; layers: the floor.
    radar : Radar
    lines : list of PlannedLine
        17 west-east lines, 0.5 m apart, 241 traces 0.05 m apart, zigzag.
    crs : str
        ``"EPSG:32633"`` (UTM zone 33N).
    """
    e, n = 513000.0, 4651000.0
    ref = SLOPE_ELEVATIONS["reference"]

    def depth(name):  # down from the reference plane, in micrometres (no 1.8499999999999943)
        return round(ref - SLOPE_ELEVATIONS[name], 6)

    surface = Slope(x0=e, y0=n, z0=120.0, gradient_x=0.08, gradient_y=0.06)
    targets = (
        LineTarget(e + 6.0, n, e + 6.0, n + 8.0, depth("drain"), amplitude=0.8),
        PointTarget(e + 8.55, n + 2.05, depth("stone"), amplitude=0.6),
    )
    ground = Ground(velocity=0.1, attenuation_db_per_m=3.0, targets=targets,
                    layers=(Layer(depth("floor"), 0.5),), surface=surface,
                    reference_elevation=ref)
    radar = Radar(frequency_mhz=400.0, wavelet="ricker", sample_interval_ns=0.1, samples=512,
                  time_zero_ns=3.0, seed=20261202)
    lines = grid_lines(west=e, south=n, length=12.0, width=8.0, line_spacing=0.5,
                       trace_spacing=0.05, direction="x", zigzag=True)
    return ground, radar, lines, "EPSG:32633"
