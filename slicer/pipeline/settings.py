"""The one settings object of a build, read from a line table or TOML survey file plus flags.

A TOML survey file holds the lines and any build option; command-line flags override it. Keys
are the long option names with ``_`` for ``-`` (see :data:`OPTION_KEYS`)::

    lines = "lines.csv"            # a line table beside this file, or inline:
    # [[line]]
    # file = "L000.sgy"
    # start_x = 512000.0 ...
    crs = "EPSG:32633"
    sample_interval = 0.1          # ns
    time_zero = 3.0                # ns, or "auto"
    velocity = 0.1                 # m/ns (or permittivity = 9)
    cell = 0.1                     # m
    depths = "0:2.4:0.1"           # m, TOP:BOTTOM:STEP
"""

from __future__ import annotations

import dataclasses
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.errors import LineTableError, SettingsError
from slicer.core.physics import check_velocity, velocity_from_permittivity
from slicer.gridding.cells import check_cell
from slicer.gridding.windows import Windows, make_windows, parse_range
from slicer.io.linetable import (
    POSITION_SOURCES,
    LineEntry,
    check_unique,
    read_line_table,
)
from slicer.pipeline.elevation_slices import (
    ELEVATION_OPTIONS,
    check_elevation_settings,
    elevation_windows,
    wants_elevation,
)
from slicer.pipeline.options import OPTIONS, check_option
from slicer.pipeline.survey_file import LineGroup, read_survey_file, to_crs
from slicer.velocity.model_file import read_velocity_model
from slicer.velocity.models import ConstantVelocity

if TYPE_CHECKING:
    import pyproj

#: Build options that a TOML survey file may set, with their meaning (for the docs); their
#: types and limits are in :data:`slicer.pipeline.options.OPTIONS`.
OPTION_KEYS = {name: option.help for name, option in OPTIONS.items()}


