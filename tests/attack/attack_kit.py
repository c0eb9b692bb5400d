"""Seeds, the promise every reader keeps, and the checks of a valid result, for the attack suite.

The promise (issue 10, item 7): a reader either returns a valid result or raises a
:class:`~slicer.SlicerError` whose message is one line naming the file; no other exception
escapes, and the input file's bytes are the same afterwards.  Through the command line, the
same input gives exit code 0, or exit code 2 with one ``slicer: error: ...`` line on stderr.
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import math
import os
import random
import re
import sys
import tempfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from mutate import (
    Mutant,
    byte_mutants,
    csv_mutants,
    generic_mutants,
    segy_mutants,
    text_mutants,
    toml_mutants,
)

#: Every mutant count below is multiplied by this (``SLICER_ATTACK_SCALE=10`` for a long local
#: run; CI keeps 1 so the suite stays within about a minute).
SCALE = max(1, int(os.environ.get("SLICER_ATTACK_SCALE", "1")))
SEED = 20240610

#: Characters that start a new line on a terminal or in a log reader.
LINE_BREAKS = "\n\r\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029"

# --- seeds: small valid inputs of every kind --------------------------------------------------

X0, Y0 = 512000.0, 4650000.0
N_TRACES = 12
INTERVAL_NS = 0.2

LINE_TABLE = (
    "file,start_x,start_y,end_x,end_y\n"
    f"L000.sgy,{X0},{Y0},{X0 + 1.1},{Y0}\n"
    f"L001.sgy,{X0 + 1.1},{Y0 + 0.5},{X0},{Y0 + 0.5}\n"
    f"L002.sgy,{X0},{Y0 + 1.0},{X0 + 1.1},{Y0 + 1.0}\n"
)
LINE_TABLE_OPTIONAL = (
    "file,start_x,start_y,end_x,end_y,positions,track,marks,channels\n"
    f"L000.sgy,{X0},{Y0},{X0 + 1.1},{Y0},table,,marks.csv,\n"
    f"L001.sgy,,,,,track,track.csv,,\n"
    f"L002.sgy,{X0},{Y0 + 1.0},{X0 + 1.1},{Y0 + 1.0},,,,channels.csv\n"
)
LOCAL_LINE_TABLE = (
    "file,start_x,start_y,end_x,end_y\n"
    "M000.sgy,0,0,1.1,0\nM001.sgy,1.1,0.5,0,0.5\nM002.sgy,0,1.0,1.1,1.0\n"
)
TRACK_XY = "trace,x,y,height\n" + "".join(
    f"{k * 3},{X0 + 1.1 - 0.3 * k:.3f},{Y0 + 0.5 + 0.001 * k:.3f},{100 + 0.01 * k:.2f}\n"
    for k in range(5))
TRACK_LONLAT = "trace,lon,lat\n" + "".join(
    f"{k * 2.75:g},{15.0 + 1e-5 * k:.7f},{41.99 + 2e-6 * k:.7f}\n" for k in range(5))
TRACK_TIME = "time,x,y\n" + "".join(
    f"{1000.0 + 0.5 * k:.1f},{X0 + 0.3 * k:.2f},{Y0:.2f}\n" for k in range(5))
MARKS = "trace,distance\n0,0\n5,0.52\n11,1.1\n"
CONTROL_POINTS = (
    "name,local_x,local_y,x,y\n"
    f"A,0,0,{X0},{Y0}\nB,10,0,{X0 + 10},{Y0}\nC,0,10,{X0},{Y0 + 10}\n"
    f"D,10,10,{X0 + 10},{Y0 + 10}\n"
)
CHANNELS = "channel,across,along\n1,-0.1,0\n2,0.1,0.05\n"
VELOCITY_CONSTANT = 'kind = "constant"\nvelocity = 0.1\nvelocity_std = 0.005\nnote = "seed"\n'
VELOCITY_PERMITTIVITY = 'kind = "constant"\npermittivity = 9.0\npermittivity_std = 0.3\n'
VELOCITY_LAYERED = (
    'kind = "layered"\n[[layer]]\ntop_depth = 0.0\nvelocity = 0.12\nvelocity_std = 0.005\n'
    "[[layer]]\ntop_depth = 0.4\nvelocity = 0.08\nvelocity_std = 0.004\n")
VELOCITY_RMS = (
    'kind = "layered"\n[[layer]]\nbase_time = 4.0\nrms_velocity = 0.12\nvelocity_std = 0.003\n'
    "[[layer]]\nbase_time = 8.0\nrms_velocity = 0.11\nvelocity_std = 0.003\n")
VELOCITY_LATERAL = (
    'kind = "lateral"\nlength_scale = 2.0\n'
    f"[[point]]\nx = {X0}\ny = {Y0}\nvelocity = 0.1\nvelocity_std = 0.005\n"
    f"[[point]]\nx = {X0 + 1}\ny = {Y0 + 1}\nvelocity = 0.09\nvelocity_std = 0.004\n")
BUILD_OPTIONS = ('crs = "EPSG:32633"\nsample_interval = 0.2\ntime_zero = 2.0\n'
                 'cell = 0.25\nout = "build"\n')
SURVEY_TABLE = BUILD_OPTIONS + 'times = "0:8:2"\nvelocity = 0.1\nlines = "lines.csv"\n'
SURVEY_INLINE = BUILD_OPTIONS + 'velocity_model = "velocity.toml"\ndepths = "0:0.3:0.1"\n' + (
    "".join(
    f'[[line]]\nfile = "L00{k}.sgy"\nstart_x = {X0}\nstart_y = {Y0 + 0.5 * k}\n'
    f"end_x = {X0 + 1.1}\nend_y = {Y0 + 0.5 * k}\n" for k in range(3)))
SURVEY_BLOCKS = (
    BUILD_OPTIONS + 'times = "0:8:2"\nvelocity = 0.1\n'
    '[[block]]\nname = "north"\nlines = ["lines.csv"]\n'
    '[[block]]\nname = "local"\nlines = "local.csv"\ncontrol_points = "control.csv"\n'
    'control_fit = "affine"\ncontrol_tolerance = 0.05\n')


@dataclass(frozen=True)
class Seeds:
    """Valid inputs as bytes, written once per process from slicer.synthetic."""

    segy: dict[str, bytes]
    netcdf: dict[str, bytes]
    survey: dict[str, bytes]  # a whole valid survey folder: file name -> bytes


def _classic(line, path):
    """A line as classic NetCDF (format 1), as xarray writes it where netCDF4 is missing."""
    import xarray as xr

    from slicer.io.linefile import write_line_netcdf
    write_line_netcdf(line, path.with_suffix(".nc4"))
    with xr.open_dataset(path.with_suffix(".nc4"), engine="h5netcdf") as ds:
        ds.load().to_netcdf(path, format="NETCDF3_CLASSIC", engine="scipy")


@functools.cache
def seeds() -> Seeds:
    """Radar lines (SEG-Y IEEE, IBM and int16; NetCDF) and a small survey around them."""
    from slicer.io.linefile import write_line_netcdf
    from slicer.io.segy import write_segy_line
    from slicer.synthetic import Ground, PointTarget, Radar, grid_lines, simulate_line

    ground = Ground(velocity=0.1, targets=(PointTarget(X0 + 0.55, Y0 + 0.5, 0.25),))
    radar = Radar(frequency_mhz=500.0, sample_interval_ns=INTERVAL_NS, samples=48,
                  time_zero_ns=2.0, seed=3)
    planned = grid_lines(west=X0, south=Y0, length=1.1, width=1.0, line_spacing=0.5,
                         trace_spacing=0.1, direction="x", zigzag=True)
    lines = [simulate_line(ground, radar, p) for p in planned]
    assert all(line.sizes["trace"] == N_TRACES for line in lines)
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)

        def written(writer, name, line, **kw):
            writer(line, folder / name, **kw)
            return (folder / name).read_bytes()

        segy = {"ieee": written(write_segy_line, "a.sgy", lines[0]),
                "ibm": written(write_segy_line, "b.sgy", lines[1], format_code=1),
                "int16": written(write_segy_line, "c.sgy", lines[2], format_code=3)}
        netcdf = {"plain": written(write_line_netcdf, "a.nc", lines[0])}
        unplaced = lines[1].drop_vars([c for c in ("x", "y", "distance")
                                       if c in lines[1].coords])
        netcdf["no-xy"] = written(write_line_netcdf, "b.nc", unplaced)
        netcdf["classic"] = written(_classic, "c.nc", lines[2])  # NetCDF-3, read by SciPy
        survey = {f"L00{k}.sgy": written(write_segy_line, f"L00{k}.sgy", line)
                  for k, line in enumerate(lines)}
    texts = {"lines.csv": LINE_TABLE, "local.csv": LOCAL_LINE_TABLE, "track.csv": TRACK_XY,
             "marks.csv": MARKS, "control.csv": CONTROL_POINTS, "channels.csv": CHANNELS,
             "velocity.toml": VELOCITY_CONSTANT, "survey.toml": SURVEY_TABLE}
    survey.update({name: text.encode() for name, text in texts.items()})
    return Seeds(segy, netcdf, survey)


def write_survey_folder(folder: Path, **replace: str) -> Path:
    """The seed survey in ``folder`` (created), with some files' text replaced."""
    folder.mkdir(parents=True, exist_ok=True)
    for name, data in seeds().survey.items():
        (folder / name).write_bytes(replace[name].encode() if name in replace else data)
    return folder


