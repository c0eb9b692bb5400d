"""The build options in one place: type, unit, physical limits and meaning of each.

A value reaches a build from a TOML survey file, a command-line flag or a keyword of
:func:`~slicer.load_settings`; :func:`check_option` checks all of them alike against
:data:`OPTIONS`, so that ``overwrite = "false"`` or ``cell = "0.1"`` in a TOML file is refused
with one line naming the key, never taken for something else. The limits are wide enough for
any radar survey from concrete scanning (mm cells, ps samples) to low-frequency geology (10 m
cells, µs records) and narrow enough that no value within them can exhaust the machine on its
own; the help of each flag states them. Relations between options (a velocity's uncertainty
below the velocity, slices within the record, the size of the grid) are checked later, with
the survey at hand.

This module imports nothing heavy: the command line builds its ``--help`` from it.
"""

from __future__ import annotations

import math
import numbers
import os
from dataclasses import dataclass
from pathlib import Path

from slicer.core.errors import SettingsError

#: The speed of light in vacuum (m/ns), the upper bound of any radar velocity in ground.
_C = 0.299792458


@dataclass(frozen=True)
class Option:
    """One build option.

    Attributes
    ----------
    name : str
        The key (TOML) and, with ``-`` for ``_``, the flag.
    kind : str
        ``number``, ``flag`` (true/false), ``text``, ``choice``, ``path``, ``number|word``
        (a number or one of ``words``), ``size`` (bytes, a number or text such as 1GB) or
        ``background`` (text in :func:`slicer.processing.background.parse_background`'s form)
        or ``formats`` (a comma list of ``words``, or a TOML list of them) or ``radii`` (one
        text or a list of texts in :func:`slicer.velocity.targets.parse_target_radius`'s form).
    help : str
        Meaning, for the docs and ``--help``.
    unit : str
        Unit of a number.
    low, high : float, optional
        Limits of a number; ``low`` is excluded when ``open_low``.
    words : tuple of str
        The choices of ``choice``, or the words ``number|word`` accepts.
    """

    name: str
    kind: str
    help: str
    unit: str = ""
    low: float | None = None
    high: float | None = None
    open_low: bool = False
    words: tuple[str, ...] = ()

    @property
    def flag(self) -> str:
        return "--" + self.name.replace("_", "-")

    @property
    def limits(self) -> str:
        """The accepted range, as the help states it (empty when there is none)."""
        if self.kind not in ("number", "number|word") or self.low is None:
            return ""
        low = f"{self.low:g}"
        sign = "<" if self.open_low else "<="
        return f"{low} {sign} value <= {self.high:g} {self.unit}".rstrip()


def _number(o, value, where):
    if isinstance(value, bool) or not isinstance(value, numbers.Real):  # NumPy's too
        if isinstance(value, str):
            raise SettingsError(f"expected a number of {o.unit or 'units'}, got the text "
                                f"{value!r} (write it without quotes)", where=where)
        raise SettingsError(f"expected a number of {o.unit or 'units'}, got {value!r}",
                            where=where)
    try:
        v = float(value)
    except OverflowError:  # a TOML integer beyond any float
        raise SettingsError(f"{str(value)[:12]}... is too large a number of {o.unit or 'units'}",
                            where=where) from None
    if o.low is None:
        if not math.isfinite(v):
            raise SettingsError(f"expected a finite number of {o.unit}, got {v:g}", where=where)
        return v
    too_low = v <= o.low if o.open_low else v < o.low
    if not math.isfinite(v) or too_low or v > o.high:
        raise SettingsError(f"{v:g} {o.unit} is outside {o.limits}".replace("  ", " "),
                            where=where)
    return v