@dataclass(frozen=True)
class BuildSettings:
    """Everything a build needs; validated on construction.

    Attributes are the options of :data:`OPTION_KEYS` plus ``lines`` (the survey's lines) and
    ``source`` (the line table or survey file they came from).
    """

    lines: tuple[LineEntry, ...]
    source: Path
    crs: str | None = None
    positions: str = "table"
    track_crs: str | None = None
    antenna_along: float | None = None
    antenna_across: float | None = None
    trace_spacing: float | None = None
    control_points: Path | None = None
    control_fit: str = "similarity"
    control_tolerance: float = 0.05
    sample_interval: float | None = None
    time_zero: float | str = "auto"
    antenna_separation: float | None = None
    antenna_height: float | None = None
    target_radius: tuple[str, ...] | None = None
    time_zero_threshold: float = 0.5
    dewow: float | str = "auto"
    background: str = "scaled"
    gain: str = "power:1"
    velocity: float | None = None
    permittivity: float | None = None
    velocity_std: float | None = None
    velocity_model: Path | None = None
    migrate: str = "auto"
    attribute: str = "envelope"
    zigzag_shift: float | str = "off"
    ties: str = "off"
    level: bool = False
    cell: float | None = None
    radius: float | None = None
    max_gap: float | None = None
    depths: str | None = None
    thickness: float | None = None
    times: str | None = None
    slices: str | None = None
    elevations: str | None = None
    terrain: str | None = None
    gnss_height: float | None = None
    datum: str | None = None
    scheduler: str = "auto"
    memory_limit: str | float | None = None
    formats: str = "tif"
    radargrams: bool = True
    title: str | None = None
    colormap: str | None = None
    stretch: str | None = None
    clip: str | None = None
    out: Path | None = None
    overwrite: bool = False
    extras: dict = field(default_factory=dict, compare=False)

    def __post_init__(self):
        if not self.lines:
            raise LineTableError("the survey has no lines", where=str(self.source))
        for name in OPTIONS:  # types and limits of every option, in one place
            object.__setattr__(self, name, check_option(name, getattr(self, name)))
        given = [n for n in ("velocity", "permittivity", "velocity_model")
                 if getattr(self, n) is not None]
        if len(given) > 1:
            raise SettingsError(f"give one of --velocity, --permittivity or --velocity-model, "
                                f"not {' and '.join(given)}",
                                where="--" + given[0].replace("_", "-"))
        if self.velocity is not None:
            check_velocity(self.velocity)
        if self.permittivity is not None:
            velocity_from_permittivity(self.permittivity)
        if self.positions not in POSITION_SOURCES:
            raise SettingsError(f"expected one of {', '.join(POSITION_SOURCES)}, got "
                                f"{self.positions!r}", where="--positions")
        self._check_geometry()
        if self.crs is not None:
            check_crs(self.crs)
        if self.cell is not None:
            check_cell(self.cell)
        if self.radius is not None:
            _positive(self.radius, "--radius", "m")
        if self.sample_interval is not None:
            _positive(self.sample_interval, "--sample-interval", "ns")
        if isinstance(self.time_zero, str) and self.time_zero != "auto":
            raise SettingsError(f"expected a number of ns or 'auto', got {self.time_zero!r}",
                                where="--time-zero")
        if isinstance(self.dewow, str) and self.dewow not in ("auto", "off"):
            raise SettingsError(f"expected a window in ns, 'auto' or 'off', got {self.dewow!r}",
                                where="--dewow")
        if not isinstance(self.dewow, str):
            _positive(self.dewow, "--dewow", "ns")
        if self.migrate not in ("auto", "off", "stolt", "phase-shift"):
            raise SettingsError(f"expected 'auto', 'stolt', 'phase-shift' or 'off', got "
                                f"{self.migrate!r}", where="--migrate")
        if self.ties not in ("off", "report", "apply"):
            raise SettingsError(f"expected 'off', 'report' or 'apply', got {self.ties!r}",
                                where="--ties")
        self.gain_curve  # noqa: B018 - validates
        if self.depths is not None and self.times is not None:
            raise SettingsError("give depth slices or time slices, not both", where="--times")
        if self.velocity_model is not None:
            object.__setattr__(self, "extras", {**self.extras,
                                                "model": read_velocity_model(
                                                    self.velocity_model)})
        if self.depths is not None and self.resolved_model is None:
            raise SettingsError("depth slices need a velocity: give --velocity or "
                                "--permittivity (or cut time slices with --times)",
                                where="--depths")
        self.requested_windows  # noqa: B018 - validates
        model = self.resolved_model
        if self.velocity_std is not None and model is None:
            raise SettingsError("has no effect without a velocity (--velocity, --permittivity "
                                "or --velocity-model)", where="--velocity-std")
        if self.thickness is not None and all(getattr(self, n) is None
                                              for n in ("depths", "times", "elevations")):
            raise SettingsError("has no effect without --depths, --times or --elevations (the "
                                "default slices have their own thickness)", where="--thickness")
        check_elevation_settings(self)
        self.display  # noqa: B018 - validates
        if self.velocity_std is not None and model is not None:
            slowest = float(min(np.atleast_1d(model.velocity)))
            if self.velocity_std >= slowest:
                raise SettingsError(f"the uncertainty {self.velocity_std:g} m/ns is not below "
                                    f"the velocity ({slowest:g} m/ns); give a one-sigma "
                                    "uncertainty in m/ns", where="--velocity-std")
        if self.migrate not in ("off", "auto") and self.resolved_model is None:
            raise SettingsError("migration needs a velocity (--velocity, --permittivity or "
                                "--velocity-model)", where="--migrate")
        from slicer.pipeline.budget import parse_bytes
        from slicer.pipeline.engine import parse_scheduler
        parse_scheduler(self.scheduler)
        if self.memory_limit is not None:
            parse_bytes(self.memory_limit, where="--memory-limit")

    def _check_geometry(self) -> None:
        import pyproj
        for name in ("antenna_along", "antenna_across"):
            value = getattr(self, name)
            if value is not None and not _finite(value):
                raise SettingsError(f"expected a finite length in m, got {value!r}",
                                    where="--" + name.replace("_", "-"))
        if self.trace_spacing is not None:
            _positive(self.trace_spacing, "--trace-spacing", "m")
        _positive(self.control_tolerance, "--control-tolerance", "m")
        if self.control_fit not in ("similarity", "affine"):
            raise SettingsError(f"expected 'similarity' or 'affine', got {self.control_fit!r}",
                                where="--control-fit")
        if self.track_crs is not None:
            try:
                pyproj.CRS.from_user_input(self.track_crs)
            except pyproj.exceptions.CRSError:
                raise SettingsError(f"unknown CRS {self.track_crs!r}",
                                    where="--track-crs") from None
        tracked = [e for e in self.lines if (e.positions or self.positions) == "track"]
        if not tracked:  # options that only GNSS-tracked lines use would be silently ignored
            for name in ("antenna_along", "antenna_across", "track_crs"):
                if getattr(self, name) is not None:
                    raise SettingsError("has no effect: no line takes its positions from a GNSS "
                                        "track (--positions track or a track column)",
                                        where="--" + name.replace("_", "-"))
        if tracked and self.crs is None:
            raise SettingsError("positions from a GNSS track need the survey CRS to project "
                                "into", where="--crs")
        for e in tracked:
            if e.track is None:
                raise SettingsError(f"positions = track, but the line at {e.where} has no "
                                    "track file (column track)", where="--positions")

    @property
    def display(self):
        """How the overview is drawn (:class:`slicer.outputs.display.Display`)."""
        from slicer.outputs.display import parse_display
        return parse_display(colormap=self.colormap, stretch=self.stretch, clip=self.clip)

    @property
    def slices_axis(self) -> str:
        """``elevation`` for elevation slices, ``twt`` for --times, else ``depth``."""
        if wants_elevation(self):
            return "elevation"
        return "twt" if self.times is not None else "depth"

    @property
    def resolved_velocity(self) -> float | None:
        """One radar velocity (m/ns) when the model is constant, else None."""
        model = self.resolved_model
        if isinstance(model, ConstantVelocity):
            return model.velocity
        return None

    @property
    def resolved_model(self):
        """The velocity model (:mod:`slicer.velocity.models`) of the build, or None."""
        std = float(self.velocity_std) if self.velocity_std is not None else 0.0
        if self.velocity is not None:
            return ConstantVelocity(check_velocity(self.velocity), std)
        if self.permittivity is not None:
            v = velocity_from_permittivity(self.permittivity)
            return ConstantVelocity(v, std)
        return self.extras.get("model")

    @property
    def gain_curve(self) -> tuple[str, float] | None:
        """``(kind, value)`` of the gain, or None for no gain."""
        text = str(self.gain).strip().lower()
        if text in ("none", "off"):
            return None
        kind, _, value = text.partition(":")
        if kind not in ("power", "exp"):
            raise SettingsError(f"expected 'power:P', 'exp:DB_PER_NS' or 'none', got "
                                f"{self.gain!r}", where="--gain")
        try:
            number = float(value) if value else 1.0
        except ValueError:
            raise SettingsError(f"gain value must be a number, got {value!r}",
                                where="--gain") from None
        if not math.isfinite(number) or number < 0:
            raise SettingsError(f"gain value must be finite and >= 0, got {value}",
                                where="--gain")
        return kind, number

    @property
    def requested_windows(self) -> Windows | None:
        """The slice windows asked for, or None to choose them from the record."""
        if wants_elevation(self):
            return elevation_windows(self)
        if self.depths is not None:
            top, bottom, step = parse_range(self.depths, option="--depths")
            return make_windows(top, bottom, step, thickness=self.thickness, axis="depth",
                                option="--depths")
        if self.times is not None:
            top, bottom, step = parse_range(self.times, option="--times")
            return make_windows(top, bottom, step, thickness=self.thickness, axis="twt",
                                option="--times")
        return None

    def replace(self, **changes) -> BuildSettings:
        """A copy with some settings changed (validated again)."""
        return dataclasses.replace(self, **changes)

    def to_record(self) -> dict:
        """The settings as plain JSON-able values."""
        out = {}
        for f in dataclasses.fields(self):
            if f.name in ("lines", "extras"):
                continue
            value = getattr(self, f.name)
            out[f.name] = str(value) if isinstance(value, Path) else value
        out["control_fits"] = self.extras.get("control_fits", [])
        out["velocity_used"] = self.resolved_velocity
        model = self.resolved_model
        out["velocity_model_used"] = model.describe() if model is not None else None
        return out