#: Mutants on which libhdf5 (2.0.0, through h5py) never returns: reading a variable-length
#: attribute (DIMENSION_LIST) whose global heap was damaged spins at 100 % CPU, the upstream
#: bug HDFGroup/hdf5#1707 (h5py/h5py#2088).  Only reading in a child process could bound it, too
#: costly per line, so these run in a child process here, as strict xfails.
HANGS = {"netcdf-plain-092": "zero-span@2379"}
HANG_REASON = ("libhdf5 loops forever reading a variable-length attribute whose global heap "
               "is damaged (HDFGroup/hdf5#1707); the reader cannot bound it in-process")


# --- mutants ----------------------------------------------------------------------------------


@dataclass(frozen=True)
class Case:
    """One mutant of one seed: ``seed`` names the seed, ``index`` its place in the run."""

    seed: str
    index: int
    mutant: Mutant

    @property
    def id(self) -> str:
        return f"{self.seed}-{self.index:03d}"

    def __str__(self) -> str:
        return f"{self.id} ({self.mutant.name})"


def _cases(seed: str, mutants) -> list[Case]:
    return [Case(seed, i, m) for i, m in enumerate(mutants)]


def _rng(*parts: str) -> random.Random:
    return random.Random(f"{SEED}:{':'.join(parts)}")


