"""slicer: ground-penetrating-radar grid surveys to georeferenced plan-view depth slices.

The flow, each arrow a function from xarray objects to xarray objects, and the subpackage that
holds it::

    read_line (io) -> place_line / load_line (geometry)
    -> correct_time_zero -> dewow -> remove_background -> apply_gain -> envelope (processing)
    -> to_depth_axis (velocity) -> reduce_to_windows -> grid_slices (gridding)
    -> write_slice_geotiffs / write_cube_netcdf (outputs)

:func:`build` (pipeline) runs all of it from a :class:`BuildSettings` (see :func:`load_settings`).

Every public name is importable from here; the subpackages load on first use, so that
``import slicer`` and the command line start without NumPy's heavier friends (dask, zarr, h5py,
matplotlib, scipy.signal).
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

#: The distribution this package comes from (the import name is shared with an unrelated one;
#: see depth_slicer.py).
_DISTRIBUTION = "depth-slicer"

#: Where each public name lives, by module.
_PUBLIC: dict[str, tuple[str, ...]] = {
    "slicer.core.atomic": ("atomic_path", "prepare_output_dir"),
    "slicer.core.conventions": ("C_M_PER_NS",),
    "slicer.core.errors": ("InputFileError", "LineTableError", "OutputError", "SettingsError",
        "SlicerError", "SlicerWarning"),
    "slicer.core.physics": ("check_velocity", "depth_from_time", "permittivity_from_velocity",
        "time_from_depth", "to_depth", "velocity_from_permittivity"),
    "slicer.geometry.channels": ("ChannelTable", "expand_channels", "read_channel_table"),
    "slicer.geometry.crossings": ("find_crossings",),
    "slicer.geometry.localgrid": ("ControlPoint", "GridTransform", "fit_affine",
        "fit_control_points", "fit_similarity", "read_control_points"),
    "slicer.geometry.positioning": ("prepare_survey", "read_marks"),
    "slicer.geometry.positions": ("positions_from_headers", "positions_from_track", "read_track",
        "resample_even", "stretch_by_marks"),
    "slicer.geometry.survey": ("iter_lines", "load_line", "place_line", "survey_info"),
    "slicer.gridding.grid": ("Grid", "grid_for", "neighbour_weights"),
    "slicer.gridding.levelling": ("level_lines", "stripe_amplitude"),
    "slicer.gridding.windows": ("Windows", "make_windows", "parse_range", "reduce_to_windows"),
    "slicer.gridding.zigzag": ("estimate_zigzag_shift", "shift_along_lines"),
    "slicer.io.linetable": ("LineEntry", "read_line_table"),
    "slicer.io.reading": ("line_info", "read_line"),
    "slicer.io.segy": ("write_segy_line",),
    "slicer.outputs.zarr_store": ("open_cube_zarr",),
    "slicer.outputs.cube": ("cube_crs", "cube_transform", "new_cube", "read_cube_netcdf",
        "write_cube_netcdf"),
    "slicer.outputs.figures": ("plot_overview", "plot_slice"),
    "slicer.outputs.geotiff": ("slice_file_name", "write_slice_geotiffs"),
    "slicer.outputs.outlines": ("outline", "write_outlines"),
    "slicer.outputs.section": ("section",),
    "slicer.pipeline.build": ("BuildResult", "build"),
    "slicer.pipeline.cube_build": ("build_cube", "grid_slices"),
    "slicer.pipeline.demo": ("run_demo",),
    "slicer.pipeline.engine": ("Engine", "engine", "parse_scheduler"),
    "slicer.pipeline.line_chain": ("process_line",),
    "slicer.pipeline.line_tasks": ("reduce_survey",),
    "slicer.pipeline.settings": ("BuildSettings", "load_settings"),
    "slicer.pipeline.velocity_survey": ("analyse_velocity",),
    "slicer.processing.migration": ("migrate",),
    "slicer.processing.steps": ("apply_gain", "dewow", "envelope", "remove_background"),
    "slicer.processing.time_zero": ("correct_time_zero", "pick_time_zero"),
    "slicer.processing.trace_basics": ("dominant_frequency",),
    "slicer.processing.ties": ("apply_ties", "measure_ties", "solve_ties"),
    "slicer.velocity.diffraction": ("find_diffractions", "survey_velocity"),
    "slicer.velocity.hyperbola": ("fit_hyperbola", "hyperbola_time"),
    "slicer.velocity.model_file": ("read_velocity_model", "write_velocity_model"),
    "slicer.velocity.targets": ("TargetRadius", "target_radius"),
    "slicer.velocity.models": ("ConstantVelocity", "LateralVelocity", "LayeredVelocity",
        "depth_error", "to_depth_axis", "velocity_from_known_depth"),
}

_HOME = {name: module for module, names in _PUBLIC.items() for name in names}

#: The subpackages, one per stage of the flow (bottom to top), loaded on first use too.
_SUBPACKAGES = ("core", "io", "geometry", "processing", "velocity", "gridding", "outputs",
                "synthetic", "pipeline")

__all__ = sorted(_HOME)


def __getattr__(name: str) -> Any:
    """Import a public name's module on first use (PEP 562) and keep the name here."""
    if name in _SUBPACKAGES:
        return importlib.import_module(f"{__name__}.{name}")
    try:
        module = _HOME[name]
    except KeyError:
        raise AttributeError(f"module 'slicer' has no attribute {name!r}") from None
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__) | set(_SUBPACKAGES))