def check_crs(crs) -> pyproj.CRS:
    """The CRS for ``crs`` (EPSG code, WKT or PROJ string) if it is known and projected."""
    import pyproj
    try:
        parsed = pyproj.CRS.from_user_input(crs)
    except pyproj.exceptions.CRSError:
        raise SettingsError(f"unknown CRS {crs!r} (try an EPSG code such as EPSG:32633)",
                            where="--crs") from None
    if not parsed.is_projected:
        raise SettingsError(f"CRS {crs!r} is not projected; line coordinates and cells are in "
                            "metres, so give a projected CRS (for example a UTM zone)",
                            where="--crs")
    unit = parsed.axis_info[0].unit_name if parsed.axis_info else "metre"
    if unit not in ("metre", "meter"):
        raise SettingsError(f"CRS {crs!r} is in {unit}, not metres", where="--crs")
    return parsed


def _finite(value) -> bool:
    try:
        return math.isfinite(float(value))
    except (TypeError, ValueError):
        return False


def _positive(value, where: str, unit: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise SettingsError(f"expected a number of {unit}, got {value!r}", where=where) from None
    if not math.isfinite(v) or v <= 0:
        raise SettingsError(f"must be positive, got {v:g} {unit}", where=where)
    return v


#: Options of which a build takes one: a flag for one of them overrides the survey file's.
EXCLUSIVE = (("velocity", "permittivity", "velocity_model"),
             ("depths", "times", "elevations", "slices"))

def load_settings(path: str | os.PathLike, **overrides) -> BuildSettings:
    """Settings from a line table (``.csv``) or survey file (``.toml``), overridden by flags.

    Parameters
    ----------
    path : path-like
        A line table or a TOML survey file.
    **overrides
        Options of :data:`OPTION_KEYS`; ``None`` means "not given" and keeps the file's value.

    Returns
    -------
    BuildSettings
        The checked settings: every line (lines in local-grid coordinates mapped into the CRS
        by their control points) and every option, the flags' values over the file's.
    """
    unknown = sorted(set(overrides) - set(OPTION_KEYS))
    if unknown:
        raise SettingsError(f"unknown option(s) {', '.join(unknown)}")
    path = Path(path)
    if path.suffix.lower() == ".toml":
        groups, options = read_survey_file(path, overrides)
    else:
        ends = (overrides.get("positions") or "table") == "table"
        groups, options = [LineGroup(read_line_table(path, ends=ends))], {}
    for group in EXCLUSIVE:  # a flag of a group replaces the file's choice within it
        if any(overrides.get(k) is not None for k in group):
            for k in group:
                options.pop(k, None)
    if overrides.get("depths") or overrides.get("times") or overrides.get("slices") == "depth":
        for k in ELEVATION_OPTIONS:  # the file's elevation slices give way with their ground
            options.pop(k, None)
    for key, value in overrides.items():
        if value is not None:
            options[key] = check_option(key, value)
    for key in ("out", "velocity_model", "control_points"):
        if options.get(key) is not None:
            options[key] = Path(options[key])
    entries, fits = to_crs(groups, options)
    check_unique(entries)
    tables = [t for g in groups for t in g.tables]
    return BuildSettings(lines=tuple(entries), source=path,
                         extras={"control_fits": fits, "tables": tables}, **options)