def check_option(name: str, value, *, where: str | None = None):
    """``value`` checked against the option ``name`` and normalised (floats, paths, bools).

    ``where`` names the key or flag in errors (default: the flag). ``None`` passes through
    (not given).

    Raises
    ------
    SettingsError
        Unknown option, wrong type or outside the limits.
    """
    try:
        o = OPTIONS[name]
    except KeyError:
        raise SettingsError(f"unknown option {name!r}", where=where) from None
    where = where or o.flag
    if value is None:
        return None
    if o.kind == "number":
        return _number(o, value, where)
    if o.kind == "number|word":
        if isinstance(value, str) and value.strip().lower() in o.words:
            return value.strip().lower()
        if isinstance(value, str):
            try:
                value = float(value)  # a flag's text; a TOML number arrives as a number
            except ValueError:
                raise SettingsError(f"expected a number of {o.unit} or "
                                    f"{' or '.join(map(repr, o.words))}, got {value!r}",
                                    where=where) from None
        return _number(o, value, where)
    if o.kind == "flag":
        if not isinstance(value, bool):
            raise SettingsError(f"expected true or false (without quotes), got {value!r}",
                                where=where)
        return value
    if o.kind == "path":
        if not isinstance(value, str | os.PathLike) or not str(value).strip():
            raise SettingsError(f"expected a file or folder name, got {value!r}", where=where)
        return Path(value)
    if o.kind == "size":
        if isinstance(value, bool) or not isinstance(value, str | int | float):
            raise SettingsError(f"expected a size such as 1GB or 512MiB, got {value!r}",
                                where=where)
        return value
    if o.kind == "formats":
        return _formats(o, value, where)
    if o.kind == "radii":  # their grammar lives with the fits (imported only here)
        from slicer.velocity.targets import parse_target_radius
        one = isinstance(value, str | int | float) and not isinstance(value, bool)
        texts = [str(value)] if one else value
        if not isinstance(texts, list | tuple) or not all(isinstance(t, str) for t in texts):
            raise SettingsError(f"expected R[+-S][@X1,Y1,X2,Y2...] or a list of them, got "
                                f"{value!r}", where=where)
        for text in texts:
            try:
                parse_target_radius(text)
            except SettingsError as exc:
                raise SettingsError(exc.message, where=where) from None
        return tuple(texts) or None
    if not isinstance(value, str):
        raise SettingsError(f"expected text, got {value!r}", where=where)
    if o.kind == "background":  # its grammar lives with the step (imported only here)
        from slicer.processing.background import parse_background
        try:
            parse_background(value)
        except SettingsError as exc:
            raise SettingsError(exc.message, where=where) from None
    if o.kind == "choice" and value not in o.words:
        raise SettingsError(f"expected one of {', '.join(o.words)}, got {value!r}",
                            where=where)
    return value


def _formats(o, value, where) -> str:
    """A comma list (or a list) of ``o.words``, normalised to their order, each once."""
    items = value.split(",") if isinstance(value, str) else value
    if not isinstance(items, list | tuple) or not all(isinstance(i, str) for i in items):
        raise SettingsError(f"expected a comma list of {', '.join(o.words)}, got {value!r}",
                            where=where)
    given = {i.strip().lower() for i in items} - {""}
    unknown = sorted(given - set(o.words))
    if unknown:
        raise SettingsError(f"unknown output format {unknown[0]!r}; expected a comma list of "
                            f"{', '.join(o.words)}", where=where)
    if not given:
        raise SettingsError(f"no output format given; expected a comma list of "
                            f"{', '.join(o.words)}", where=where)
    return ",".join(w for w in o.words if w in given)


def _o(name, kind, help, unit="", low=None, high=None, open_low=False, words=()):
    return Option(name, kind, help, unit, low, high, open_low, tuple(words))


