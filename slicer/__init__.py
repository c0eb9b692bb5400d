"""slicer: ground-penetrating-radar grid surveys to georeferenced plan-view depth slices.

The flow, each arrow a function from xarray objects to xarray objects::

    read_line -> place_line -> correct_time_zero -> dewow -> remove_background -> apply_gain
    -> envelope -> reduce_to_windows -> grid_slices -> write_slice_geotiffs / write_cube_netcdf

:func:`build` runs all of it from a :class:`BuildSettings` (see :func:`load_settings`).
"""

__version__ = "0.1.0"

from ._atomic import atomic_path, prepare_output_dir
from ._build import BuildResult, build, build_cube, grid_slices
from ._channels import ChannelTable, expand_channels, read_channel_table
from ._conventions import C_M_PER_NS
from ._crossings import find_crossings
from ._cube import cube_crs, cube_transform, new_cube, read_cube_netcdf, write_cube_netcdf
from ._demo import run_demo
from ._diffraction import find_diffractions, survey_velocity
from ._engine import Engine, engine, parse_scheduler
from ._errors import (
    InputFileError,
    LineTableError,
    OutputError,
    SettingsError,
    SlicerError,
    SlicerWarning,
)
from ._figures import plot_overview, plot_slice
from ._geometry import prepare_survey, read_marks
from ._geotiff import slice_file_name, write_slice_geotiffs
from ._grid import Grid, grid_for, neighbour_weights
from ._hyperbola import fit_hyperbola, hyperbola_time
from ._levelling import level_lines, stripe_amplitude
from ._linetable import LineEntry, read_line_table
from ._localgrid import (
    ControlPoint,
    GridTransform,
    fit_affine,
    fit_control_points,
    fit_similarity,
    read_control_points,
)
from ._migration import migrate
from ._positions import (
    positions_from_headers,
    positions_from_track,
    read_track,
    resample_even,
    stretch_by_marks,
)
from ._processing import (
    apply_gain,
    correct_time_zero,
    dewow,
    dominant_frequency,
    envelope,
    pick_time_zero,
    remove_background,
)
from ._reading import line_info, read_line
from ._reduce import process_line, reduce_survey
from ._segy import write_segy_line
from ._settings import BuildSettings, load_settings
from ._survey import iter_lines, load_line, place_line, survey_info
from ._ties import apply_ties, measure_ties, solve_ties
from ._velocity import (
    check_velocity,
    depth_from_time,
    permittivity_from_velocity,
    time_from_depth,
    to_depth,
    velocity_from_permittivity,
)
from ._velocity_file import read_velocity_model, write_velocity_model
from ._velocity_model import (
    ConstantVelocity,
    LateralVelocity,
    LayeredVelocity,
    depth_error,
    to_depth_axis,
    velocity_from_known_depth,
)
from ._velocity_search import analyse_velocity
from ._windows import Windows, make_windows, parse_range, reduce_to_windows

__all__ = [
    "ConstantVelocity", "LateralVelocity", "LayeredVelocity", "analyse_velocity",
    "depth_error", "find_diffractions", "fit_hyperbola", "hyperbola_time", "migrate",
    "read_velocity_model", "survey_velocity", "to_depth_axis", "velocity_from_known_depth",
    "write_velocity_model",
    "Engine", "engine", "parse_scheduler",
    "ChannelTable", "ControlPoint", "GridTransform", "apply_ties", "expand_channels",
    "find_crossings", "fit_affine", "fit_control_points", "fit_similarity", "level_lines",
    "load_line", "measure_ties", "positions_from_headers", "positions_from_track",
    "prepare_survey", "read_channel_table", "read_control_points", "read_marks", "read_track",
    "resample_even", "solve_ties", "stretch_by_marks", "stripe_amplitude", "write_segy_line",
    "BuildResult", "BuildSettings", "C_M_PER_NS", "Grid", "InputFileError", "LineEntry",
    "LineTableError", "OutputError", "SettingsError", "SlicerError", "SlicerWarning",
    "Windows", "apply_gain", "atomic_path", "build", "build_cube", "check_velocity",
    "correct_time_zero", "cube_crs", "cube_transform", "depth_from_time", "dewow",
    "dominant_frequency", "envelope", "grid_for", "grid_slices", "iter_lines", "line_info",
    "load_settings", "make_windows", "neighbour_weights", "new_cube", "parse_range",
    "permittivity_from_velocity", "pick_time_zero", "place_line", "plot_overview",
    "plot_slice", "prepare_output_dir", "process_line", "read_cube_netcdf", "read_line",
    "read_line_table", "reduce_survey", "reduce_to_windows", "remove_background", "run_demo",
    "slice_file_name", "survey_info", "time_from_depth", "to_depth",
    "velocity_from_permittivity", "write_cube_netcdf", "write_slice_geotiffs",
]
