"""Names, units and physical constants shared by every module (see DEVELOPERS.md, Glossary)."""

from __future__ import annotations

#: Speed of light in vacuum, metres per nanosecond (CODATA: 299 792 458 m/s).
C_M_PER_NS = 0.299792458

#: Dimension of traces along one line (or in a concatenated trace table).
TRACE = "trace"
#: Dimension of two-way travel time, nanoseconds, 0 at time zero once corrected.
TWT = "twt"
#: Dimension of depth below the surface, metres, positive down.
DEPTH = "depth"
#: Dimension of elevation above a vertical datum, metres, positive up (elevation slices).
ELEVATION = "elevation"
#: Plan dims / per-trace coordinates: easting (x) and northing (y) in the survey CRS, metres.
X = "x"
Y = "y"
#: Per-trace distance along its line from the line's start, metres.
DISTANCE = "distance"
#: Dimension of slices in a trace x slice table.
SLICE = "slice"

#: Units written into ``attrs["units"]``.
UNITS = {TWT: "ns", DEPTH: "m", ELEVATION: "m", X: "m", Y: "m", DISTANCE: "m"}
