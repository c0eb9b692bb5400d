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

import pyproj

from ._errors import LineTableError, SettingsError
from ._grid import check_cell
from ._linetable import LineEntry, check_unique, make_entry, read_line_table
from ._toml import read_toml
from ._velocity import check_velocity, velocity_from_permittivity
from ._velocity_file import read_velocity_model
from ._velocity_model import ConstantVelocity
from ._windows import Windows, make_windows, parse_range

#: Build options that a TOML survey file may set, with their meaning (for the docs).
OPTION_KEYS = {
    "crs": "survey CRS of the line coordinates (EPSG code, WKT or PROJ string)",
    "positions": "where trace positions come from: 'table' (even from start to end) or "
                 "'headers' (the files' trace-header coordinates, in the survey CRS)",
    "sample_interval": "sample interval in ns, when the files cannot hold it",
    "time_zero": "time zero in ns on the raw record, or 'auto' (direct-wave pick)",
    "time_zero_threshold": "fraction of the peak the direct wave must reach for 'auto'",
    "dewow": "running-mean window in ns, 'auto' (1.5 dominant periods) or 'off'",
    "background": "background removal: 'mean', 'median' or 'off'",
    "gain": "gain: 'power:P' (t^P), 'exp:DB_PER_NS' or 'none'",
    "velocity": "radar velocity in m/ns",
    "permittivity": "relative permittivity (instead of velocity)",
    "velocity_std": "one-sigma uncertainty of the velocity (m/ns), for the depth error",
    "velocity_model": "velocity-model TOML file (constant, layered or lateral; see README)",
    "migrate": "2-D migration before the envelope: 'stolt', 'phase-shift' or 'off'",
    "ties": "ties at line crossings: 'off', 'report' (measure and report the misfit) or "
            "'apply' (also correct each line's time zero and gain)",
    "level": "remove line-to-line stripes from the slice values before gridding (true/false)",
    "cell": "grid cell in m (default: a round number near a quarter of the line spacing)",
    "radius": "search radius in m; cells farther from any trace stay nodata",
    "depths": "depth slices TOP:BOTTOM:STEP in m",
    "thickness": "slice thickness (m or ns), default the step",
    "times": "time slices TOP:BOTTOM:STEP in ns below time zero",
    "scheduler": "where to run: auto, threads, processes, local:N or tcp://HOST:PORT",
    "memory_limit": "memory budget of the build's working data, e.g. 1GB",
    "title": "title of the overview sheet",
    "out": "output folder",
    "overwrite": "replace the outputs of an earlier build in the output folder",
}


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
    sample_interval: float | None = None
    time_zero: float | str = "auto"
    time_zero_threshold: float = 0.5
    dewow: float | str = "auto"
    background: str = "median"
    gain: str = "power:1"
    velocity: float | None = None
    permittivity: float | None = None
    velocity_std: float | None = None
    velocity_model: Path | None = None
    migrate: str = "off"
    ties: str = "off"
    level: bool = False
    cell: float | None = None
    radius: float | None = None
    depths: str | None = None
    thickness: float | None = None
    times: str | None = None
    scheduler: str = "auto"
    memory_limit: str | float | None = None
    title: str | None = None
    out: Path | None = None
    overwrite: bool = False
    extras: dict = field(default_factory=dict, compare=False)

    def __post_init__(self):
        if not self.lines:
            raise LineTableError("the survey has no lines", where=str(self.source))
        given = [n for n in ("velocity", "permittivity", "velocity_model")
                 if getattr(self, n) is not None]
        if len(given) > 1:
            raise SettingsError(f"give one of --velocity, --permittivity or --velocity-model, "
                                f"not {' and '.join(given)}",
                                where="--" + given[0].replace("_", "-"))
        if self.velocity_std is not None:
            try:
                ok = float(self.velocity_std) >= 0 and math.isfinite(float(self.velocity_std))
            except (TypeError, ValueError):
                ok = False
            if not ok:
                raise SettingsError(f"must be a number >= 0, got {self.velocity_std!r}",
                                    where="--velocity-std")
        if self.velocity is not None:
            check_velocity(self.velocity)
        if self.permittivity is not None:
            velocity_from_permittivity(self.permittivity)
        if self.positions not in ("table", "headers"):
            raise SettingsError(f"expected 'table' or 'headers', got {self.positions!r}",
                                where="--positions")
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
        if self.migrate not in ("off", "stolt", "phase-shift"):
            raise SettingsError(f"expected 'stolt', 'phase-shift' or 'off', got "
                                f"{self.migrate!r}", where="--migrate")
        if self.ties not in ("off", "report", "apply"):
            raise SettingsError(f"expected 'off', 'report' or 'apply', got {self.ties!r}",
                                where="--ties")
        if self.background not in ("mean", "median", "off"):
            raise SettingsError(f"expected 'mean', 'median' or 'off', got {self.background!r}",
                                where="--background")
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
        if self.migrate != "off" and self.resolved_model is None:
            raise SettingsError("migration needs a velocity (--velocity, --permittivity or "
                                "--velocity-model)", where="--migrate")
        from ._budget import parse_bytes
        from ._engine import parse_scheduler
        parse_scheduler(self.scheduler)
        if self.memory_limit is not None:
            parse_bytes(self.memory_limit, where="--memory-limit")

    @property
    def resolved_velocity(self) -> float | None:
        """One radar velocity (m/ns) when the model is constant, else None."""
        model = self.resolved_model
        if isinstance(model, ConstantVelocity):
            return model.velocity
        return None

    @property
    def resolved_model(self):
        """The velocity model (:mod:`slicer._velocity_model`) of the build, or None."""
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
        out["velocity_used"] = self.resolved_velocity
        model = self.resolved_model
        out["velocity_model_used"] = model.describe() if model is not None else None
        return out


