"""Synthetic GPR grid surveys with known ground truth: ground, radar, line plans, the forward
model (:mod:`slicer.synthetic.forward`, source wavelets in :mod:`slicer.synthetic.wavelets`) and
a survey writer (:mod:`slicer.synthetic.surveys`, which also holds the invented demo scenario).
"""

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

__all__ = ["Ground", "Layer", "LineTarget", "PlannedLine", "PlateTarget", "PointTarget", "Radar",
           "SyntheticSurvey", "demo_survey", "grid_lines", "simulate_line", "write_survey"]