def binary_cases(seed: str, data: bytes, *, header: int, fields: int, flips: int,
                 segy: bool, scaled: bool = True) -> list[Case]:
    """Generic mutants, header fields (SEG-Y), byte damage within the first ``header`` bytes
    (where the format is decided), then byte damage anywhere; counts times SCALE if
    ``scaled``."""
    rng = _rng(seed)
    scale = SCALE if scaled else 1
    mutants = list(generic_mutants())
    if segy:
        mutants += segy_mutants(data, rng, fields * scale)
    mutants += byte_mutants(data, rng, flips * scale, stop=header)
    mutants += byte_mutants(data, rng, flips * scale)
    return _cases(seed, mutants)


def csv_cases(seed: str, text: str, count: int) -> list[Case]:
    rng = _rng(seed)
    return _cases(seed, [*text_mutants(text, rng, count * SCALE // 3),
                         *csv_mutants(text, rng, count * SCALE)])


def toml_cases(seed: str, text: str, count: int) -> list[Case]:
    rng = _rng(seed)
    return _cases(seed, [*text_mutants(text, rng, count * SCALE // 3),
                         *toml_mutants(text, rng, count * SCALE)])


def pick(cases: list[Case], count: int, seed: str) -> list[Case]:
    """The generic mutants (missing, empty, folder) and ``count`` more drawn with a fixed seed."""
    rng = _rng("cli", seed)
    rest = cases[3:]
    return cases[:3] + rng.sample(rest, min(count, len(rest)))


# --- the promise ------------------------------------------------------------------------------


def digest(path: Path) -> str | None:
    """sha256 of a regular file's bytes, ``"dir"`` for a folder, None for nothing."""
    if path.is_dir():
        return "dir:" + ",".join(sorted(p.name for p in path.iterdir()))
    if not path.exists():
        return None
    return hashlib.sha256(path.read_bytes()).hexdigest()


def names_file(path: Path) -> Callable[[str], bool]:
    """Whether a message names ``path``'s file."""
    return lambda text: path.name in text


def names_survey(path: Path) -> Callable[[str], bool]:
    """Whether a message names the survey file, a file of its folder (a line table, control
    points or velocity model it refers to), or the option at fault (``--crs: ...``)."""
    option = re.compile(r"^--[a-z][a-z-]*[ :]")
    return lambda text: (path.name in text or str(path.parent) in text
                         or option.match(text) is not None)


def check_error(exc: BaseException, path: Path, case, names=None) -> None:
    """A SlicerError with a one-line message that names ``path``'s file (or ``names(text)``)."""
    text = str(exc)
    assert text.strip(), f"{case}: empty {type(exc).__name__} message"
    breaks = [c for c in LINE_BREAKS if c in text]
    assert not breaks, f"{case}: {type(exc).__name__} message spans lines: {text!r}"
    names = names or names_file(path)
    assert names(text), f"{case}: message does not name {path.name}: {text!r}"


def attack(call: Callable, path: Path, case, *, also: tuple[Path, ...] = (), names=None):
    """Run ``call()`` on a mutant at ``path``: its result, or the SlicerError it raised.

    Fails the test if any other exception escapes, if a SlicerError message is not one line
    naming the file (``names(text)`` decides, when given), or if ``path`` (or any file of
    ``also``) changed.
    """
    from slicer.core.errors import SlicerError

    watched = (path, *also)
    before = [digest(p) for p in watched]
    with ignored_exceptions() as ignored:
        try:
            result = call()
        except SlicerError as exc:
            check_error(exc, path, case, names)
            result = exc
        except Exception as exc:
            raise AssertionError(f"{case}: {type(exc).__name__} escaped: {exc}") from exc
    assert not ignored, f"{case}: an ignored exception printed a traceback: {ignored[0]}"
    assert [digest(p) for p in watched] == before, f"{case}: the input was modified"
    return result


@contextlib.contextmanager
def ignored_exceptions() -> Iterator[list[str]]:
    """Collect the exceptions Python would print as "Exception ignored in ..." (a destructor
    failing, say): outside pytest each is a traceback on stderr."""
    seen: list[str] = []
    previous = sys.unraisablehook
    sys.unraisablehook = lambda u: seen.append(f"{u.exc_type.__name__}: {u.exc_value} "
                                               f"(in {u.object!r})")
    try:
        yield seen  # reference counting frees a half-built object as the error passes
    finally:
        sys.unraisablehook = previous


def failed(result) -> bool:
    from slicer.core.errors import SlicerError
    return isinstance(result, SlicerError)


# --- valid results ----------------------------------------------------------------------------


def check_line(line, case) -> None:
    """A Line: (trace, twt) float32 finite samples, even increasing finite twt."""
    assert line.dims == ("trace", "twt") and line.dtype == np.float32, case
    assert line.sizes["trace"] >= 1 and line.sizes["twt"] >= 1, case
    assert np.isfinite(line.values).all(), f"{case}: non-finite samples returned"
    interval = line.attrs["sample_interval_ns"]
    assert math.isfinite(interval) and interval > 0, case
    twt = line["twt"].values
    assert np.isfinite(twt).all(), case
    if twt.size > 1:
        assert (np.diff(twt) > 0).all(), f"{case}: twt does not increase"
    for c in ("header_x", "header_y"):  # NaN is nodata; positions_from_headers refuses it
        if c in line.coords:
            assert line[c].dims == ("trace",) and line[c].dtype == np.float64, case


def check_info(info, case) -> None:
    assert info.n_traces >= 1 and info.n_samples >= 1, case
    dt = info.sample_interval_ns
    assert dt is None or (math.isfinite(dt) and dt > 0), case


def check_entries(entries, case, *, ends: bool) -> None:
    assert entries, case
    files = [e.file.resolve() for e in entries]
    assert len(set(files)) == len(files), f"{case}: a file named twice was accepted"
    for e in entries:
        assert str(e.file).strip(), case
        values = (*e.start, *e.end)
        if ends and (e.positions or "table") == "table":
            assert all(math.isfinite(v) for v in values), f"{case}: non-finite ends"
            assert e.length > 0, case
        else:
            assert all(math.isfinite(v) for v in values) or all(math.isnan(v) for v in values)


def check_track(track, case) -> None:
    keys = np.asarray(track.keys)
    assert keys.size >= 2 and (np.diff(keys) > 0).all(), case
    for values in (keys, track.first, track.second):
        assert np.isfinite(values).all(), case
    if track.geographic:
        assert (np.abs(track.second) <= 90).all(), case
    if track.height is not None:
        assert np.isfinite(track.height).all(), case


def check_marks(marks, case) -> None:
    for trace, distance in marks:
        assert isinstance(trace, int) and math.isfinite(distance), case


def check_points(points, case) -> None:
    assert points, case
    names = [p.name for p in points]
    assert all(names) and len(set(names)) == len(names), case
    for p in points:
        assert all(math.isfinite(v) for v in (*p.local, *p.crs)), case


def check_channels(table, case) -> None:
    assert table.channels and len(set(table.channels)) == len(table.channels), case
    assert all(math.isfinite(v) for v in (*table.across, *table.along)), case


def check_model(model, case) -> None:
    from slicer.core.conventions import C_M_PER_NS
    from slicer.velocity.models import VelocityModel

    assert isinstance(model, VelocityModel), case
    v = np.atleast_1d(np.asarray(model.velocity, dtype=float))
    s = np.atleast_1d(np.asarray(model.velocity_std, dtype=float))
    assert v.size and np.isfinite(v).all() and (v > 0).all() and (v <= C_M_PER_NS).all(), case
    assert np.isfinite(s).all() and (s >= 0).all(), f"{case}: bad velocity_std {s}"


def check_settings(settings, case) -> None:
    from slicer.pipeline.settings import BuildSettings

    assert isinstance(settings, BuildSettings), case
    check_entries(list(settings.lines), case, ends=False)


# --- the command line -------------------------------------------------------------------------


def run_cli(argv: list[str], capsys, folder: Path, case) -> int:
    """``slicer`` with ``argv``: 0, or 2 with one ``slicer: error:`` line (warnings aside);
    nothing in the survey ``folder`` changed."""
    from slicer.cli import main

    files = sorted(p for p in folder.rglob("*") if "build" not in p.relative_to(folder).parts)
    before = [digest(p) for p in files]
    capsys.readouterr()
    with ignored_exceptions() as ignored:
        try:
            code = main(argv)
        except BaseException as exc:
            raise AssertionError(f"{case}: {type(exc).__name__} escaped the CLI: {exc}") from exc
    err = capsys.readouterr().err
    assert not ignored, f"{case}: an ignored exception printed a traceback: {ignored[0]}"
    lines = err.splitlines()
    assert all(line.startswith("slicer: ") for line in lines), \
        f"{case}: stderr holds more than slicer's own lines:\n{err}"
    errors = [line for line in lines if line.startswith("slicer: error: ")]
    assert code in (0, 2), f"{case}: exit code {code}\n{err}"
    if code == 2:
        assert len(errors) == 1 and lines[-1] == errors[0], f"{case}: stderr:\n{err}"
    else:
        assert not errors, f"{case}: exit 0 with errors:\n{err}"
    assert [digest(p) for p in files] == before, f"{case}: an input file was modified"
    return code