def check_crs(crs) -> pyproj.CRS:
    """The CRS for ``crs`` (EPSG code, WKT or PROJ string) if it is known and projected."""
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


def _positive(value, where: str, unit: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise SettingsError(f"expected a number of {unit}, got {value!r}", where=where) from None
    if not math.isfinite(v) or v <= 0:
        raise SettingsError(f"must be positive, got {v:g} {unit}", where=where)
    return v


def _read_toml(path: Path, overrides: dict) -> tuple[list[LineEntry], dict]:
    data = read_toml(path, what="survey file")
    lines = data.pop("lines", None)
    inline = data.pop("line", None)
    unknown = sorted(set(data) - set(OPTION_KEYS))
    if unknown:
        raise SettingsError(f"unknown key(s) {', '.join(unknown)}; known keys: lines, line, "
                            f"{', '.join(OPTION_KEYS)}", where=str(path))
    positions = overrides.get("positions") or data.get("positions", "table")
    ends = positions != "headers"
    if (lines is None) == (inline is None):
        raise LineTableError("give either lines = \"TABLE.csv\" or [[line]] tables",
                             where=str(path))
    if lines is not None:
        if not isinstance(lines, str):
            raise LineTableError("lines must be the path of a line table", where=str(path))
        entries = read_line_table(path.parent / lines, ends=ends)
    else:
        if not isinstance(inline, list) or not inline:
            raise LineTableError("[[line]] tables are empty", where=str(path))
        entries = [make_entry(row, base=path.parent, where=f"{path}:line[{i}]", ends=ends)
                   for i, row in enumerate(inline)]
        check_unique(entries)
    for key in ("out", "velocity_model"):
        if key in data:
            data[key] = path.parent / data[key]
    return entries, data


def load_settings(path: str | os.PathLike, **overrides) -> BuildSettings:
    """Settings from a line table (``.csv``) or survey file (``.toml``), overridden by flags.

    Parameters
    ----------
    path : path-like
        A line table or a TOML survey file.
    **overrides
        Options of :data:`OPTION_KEYS`; ``None`` means "not given" and keeps the file's value.
    """
    unknown = sorted(set(overrides) - set(OPTION_KEYS))
    if unknown:
        raise SettingsError(f"unknown option(s) {', '.join(unknown)}")
    path = Path(path)
    if path.suffix.lower() == ".toml":
        entries, options = _read_toml(path, overrides)
    else:
        ends = (overrides.get("positions") or "table") != "headers"
        entries, options = read_line_table(path, ends=ends), {}
    for key, value in overrides.items():
        if value is not None:
            options[key] = value
    for key in ("out", "velocity_model"):
        if options.get(key) is not None:
            options[key] = Path(options[key])
    return BuildSettings(lines=tuple(entries), source=path, **options)