#: Every build option, in the order of the documentation.
OPTIONS: dict[str, Option] = {o.name: o for o in (
    _o("crs", "text", "survey CRS of the line coordinates (EPSG code, WKT or PROJ string)"),
    _o("positions", "choice", "where trace positions come from: 'table' (even from start to "
       "end, or stretched between distance marks), 'headers' (the files' trace-header "
       "coordinates, in the survey CRS) or 'track' (each row's GNSS track file)",
       words=("table", "headers", "track")),
    _o("track_crs", "text", "CRS of the GNSS fixes (default EPSG:4326, longitude/latitude)"),
    # A cart's antenna sits within a few metres of its receiver; 50 m covers any towed rig.
    _o("antenna_along", "number", "antenna centre ahead of the GNSS receiver, along travel",
       "m", -50, 50),
    _o("antenna_across", "number", "antenna centre to the right of the GNSS receiver, across "
       "travel", "m", -50, 50),
    _o("trace_spacing", "number", "resample every line to this even trace spacing after "
       "positioning", "m", 0.001, 100),
    _o("control_points", "path", "CSV name,local_x,local_y,x,y tying a local grid to the "
       "survey CRS; line-table coordinates are then local"),
    _o("control_fit", "choice", "local grid to CRS fit: 'similarity' (4 parameters) or "
       "'affine' (6)", words=("similarity", "affine")),
    _o("control_tolerance", "number", "largest control-point residual accepted", "m",
       0, 100, open_low=True),
    # Radar records sample from ~1 ps (concrete, GHz antennas) to ~10 ns (10 MHz geology).
    _o("sample_interval", "number", "sample interval, when the files cannot hold it", "ns",
       0.001, 20),
    _o("time_zero", "number|word", "time zero on the raw record, or 'auto' (direct-wave "
       "pick)", "ns", 0, 100_000, words=("auto",)),
    # Ground-coupled antenna pairs sit centimetres to a metre apart; 10 m covers wide-angle rigs.
    _o("antenna_separation", "number", "transmitter-receiver distance: a picked time zero is "
       "the direct wave minus separation / c, and depths use the bistatic path", "m", 0, 10),
    _o("time_zero_threshold", "number", "fraction of the peak the direct wave must reach for "
       "'auto'", "", 0, 1, open_low=True),
    _o("dewow", "number|word", "running-mean window, 'auto' (1.5 dominant periods) or 'off'",
       "ns", 0, 100_000, open_low=True, words=("auto", "off")),
    _o("background", "background", "background removal: 'scaled' (the median trace fitted to "
       "each trace: no ghost under strong reflectors), 'median' or 'mean' (subtracted whole: "
       "flat layers go too), each optionally limited to a time window ':TOP-BOTTOM' in ns "
       "('median:0-12' removes ringing and keeps layers below), or 'off'"),
    # Evidence for the default: benchmarks/README.md, "migration.py" (flank / apex table).
    _o("gain", "text", "gain: 'power:P' (t^P), 'exp:DB_PER_NS' or 'none'. The default "
       "power:1 undoes the 1/r spreading of an echo and no more, so a hyperbola's later flanks "
       "stay fainter than its apex (on synthetic slices at most 0.7 of it unmigrated, 0.9 with "
       "an antenna radiating evenly in all directions); power:1.5 and more let flanks outshine "
       "apexes"),
    # The limits of a velocity (0 < v < c) are checked with the physics, whose message
    # names the speed of light (slicer.core.physics.check_velocity).
    _o("velocity", "number", "radar velocity (0 < v < 0.2998)", "m/ns"),
    # Air is 1; water, about 80 at radar frequencies, is the most of any common ground.
    # 1 itself (air) is refused by the physics: no ground is as fast as light.
    _o("permittivity", "number", "relative permittivity (instead of velocity)", "", 1, 100,
       open_low=True),
    _o("velocity_std", "number", "one-sigma uncertainty of the velocity, for the depth error "
       "(below the velocity)", "m/ns", 0, _C),
    _o("velocity_model", "path", "velocity-model TOML file (constant, layered or lateral; "
       "see README)"),
    _o("migrate", "choice", "2-D migration before the envelope: 'auto' (depth slices: Stolt "
       "for one velocity, phase shift for layers; not time slices nor a lateral model), "
       "'stolt', 'phase-shift' or 'off'", words=("auto", "off", "stolt", "phase-shift")),
    _o("attribute", "choice", "slice values: 'envelope' (strength) or 'signed' (the "
       "envelope with the sign of the window's strongest reflection relative to the direct "
       "wave: metal and wet ground against voids and dry fill)", words=("envelope", "signed")),
    # A wheel or trigger lag is a few traces (common practice); 5 m bounds any cart survey.
    _o("zigzag_shift", "number|word", "along-line lag of lines walked both ways: 'auto' "
       "(estimated from neighbouring lines walked the other way), a shift in m along each "
       "line's direction of travel, or 'off'", "m", -5, 5, words=("auto", "off")),
    _o("ties", "choice", "ties at line crossings: 'off', 'report' (measure and report the "
       "misfit) or 'apply' (also correct each line's time zero and gain)",
       words=("off", "report", "apply")),
    _o("level", "flag", "remove line-to-line stripes from the slice values before gridding "
       "(true/false)"),
    _o("cell", "number", "grid cell (default: a round number near a quarter of the line "
       "spacing)", "m", 0.001, 1000),
    _o("radius", "number", "search radius; cells farther from any trace stay nodata, unless "
       "between two lines at most max_gap apart", "m", 0.001, 10_000),
    _o("max_gap", "number", "widest gap between parallel lines that is bridged by "
       "interpolation; a wider gap stays nodata beyond the search radius (default 2.5 x line "
       "spacing)", "m", 0, 10_000),
    _o("depths", "text", "depth slices TOP:BOTTOM:STEP in m"),
    _o("thickness", "number", "slice thickness (m or ns), default the step", "m or ns",
       0, 100_000, open_low=True),
    _o("times", "text", "time slices TOP:BOTTOM:STEP in ns below time zero"),
    _o("slices", "choice", "what slices follow: 'depth' (below the ground surface, or time "
       "with --times; the default) or 'elevation' (level, at heights above a vertical datum: "
       "needs --terrain and --datum)", words=("depth", "elevation")),
    _o("elevations", "text", "elevation slices TOP:BOTTOM:STEP in m above the datum, TOP the "
       "higher (default: from the highest ground down as far as the record reaches)"),
    _o("terrain", "text", "the ground's elevation at every trace, for elevation slices: "
       "'gnss' (the height column of each line's GNSS track, less --gnss-height), 'table' "
       "(line-table columns start_elevation and end_elevation) or an elevation model "
       "GeoTIFF"),
    # Ground-coupled antennas ride 0-5 cm up; 2 m covers air-launched horns.
    _o("antenna_height", "number", "height of the radar antennas above the ground, for slicer "
       "velocity's correction of ground coupling (0: on the ground; default no correction)",
       "m", 0, 2),
    _o("target_radius", "radii", "radius of round targets known from the site (pipes), for "
       "slicer velocity: R[+-S][@X1,Y1,X2,Y2...] in m, S its uncertainty (default R/10), the "
       "route (survey CRS) the fits within 0.5 m of which it is for; several as a list",
       "m"),
    # A survey pole or a cart mast holds a GNSS antenna 0.3-3 m up; 20 m covers any vehicle.
    _o("gnss_height", "number", "height of the GNSS antenna above the ground, subtracted "
       "from the track's heights (--terrain gnss)", "m", 0, 20),
    _o("datum", "text", "vertical datum the elevations refer to (e.g. 'EGM2008' or 'site "
       "benchmark BM1'), written into every output; slicer converts between none"),
    _o("scheduler", "text", "where to run: auto, threads, processes, local:N or "
       "tcp://HOST:PORT"),
    _o("memory_limit", "size", "memory budget of the build's working data, e.g. 1GB"),
    _o("formats", "formats", "outputs besides the overview (overview.png, or overview-01.png, "
       "... for more than 12 slices) and record.json, a comma list: "
       "'tif' (one Cloud Optimized GeoTIFF per slice, the default), 'zarr' (the cube as a "
       "chunked Zarr store, cube.zarr) and 'nc' (the cube as CF NetCDF-4, cube.nc)",
       words=("tif", "zarr", "nc")),
    _o("radargrams", "flag", "draw each processed line as a picture, radargrams/LINE.png, "
       "shown in viewer.html on a click (true/false, default true)"),
    _o("title", "text", "title of the overview sheet"),
    _o("colormap", "text", "colour map of the overview and sections: any matplotlib name "
       "(default viridis, or PuOr_r centred on zero for signed slices; gray for grey)"),
    _o("stretch", "choice", "colour range: 'shared' (one for all slices, so they compare) or "
       "'per-slice' (each its own, so faint slices show detail)", words=("shared", "per-slice")),
    _o("clip", "text", "percentiles LOW:HIGH of the values at the two ends of the colour map "
       "(default 2:98)"),
    _o("out", "path", "output folder"),
    _o("overwrite", "flag", "replace the outputs of an earlier build in the output folder "
       "(true/false)"),
)}
