"""Synthetic GPR grid surveys with known ground truth: ground, radar, line plans, the forward
model (:mod:`slicer.synthetic.forward`, source wavelets in :mod:`slicer.synthetic.wavelets`) and
a survey writer (:mod:`slicer.synthetic.surveys`, which also holds the invented demo scenario).
Uneven ground: surface models and the :class:`Ground` that holds them
(:mod:`slicer.synthetic.terrain`), the tracks and DEM written for it
(:mod:`slicer.synthetic.terrain_files`) and a ready sloping survey
(:mod:`slicer.synthetic.scenarios`).
"""

from slicer.synthetic.scenarios import SLOPE_ELEVATIONS, slope_survey
from slicer.synthetic.surveys import (
    Ground,
    Layer,
    LineTarget,
    PlannedLine,
    PlateTarget,
    PointTarget,
    Radar,
    SyntheticSurvey,
    demo_survey,
    grid_lines,
    simulate_line,
    write_survey,
)
from slicer.synthetic.terrain import Mound, Slope, Surface
from slicer.synthetic.terrain_files import SurfaceFiles, SurfaceOptions

__all__ = ["SLOPE_ELEVATIONS", "Ground", "Layer", "LineTarget", "Mound", "PlannedLine",
           "PlateTarget", "PointTarget", "Radar", "Slope", "Surface", "SurfaceFiles",
           "SurfaceOptions", "SyntheticSurvey", "demo_survey", "grid_lines", "simulate_line",
           "slope_survey", "write_survey"]
