"""Synthetic GPR grid surveys: targets, radar, line plans, the forward model and a survey writer.

The project's own forward model (:mod:`slicer.synthetic.forward`) turns a description of the ground
(buried targets and layers) and of the radar into raw traces along planned lines; the survey
writer stores them as SEG-Y or slicer NetCDF line files with a line table and a ``truth.json``
that records what was buried, so a build can be checked against ground truth.  On uneven ground
(a :class:`Ground` with a surface model, :mod:`slicer.synthetic.terrain`) it also writes GNSS
tracks with heights and a DEM (:mod:`slicer.synthetic.terrain_files`).

Demo scenario (:func:`demo_survey`) - invented for this project, it describes no real site:
a 20 m x 14 m grid (EPSG:32633, south-west corner at 512000 E, 4650000 N) over the stone
footings of a small rectangular outbuilding, 8 m x 6 m, turned 25 degrees from the grid, whose
wall tops lie 0.55 m down under plough soil; an internal wall (top at 0.65 m) divides it into a
west and an east room.  In the west room lies a flat hearth slab (0.45 m); in the east room two
rubble stones (0.35 m and 0.65 m).  A field drain at 0.95 m crosses the whole grid from north to
south east of the building.  Four isolated stones and boulders, each 2.5 m or more from anything
else in plan, sit at 0.75, 1.15, 1.45 and 2.05 m (the deeper two with radii of 0.15 and 0.2 m),
for position checks.  A soil boundary (sand over gravel) runs flat at 1.65 m.  Lines run west
to east every 0.5 m with traces every 0.05 m, walked in zigzag; the radar is a 400 MHz antenna
recording 512 samples at 0.1 ns with time zero at 3.0 ns, and the ground velocity is 0.1 m/ns,
so the record reaches 2.41 m below the surface.  Point targets sit at 0.1 m cell centres and
every depth is the middle of a 0.1 m depth slice.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import zlib
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pyproj
import xarray as xr

import slicer.synthetic.forward as _forward
from slicer.core.atomic import atomic_write_text, prepare_output_dir
from slicer.core.conventions import DISTANCE, TRACE, TWT, UNITS, X, Y
from slicer.core.errors import SettingsError, warn
from slicer.core.progress import progress_bar
from slicer.synthetic.forward import (
    Layer,
    LineTarget,
    PlateTarget,
    PointTarget,
    check_fields,
    check_number,
)
from slicer.synthetic.terrain import Ground
from slicer.synthetic.terrain_files import SurfaceFiles, SurfaceOptions, write_surface_files
from slicer.synthetic.terrain_files import format_number as _number

__all__ = ["Ground", "Layer", "LineTarget", "PlannedLine", "PlateTarget", "PointTarget", "Radar",
           "SyntheticSurvey", "demo_survey", "grid_lines", "simulate_line", "write_survey"]

#: Header of the line table written by :func:`write_survey`.
LINE_TABLE_COLUMNS = ("file", "start_x", "start_y", "end_x", "end_y")

#: File suffix of each output format of :func:`write_survey`.
FORMATS = {"segy": ".sgy", "netcdf": ".nc"}


@dataclass(frozen=True)
class Radar:
    """The radar: antenna, recording window and the imperfections of a real record.

    Parameters
    ----------
    frequency_mhz : float
        Antenna centre frequency, MHz.
    wavelet : {"ricker", "gaussian-cosine"}
        Source wavelet shape.
    sample_interval_ns : float
        Sample interval, ns.
    samples : int
        Samples per trace (the record starts at 0 ns).
    time_zero_ns : float
        Time of the direct wave's main peak in the record, ns.
    direct_amplitude, ringing_amplitude, wow_amplitude : float
        Amplitudes of the direct wave, the antenna ringing and the wow (amplitude units).
    noise : float
        Standard deviation of the Gaussian noise (amplitude units).
    seed : int
        Seed of the random draws (wow, noise); each line mixes in its name.
    pattern_exponent : float
        Exponent ``n`` of the ``cos(theta)^n`` antenna pattern.
    """

    frequency_mhz: float = 400.0
    wavelet: str = "ricker"
    sample_interval_ns: float = 0.1
    samples: int = 512
    time_zero_ns: float = 3.0
    direct_amplitude: float = 1.0
    ringing_amplitude: float = 0.1
    wow_amplitude: float = 0.3
    noise: float = 0.002
    seed: int = 0
    pattern_exponent: float = 2.0

    def __post_init__(self):
        check_fields(self, positive=("frequency_mhz", "sample_interval_ns"),
                     nonnegative=("noise", "pattern_exponent", "seed"))
        if self.wavelet not in _forward.WAVELETS:
            raise SettingsError(f"unknown wavelet {self.wavelet!r}; expected one of "
                                f"{', '.join(_forward.WAVELETS)}", where="Radar.wavelet")
        if self.samples < 2:
            raise SettingsError(f"must be >= 2, got {self.samples!r}", where="Radar.samples")
        if not 0 <= self.time_zero_ns < self.record_ns:
            raise SettingsError(f"must lie within the record (0-{self.record_ns:g} ns)",
                                where="Radar.time_zero_ns")
        # Annan (2009), in Jol (ed.), Ground Penetrating Radar Theory and Applications:
        # sample at least six times per period of the centre frequency.
        if self.sample_interval_ns > 1.0 / (6.0 * self.frequency_ghz):
            warn(f"sample interval {self.sample_interval_ns:g} ns is coarse for "
                 f"{self.frequency_mhz:g} MHz (keep it <= {1 / (6 * self.frequency_ghz):.3g} ns)")

    @property
    def frequency_ghz(self) -> float:
        """Centre frequency, GHz."""
        return self.frequency_mhz / 1000.0

    @property
    def record_ns(self) -> float:
        """Length of the record, ``samples * sample_interval_ns``, ns."""
        return self.samples * self.sample_interval_ns

    def twt(self) -> np.ndarray:
        """Sample times of the raw record, ns, starting at 0."""
        return self.sample_interval_ns * np.arange(self.samples, dtype=np.float64)


# --- line plans --------------------------------------------------------------------------------

@dataclass(frozen=True)
class PlannedLine:
    """A straight line to survey: ``n_traces`` evenly spaced traces from start to end inclusive.

    Parameters
    ----------
    name : str
        Line name; also the stem of its file in :func:`write_survey`.
    start_x, start_y, end_x, end_y : float
        First and last trace positions, survey CRS, m.
    n_traces : int
        Number of traces (>= 2).
    """

    name: str
    start_x: float
    start_y: float
    end_x: float
    end_y: float
    n_traces: int

    def __post_init__(self):
        where = f"PlannedLine {self.name!r}"
        if not isinstance(self.name, str) or not self.name.strip() or any(
                c in self.name for c in '/\\:*?"<>|'):
            raise SettingsError("name must be a non-empty string usable as a file name",
                                where=where)
        check_fields(self, owner=where)
        if self.n_traces < 2:
            raise SettingsError(f"must be >= 2, got {self.n_traces!r}", where=f"{where}.n_traces")
        if self.length == 0:
            raise SettingsError("start and end are the same point", where=where)

    @property
    def length(self) -> float:
        """Distance from start to end, m."""
        return math.hypot(self.end_x - self.start_x, self.end_y - self.start_y)

    def positions(self) -> tuple[np.ndarray, np.ndarray]:
        """Trace positions ``(x, y)``, m, evenly spaced; the first and last are exactly the ends."""
        return (np.linspace(self.start_x, self.end_x, self.n_traces),
                np.linspace(self.start_y, self.end_y, self.n_traces))


def grid_lines(*, west: float, south: float, length: float, width: float, line_spacing: float,
               trace_spacing: float, direction: str = "y", zigzag: bool = True,
               prefix: str = "L") -> list[PlannedLine]:
    """Parallel lines covering the rectangle with south-west corner ``(west, south)``.

    Parameters
    ----------
    west, south : float
        South-west corner, survey CRS, m.
    length : float
        Extent along the lines, m (north for ``direction="y"``, east for ``"x"``).
    width : float
        Extent across the lines, m; lines lie every ``line_spacing`` from the corner, up to it.
    line_spacing, trace_spacing : float
        Distances between lines and between traces along a line, m.  When ``length`` is not a
        whole number of trace spacings the spacing is stretched to fit (with a warning).
    direction : {"y", "x"}
        Lines run south-north (``"y"``) or west-east (``"x"``).
    zigzag : bool
        Every other line runs backwards, as a crew walking both ways records.
    prefix : str
        Line names are the prefix and a zero-padded index (``L000``, ``L001``...), so they sort.

    Returns
    -------
    list of PlannedLine
    """
    for name, value in dict(west=west, south=south, length=length, width=width,
                            line_spacing=line_spacing, trace_spacing=trace_spacing).items():
        check_number(name, value, positive=name not in ("west", "south"))
    if direction not in ("x", "y"):
        raise SettingsError(f"must be 'x' or 'y', got {direction!r}", where="direction")
    n_lines = math.floor(width / line_spacing + 1e-9) + 1
    n_traces = max(round(length / trace_spacing), 1) + 1
    if abs((n_traces - 1) * trace_spacing - length) > 1e-6 * length:
        warn(f"length {length:g} m is not a whole number of trace spacings; traces are "
             f"{length / (n_traces - 1):.6g} m apart")
    digits = max(3, len(str(n_lines - 1)))
    lines = []
    for k in range(n_lines):
        across = k * line_spacing
        if direction == "y":
            start, end = (west + across, south), (west + across, south + length)
        else:
            start, end = (west, south + across), (west + length, south + across)
        if zigzag and k % 2:
            start, end = end, start
        lines.append(PlannedLine(f"{prefix}{k:0{digits}d}", *start, *end, n_traces))
    return lines


# --- simulation --------------------------------------------------------------------------------

def simulate_line(ground: Ground, radar: Radar, line: PlannedLine) -> xr.DataArray:
    """Simulate the raw record of one planned line.

    The random draws come from a generator seeded with ``radar.seed`` and the line's name, so a
    line is the same every time and differs from its neighbours.

    Parameters
    ----------
    ground : Ground
    radar : Radar
    line : PlannedLine

    Returns
    -------
    xarray.DataArray
        A Line (DEVELOPERS.md): ``amplitude``, dims ``(trace, twt)``, float32, ``twt`` from 0
        ns; per-trace ``x``, ``y``, ``distance`` (m); ``attrs["time_zero_ns"] = 0.0`` since
        nothing is subtracted yet (the direct wave peaks at ``radar.time_zero_ns``).
    """
    x, y = line.positions()
    twt = radar.twt()
    times, amplitudes = ground.arrivals(x, y, pattern_exponent=radar.pattern_exponent)
    rng = np.random.default_rng([int(radar.seed), zlib.crc32(line.name.encode())])
    data = _forward.synthesize(
        twt, times, amplitudes, kind=radar.wavelet, frequency_ghz=radar.frequency_ghz,
        time_zero_ns=radar.time_zero_ns, direct_amplitude=radar.direct_amplitude,
        ringing_amplitude=radar.ringing_amplitude, wow_amplitude=radar.wow_amplitude,
        noise=radar.noise, rng=rng)
    coords = {
        TWT: (TWT, twt, {"units": UNITS[TWT], "long_name": "two-way travel time"}),
        TRACE: (TRACE, np.arange(line.n_traces, dtype=np.int64),
                {"units": "1", "long_name": "trace index"}),
        X: (TRACE, x, {"units": UNITS[X], "long_name": "easting"}),
        Y: (TRACE, y, {"units": UNITS[Y], "long_name": "northing"}),
        DISTANCE: (TRACE, np.linspace(0.0, line.length, line.n_traces),
                   {"units": UNITS[DISTANCE], "long_name": "distance along the line"}),
    }
    return xr.DataArray(
        data, dims=(TRACE, TWT), coords=coords, name="amplitude",
        attrs={"line": line.name, "source": "slicer.synthetic",
               "sample_interval_ns": float(radar.sample_interval_ns), "time_zero_ns": 0.0,
               "history": f"simulated by slicer.synthetic (seed {radar.seed}, "
                          f"{times.shape[1]} reflectors)",
               "units": "1"},
    )


# --- survey files ------------------------------------------------------------------------------

@dataclass(frozen=True)
class SyntheticSurvey:
    """What :func:`write_survey` wrote.

    Attributes
    ----------
    folder, line_table, truth_file : Path
        The survey folder, its ``lines.csv`` and its ``truth.json``.
    ground, radar : Ground, Radar
    lines : tuple of PlannedLine
    crs : str
        The survey CRS as given.
    files : tuple of Path
        The line files, in the order of ``lines``.
    surface_files : SurfaceFiles
        On uneven ground, the tracks and DEM written (empty on level ground).
    """

    folder: Path
    line_table: Path
    truth_file: Path
    ground: Ground
    radar: Radar
    lines: tuple[PlannedLine, ...]
    crs: str
    files: tuple[Path, ...] = field(default=())
    surface_files: SurfaceFiles = field(default_factory=SurfaceFiles)


def _truth(ground: Ground, radar: Radar, lines, files, crs: str, fmt: str) -> dict:
    return {
        "description": "synthetic survey written by slicer.synthetic (invented ground truth)",
        "crs": crs,
        "format": fmt,
        "velocity_m_per_ns": ground.velocity,
        "attenuation_db_per_m": ground.attenuation_db_per_m,
        "time_zero_ns": radar.time_zero_ns,
        "sample_interval_ns": radar.sample_interval_ns,
        "samples": radar.samples,
        "radar": asdict(radar),
        "units": {"x": "m", "y": "m", "depth": "m", "radius": "m", "time": "ns",
                  "velocity": "m/ns", "amplitude": "1", "frequency": "MHz"},
        "targets": [{"kind": t.kind, **asdict(t)} for t in ground.targets],
        "layers": [{"kind": layer.kind, **asdict(layer)} for layer in ground.layers],
        "lines": [{"file": f.name, **asdict(line)} for line, f in zip(lines, files, strict=True)],
    }


def write_survey(folder: str | os.PathLike, ground: Ground, radar: Radar, lines, *,
                 format: str = "segy", crs: str = "EPSG:32633", overwrite: bool = False,
                 progress: bool = True, gnss_height: float = 1.0,
                 vertical_datum: str = "site datum (synthetic)",
                 dem_cell: float = 0.25) -> SyntheticSurvey:
    """Simulate every line and write a survey folder: line files, ``lines.csv``, ``truth.json``.

    On uneven ground (``ground.surface``) it also writes ``tracks/<line>.csv`` and ``dem.tif``,
    adds ``track``, ``start_elevation`` and ``end_elevation`` to ``lines.csv`` and elevations
    to ``truth.json`` (:mod:`slicer.synthetic.terrain_files`).

    Parameters
    ----------
    folder : path-like
        Output folder (created; must be empty unless ``overwrite``).
    ground : Ground
    radar : Radar
    lines : sequence of PlannedLine
        Names must be unique; each line becomes ``<name>.sgy`` or ``<name>.nc``.
    format : {"segy", "netcdf"}
        Line file format (SEG-Y rev 2, IEEE floats, coordinates in centimetres; or slicer NetCDF).
    crs : str
        Survey CRS, anything :func:`pyproj.CRS.from_user_input` takes; recorded in truth.json.
    overwrite : bool
        Allow a folder that already holds files.
    progress : bool
        Show a progress bar over the lines.
    gnss_height, vertical_datum, dem_cell
        Uneven ground only: the GNSS antenna's height above the ground (m), the name of the
        vertical datum and the DEM cell size (m); see
        :class:`slicer.synthetic.terrain_files.SurfaceOptions`.

    Returns
    -------
    SyntheticSurvey

    Raises
    ------
    SettingsError
        Unknown format or CRS, no lines, repeated line names or a bad surface option.
    OutputError
        The folder cannot be written (see :func:`slicer.core.atomic.prepare_output_dir`).
    """
    if format not in FORMATS:
        raise SettingsError(f"unknown format {format!r}; expected one of {', '.join(FORMATS)}",
                            where="format")
    try:
        pyproj.CRS.from_user_input(crs)
    except pyproj.exceptions.CRSError as exc:
        raise SettingsError(f"not a CRS pyproj understands ({exc})", where="crs") from None
    lines = tuple(lines)
    if not lines:
        raise SettingsError("no lines to simulate", where="lines")
    for i, line in enumerate(lines):
        if not isinstance(line, PlannedLine):
            raise SettingsError(f"expected a PlannedLine, got {type(line).__name__}",
                                where=f"lines[{i}]")
    names = [line.name for line in lines]
    if len(set(names)) != len(names):
        repeated = sorted({n for n in names if names.count(n) > 1})
        raise SettingsError(f"repeated line names: {', '.join(repeated)}", where="lines")
    options = SurfaceOptions(gnss_height=gnss_height, vertical_datum=vertical_datum,
                             dem_cell=dem_cell)
    if format == "segy":
        from slicer.io.segy import write_segy_line as writer
    else:
        from slicer.io.linefile import write_line_netcdf as writer

    folder = prepare_output_dir(folder, overwrite=overwrite)
    files = tuple(folder / f"{line.name}{FORMATS[format]}" for line in lines)
    for line, path in progress_bar(list(zip(lines, files, strict=True)), desc="synthetic lines",
                           unit="line", enabled=progress):
        data = simulate_line(ground, radar, line)
        data.attrs["source"] = str(path)
        writer(data, path, overwrite=True)  # the folder itself was checked above
    surface = (SurfaceFiles() if ground.surface is None else
               write_surface_files(folder, ground, lines, crs=crs, options=options))

    table = io.StringIO()
    out = csv.writer(table, lineterminator="\n")
    out.writerow((*LINE_TABLE_COLUMNS, *surface.columns))
    for i, (line, path) in enumerate(zip(lines, files, strict=True)):
        out.writerow([path.name, *(_number(v) for v in (line.start_x, line.start_y,
                                                         line.end_x, line.end_y)),
                      *surface.row(i)])
    line_table = atomic_write_text(folder / "lines.csv", table.getvalue())
    truth = surface.add_to(_truth(ground, radar, lines, files, crs, format))
    truth_file = atomic_write_text(folder / "truth.json", json.dumps(truth, indent=2) + "\n")
    return SyntheticSurvey(folder=folder, line_table=line_table, truth_file=truth_file,
                           ground=ground, radar=radar, lines=lines, crs=crs, files=files,
                           surface_files=surface)


# --- the demo ----------------------------------------------------------------------------------

def demo_survey() -> tuple[Ground, Radar, list[PlannedLine], str]:
    """The invented demo scenario described in this module's docstring.

    Returns
    -------
    ground : Ground
    radar : Radar
    lines : list of PlannedLine
        29 west-east lines, 0.5 m apart, 401 traces 0.05 m apart, zigzag.
    crs : str
        ``"EPSG:32633"`` (UTM zone 33N).
    """
    e, n = 512000.0, 4650000.0
    # the outbuilding: centre, half sizes and turn (anticlockwise from east); corners and the
    # ends of the internal wall in the building's own frame
    cx, cy, turn = e + 8.5, n + 8.0, math.radians(25.0)

    def at(u, v):
        return (cx + u * math.cos(turn) - v * math.sin(turn),
                cy + u * math.sin(turn) + v * math.cos(turn))

    corners = [at(-4, -3), at(4, -3), at(4, 3), at(-4, 3)]
    footings = tuple(LineTarget(*corners[k], *corners[(k + 1) % 4], 0.55) for k in range(4))
    targets = (
        *footings,
        LineTarget(*at(0, -3), *at(0, 3), 0.65, amplitude=0.8),  # internal wall
        PlateTarget(e + 5.9, n + 7.0, e + 7.1, n + 8.2, 0.45, amplitude=0.7),  # hearth slab
        PointTarget(e + 9.85, n + 9.75, 0.35, amplitude=0.3),  # rubble in the east room
        PointTarget(e + 11.45, n + 7.65, 0.65, amplitude=0.3),
        LineTarget(e + 15.0, n + 14.0, e + 17.0, n + 0.0, 0.95, amplitude=0.8),  # field drain
        # isolated stones and boulders for position checks
        PointTarget(e + 1.55, n + 2.05, 0.75, amplitude=0.6),
        PointTarget(e + 2.05, n + 12.55, 1.15, amplitude=0.8),
        PointTarget(e + 11.55, n + 1.55, 1.45, amplitude=1.0, radius=0.15),
        PointTarget(e + 18.55, n + 9.05, 2.05, amplitude=1.5, radius=0.2),
    )
    ground = Ground(velocity=0.1, attenuation_db_per_m=3.0, targets=targets,
                    layers=(Layer(1.65, 0.3),))
    radar = Radar(frequency_mhz=400.0, wavelet="ricker", sample_interval_ns=0.1, samples=512,
                  time_zero_ns=3.0, seed=20240611)
    lines = grid_lines(west=e, south=n, length=20.0, width=14.0, line_spacing=0.5,
                       trace_spacing=0.05, direction="x", zigzag=True)
    return ground, radar, lines, "EPSG:32633"
