"""The ``slicer`` command line: a thin layer over the library.

Options are parsed into one :class:`~slicer.BuildSettings`; the library's one exception family
(:class:`~slicer.SlicerError`) becomes one line on stderr and exit code 2.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

from slicer.core.errors import SlicerError, SlicerWarning

EXIT_BAD_INPUT = 2


class _Parser(argparse.ArgumentParser):
    """argparse that reports a usage error in one line (and exit code 2), and takes only whole
    option names (``--over`` is not ``--overwrite``)."""

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("allow_abbrev", False)
        super().__init__(*args, **kwargs)

    def error(self, message):  # noqa: D102 - argparse API
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see --help)\n")


def _number_or_auto(text: str):
    return text if text in ("auto", "off") else float(text)


def _float(text: str) -> float:
    return float(text)


def _add_build_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("survey")
    g.add_argument("--crs", help="CRS of the line coordinates, e.g. EPSG:32633 (projected, m)")
    g.add_argument("--positions", choices=("table", "headers", "track"),
                   help="trace positions: 'table' spaces them evenly from each line's start to "
                        "its end, or between the distance marks of a marks column (default); "
                        "'headers' takes the files' trace-header coordinates (SEG-Y CDP or "
                        "source X/Y with the coordinate scalar), in the survey CRS, and the "
                        "line table then needs only its file column; 'track' interpolates each "
                        "row's GNSS track file (column track). A positions column sets it per "
                        "line")
    g.add_argument("--track-crs", metavar="CRS",
                   help="CRS of the GNSS fixes (default EPSG:4326, longitude/latitude)")
    g.add_argument("--antenna-along", type=_float, metavar="M",
                   help="antenna centre this far ahead of the GNSS receiver (m, default 0)")
    g.add_argument("--antenna-across", type=_float, metavar="M",
                   help="antenna centre this far right of the GNSS receiver, facing the "
                        "direction of travel (m, default 0)")
    g.add_argument("--trace-spacing", type=_float, metavar="M",
                   help="resample every line to this even trace spacing after positioning")
    g.add_argument("--control-points", metavar="FILE",
                   help="CSV name,local_x,local_y,x,y: the line table is in local grid metres, "
                        "tied to the survey CRS by these points")
    g.add_argument("--control-fit", choices=("similarity", "affine"),
                   help="local grid to CRS fit: similarity (scale, rotation, shift; default) "
                        "or affine (6 parameters)")
    g.add_argument("--control-tolerance", type=_float, metavar="M",
                   help="refuse the fit if a control point misses by more (default 0.05 m)")
    g.add_argument("--sample-interval", type=_float, metavar="NS",
                   help="sample interval in ns (needed when the files cannot hold it)")
    g = p.add_argument_group("processing")
    g.add_argument("--time-zero", type=_number_or_auto, metavar="NS|auto",
                   help="time zero in ns on the raw record, or 'auto' to pick the direct "
                        "wave's first peak on each line (default auto)")
    g.add_argument("--time-zero-threshold", type=_float, metavar="FRACTION",
                   help="fraction of the largest amplitude the direct wave reaches (default 0.5)")
    g.add_argument("--dewow", type=_number_or_auto, metavar="NS|auto|off",
                   help="running-mean window removing wow (default auto: 1.5 dominant periods)")
    g.add_argument("--background", metavar="scaled|median|mean[:TOP-BOTTOM]|off",
                   help="background removal (default scaled: each line's median trace fitted "
                        "to every trace, so no ghost appears under a strong reflector); median "
                        "or mean subtract it whole (flat layers go too); ':TOP-BOTTOM' limits "
                        "it to that time window in ns, e.g. median:0-12 removes ringing and "
                        "keeps the layers below")
    g.add_argument("--antenna-separation", type=_float, metavar="M",
                   help="transmitter-receiver distance in m: a picked time zero is the direct "
                        "wave minus separation / c, and depths follow the bistatic path "
                        "(default 0)")
    g.add_argument("--attribute", choices=("envelope", "signed"),
                   help="slice values: envelope (default) or signed, the envelope with the "
                        "sign of each window's strongest reflection relative to the direct "
                        "wave (metal and wetter ground one way, voids and drier fill the "
                        "other)")
    g.add_argument("--zigzag-shift", type=_number_or_auto, metavar="auto|M|off",
                   help="along-line lag of lines walked both ways: auto estimates it from "
                        "neighbouring lines walked the other way; a number moves every trace "
                        "that far (m) along its line's direction of travel (default off)")
    g.add_argument("--migrate", choices=("auto", "off", "stolt", "phase-shift"),
                   help="2-D migration of each line before the envelope: stolt (f-k, one "
                        "velocity; Stolt 1978) or phase-shift (layered velocity; Gazdag 1978); "
                        "default auto: depth slices are migrated (stolt for one velocity, "
                        "phase-shift for layers), time slices and lateral models are not")
    g.add_argument("--ties", choices=("off", "report", "apply"),
                   help="ties where lines cross: 'report' measures the time shift and "
                        "amplitude ratio at every crossing and reports the misfit; 'apply' "
                        "also corrects each line's time zero and gain (least squares over the "
                        "network); default off")
    g.add_argument("--gain", metavar="power:P|exp:DB_PER_NS|none",
                   help="gain against time below time zero (default power:1, t^1)")
    g = p.add_argument_group("velocity")
    v = g.add_mutually_exclusive_group()
    v.add_argument("--velocity", type=_float, metavar="M_PER_NS",
                   help="radar velocity in the ground, m/ns (0 < v < 0.2998)")
    v.add_argument("--permittivity", type=_float, metavar="ER",
                   help="relative permittivity of the ground (v = c / sqrt(er))")
    v.add_argument("--velocity-model", metavar="FILE",
                   help="velocity-model TOML file: constant, layered (interval or RMS "
                        "velocities) or lateral (see README)")
    g.add_argument("--velocity-std", type=_float, metavar="M_PER_NS",
                   help="one-sigma uncertainty of --velocity, for each slice's depth error")
    g = p.add_argument_group("slices and grid")
    s = g.add_mutually_exclusive_group()
    s.add_argument("--depths", metavar="TOP:BOTTOM:STEP",
                   help="depth slices in m below the surface (needs a velocity)")
    s.add_argument("--times", metavar="TOP:BOTTOM:STEP",
                   help="time slices in ns below time zero")
    s.add_argument("--elevations", metavar="TOP:BOTTOM:STEP",
                   help="elevation slices in m above --datum, TOP the higher (implies "
                        "--slices elevation)")
    g.add_argument("--slices", choices=("depth", "elevation"),
                   help="depth below the ground (default) or elevation: level slices above "
                        "--datum, each trace cut below its own ground (needs --terrain)")
    g.add_argument("--terrain", metavar="gnss|table|DEM.tif",
                   help="the ground's elevation: gnss (track heights less --antenna-height), "
                        "table (columns start_elevation, end_elevation) or a GeoTIFF")
    g.add_argument("--antenna-height", type=_float, metavar="M",
                   help="GNSS antenna height above the ground (--terrain gnss)")
    g.add_argument("--datum", metavar="NAME",
                   help="vertical datum of the elevations, e.g. EGM2008 (recorded, not converted)")
    g.add_argument("--thickness", type=_float, metavar="M|NS",
                   help="slice thickness (default: the step)")
    g.add_argument("--level", action="store_const", const=True, default=None,
                   help="remove line-to-line stripes from the slice values before gridding "
                        "(robust, against neighbouring lines; a feature along most of one "
                        "line can be taken for a stripe)")
    g.add_argument("--cell", type=_float, metavar="M",
                   help="grid cell in m (default: a round number near a quarter of the line "
                        "spacing)")
    g.add_argument("--radius", type=_float, metavar="M",
                   help="search radius in m: cells farther from any trace stay nodata, "
                        "unless between two lines at most --max-gap apart (default 0.75 x "
                        "line spacing)")
    g.add_argument("--max-gap", type=_float, metavar="M",
                   help="widest gap in m between parallel lines that is bridged by "
                        "interpolation; a wider gap (missing lines, two blocks) stays nodata "
                        "beyond --radius from the lines beside it (default 2.5 x line "
                        "spacing; 0 bridges nothing)")
    g = p.add_argument_group("engine")
    g.add_argument("--scheduler", metavar="auto|threads|processes|local:N|tcp://HOST:PORT",
                   help="where the work runs: auto (default: threads below 300 000 traces, "
                        "processes above), dask threads, dask processes, a LocalCluster of N "
                        "workers, or an existing dask.distributed cluster")
    g.add_argument("--memory-limit", metavar="SIZE",
                   help="memory budget of the build's working data, e.g. 2GB (default 1GiB); "
                        "a build that cannot fit is refused before it starts")
    g = p.add_argument_group("output")
    g.add_argument("--formats", metavar="tif,zarr,nc",
                   help="what to write besides overview.png and record.json, a comma list: "
                        "tif (one Cloud Optimized GeoTIFF per slice, in slices/), zarr (the "
                        "cube as a chunked Zarr store, cube.zarr), nc (the cube as CF "
                        "NetCDF-4, cube.nc); default tif")
    g.add_argument("--radargrams", action=argparse.BooleanOptionalAction, default=None,
                   help="draw each processed line as radargrams/LINE.png, shown in viewer.html "
                        "on a click (default on)")
    g.add_argument("--title", help="title of the overview sheet")
    g.add_argument("--overwrite", action="store_const", const=True, default=None,
                   help="replace the outputs of an earlier build in a non-empty --out folder")
    _state_limits(p)


def _state_limits(parser: argparse.ArgumentParser) -> None:
    """Append each number option's accepted range (from the one table of options) to its help."""
    from slicer.pipeline.options import OPTIONS

    for action in parser._actions:
        option = OPTIONS.get(action.dest)
        if option is not None and option.limits and action.help:
            action.help += f" [{option.limits}]"


def make_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``slicer`` command."""
    from slicer import __version__

    parser = _Parser(prog="slicer", description="Ground-penetrating-radar grid surveys to "
                     "georeferenced plan-view depth slices (GeoTIFF, CF NetCDF, overview).")
    parser.add_argument("--version", action="version", version=f"slicer {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    b = sub.add_parser("build", help="build slices from a line table or TOML survey file",
                       description="Read the lines of a survey, process them, grid them and "
                       "write depth (or time) slices as GeoTIFFs, a CF NetCDF cube, an overview "
                       "sheet and a record of the build. Options override a TOML survey file.")
    b.add_argument("survey", metavar="LINES.csv|SURVEY.toml", nargs="?",
                   help="line table (file,start_x,start_y,end_x,end_y) or TOML survey file")
    b.add_argument("--repeat", metavar="RECORD",
                   help="build again from an earlier build's record.json (instead of a survey "
                        "file): its settings, with its inputs checked unchanged; options given "
                        "override the recorded ones. Writes to a new folder beside the earlier "
                        "build unless --out is given")
    _add_build_options(b)
    b.add_argument("--out", metavar="DIR", help="output folder (must be empty or new, unless "
                   "--overwrite); required unless the survey file sets it (with --repeat: "
                   "default a new DIR-repeat-N beside the repeated build)")
    b.add_argument("-q", "--quiet", action="store_true", help="no progress bars or summary")

    ve = sub.add_parser("velocity", help="ground velocity from diffraction hyperbolas",
                        description="Find and fit the diffraction hyperbolas of every line "
                        "(least squares of t(x) = (2/v) sqrt(z0^2 + (x - x0)^2)), print the "
                        "fits and a survey-wide velocity robust to outliers and to linear "
                        "targets crossed obliquely. With --out, write velocity.toml (for "
                        "slicer build --velocity-model) and one figure per line.")
    ve.add_argument("survey", metavar="LINES.csv|SURVEY.toml")
    ve.add_argument("--sample-interval", type=_float, metavar="NS",
                    help="sample interval in ns, when the files cannot hold it")
    ve.add_argument("--time-zero", type=_number_or_auto, metavar="NS|auto",
                    help="time zero in ns on the raw record, or auto (default)")
    ve.add_argument("--positions", choices=("table", "headers", "track"),
                    help="trace positions from the line table (default), the trace headers or "
                         "each row's GNSS track (see slicer build --help)")
    ve.add_argument("--crs", help="CRS of the line coordinates")
    ve.add_argument("--antenna-separation", type=_float, metavar="M",
                    help="transmitter-receiver distance in m: time zero is the direct wave "
                         "minus separation / c and the hyperbolas are fitted with the "
                         "bistatic path (default 0)")
    ve.add_argument("--out", metavar="DIR", help="write velocity.toml and figures/ here")
    ve.add_argument("--overwrite", action="store_true", help="allow a non-empty --out")
    ve.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    ve.add_argument("-q", "--quiet", action="store_true", help="no progress bar")

    pl = sub.add_parser("plan", help="survey design numbers for an antenna and ground",
                        description="Wavelength, vertical resolution, antenna footprint and "
                        "Fresnel zone at the target depth, the largest trace spacing, a line "
                        "spacing, the time window and sample interval to record, and the "
                        "expected attenuation. Sources: wavelength lambda = v / f; resolution "
                        "lambda / 4 (common practice, Jol (ed.) 2009); footprint A = lambda / 4 "
                        "+ d / sqrt(er - 1) (Annan 1996, in Martinez & Byrnes 2001, KGS "
                        "Bulletin 247); Fresnel radius sqrt(lambda z / 2 + lambda^2 / 16) "
                        "(Sheriff & Geldart 1995); trace spacing lambda / 4, sample interval "
                        "1 / (6 f), time window 1.3 x 2 d / v and low-loss attenuation 1636 "
                        "sigma / sqrt(er) dB/m (Annan 2009, in Jol (ed.) 2009), with the exact "
                        "lossy-medium value beside it.")
    pl.add_argument("--frequency", type=_float, required=True, metavar="MHZ",
                    help="antenna centre frequency, MHz")
    pv = pl.add_mutually_exclusive_group(required=True)
    pv.add_argument("--permittivity", type=_float, metavar="ER",
                    help="relative permittivity of the ground")
    pv.add_argument("--velocity", type=_float, metavar="M_PER_NS",
                    help="radar velocity in the ground, m/ns")
    pl.add_argument("--conductivity", type=_float, default=0.0, metavar="MS_PER_M",
                    help="electrical conductivity of the ground, mS/m (default 0)")
    pl.add_argument("--target-depth", type=_float, required=True, metavar="M",
                    help="depth of the deepest target, m")
    pl.add_argument("--target-size", type=_float, metavar="M",
                    help="plan size of the smallest target, m")
    pl.add_argument("--json", action="store_true", help="print one JSON object")

    d = sub.add_parser("demo", help="write the invented demo survey and build it",
                       description="Write the project's invented demo survey (synthetic lines "
                       "over buried footings, a drain and scattered stones) to DIR/survey, then "
                       "build its depth slices into DIR/build.")
    d.add_argument("--out", metavar="DIR", required=True, help="folder for survey and build")
    d.add_argument("--format", choices=("segy", "netcdf"), default="segy",
                   help="file format of the demo lines (default segy)")
    d.add_argument("--overwrite", action="store_true", help="replace an earlier demo in DIR")
    d.add_argument("-q", "--quiet", action="store_true", help="no progress bars or summary")

    vw = sub.add_parser("view", help="write a build's viewer page again",
                        description="Write OUT/viewer.html of the build in OUT again from its "
                        "cube, its record and its radargrams: the slices one at a time, the "
                        "values under the cursor and each line's radargram on a click, in one "
                        "file any browser opens.")
    vw.add_argument("build", metavar="OUT", help="folder of an earlier slicer build")

    o = sub.add_parser("outline", help="anomaly outlines of a build as GeoPackage layers",
                       description="Outline the cells of every slice of the build in OUT that "
                       "stand out of their slice (robust deviations above its median), as one "
                       "polygon layer per slice patch ('outlines') and one of 3-D bodies "
                       "('bodies') in a GeoPackage in the survey CRS.")
    o.add_argument("build", metavar="OUT", help="folder of an earlier slicer build")
    o.add_argument("--out", metavar="FILE.gpkg", required=True, help="GeoPackage to write")
    o.add_argument("--threshold", type=_float, default=3.0, metavar="K",
                   help="robust standard deviations above the slice median (default 3)")
    o.add_argument("--min-area", type=_float, metavar="M2",
                   help="smallest outline kept, m2 (default four cells)")
    o.add_argument("--overwrite", action="store_true", help="replace an existing FILE.gpkg")

    se = sub.add_parser("section", help="a vertical section through a build's cube",
                        description="Cut the cube of the build in OUT along a path through "
                        "two or more points (survey CRS, m) and draw distance against depth.")
    se.add_argument("build", metavar="OUT", help="folder of an earlier slicer build")
    se.add_argument("--through", nargs="+", required=True, metavar="X,Y",
                    help="the path's points in the survey CRS, m (two or more)")
    se.add_argument("--spacing", type=_float, metavar="M",
                    help="distance between samples along the path (default: the cell)")
    se.add_argument("--out", metavar="FILE.png", required=True, help="figure to write")
    se.add_argument("--overwrite", action="store_true", help="replace an existing FILE.png")
    return parser


def _settings_from_args(args) -> dict:
    from slicer.pipeline.settings import OPTION_KEYS

    return {k: getattr(args, k, None) for k in OPTION_KEYS}


def _summary(result, elapsed: float) -> str:
    rec = result.record
    grid = rec["grid"]
    sl = rec["slices"]
    text = (f"{rec['survey']['lines']} lines, {rec['survey']['traces']} traces -> "
            f"{len(sl['top'])} {sl['axis']} slices on {grid['nx']} x {grid['ny']} cells of "
            f"{grid['cell']:g} m in {elapsed:.1f} s")
    zigzag = rec.get("zigzag")
    if zigzag:
        how = (f"estimated from {zigzag['lines']} lines, +-{zigzag['spread_m']} m"
               if zigzag["estimated"] else "as given")
        text += f"; zigzag shift {zigzag['shift_m']:.3f} m ({how})"
    ties = rec.get("ties")
    if ties and ties.get("ties_used"):
        after = "corrected" if ties["applied"] else "if corrected"
        text += (f"; ties at {ties['ties_used']} crossings: time misfit "
                 f"{ties['misfit_before_ns']:.3f} ns, {ties['misfit_after_ns']:.3f} ns {after}")
    return text


def _run_build(args, argv) -> int:
    from slicer.pipeline.build import build
    from slicer.pipeline.settings import load_settings

    started = time.perf_counter()
    command = ["slicer", *argv]
    if args.repeat is not None:
        from slicer.pipeline.repeat import repeat_build

        result = repeat_build(args.repeat, progress=not args.quiet, command=command,
                              **_settings_from_args(args))
        out = result.files[-1].parent
    else:
        settings = load_settings(args.survey, **_settings_from_args(args))
        if settings.out is None:
            raise SlicerError("no output folder: give --out DIR", where="--out")
        result = build(settings, progress=not args.quiet, command=command)
        out = settings.out
    if not args.quiet:
        print(f"{_summary(result, time.perf_counter() - started)}; wrote {out}\n{_to_look(out)}")
    return 0


def _run_demo(args) -> int:
    from slicer.pipeline.demo import run_demo

    started = time.perf_counter()
    result = run_demo(args.out, format=args.format, overwrite=args.overwrite,
                      progress=not args.quiet)
    if not args.quiet:
        print(f"demo survey in {Path(args.out) / 'survey'}; "
              f"{_summary(result, time.perf_counter() - started)}; "
              f"wrote {Path(args.out) / 'build'}\n{_to_look(Path(args.out) / 'build')}")
    return 0


def _to_look(out) -> str:
    return (f"viewer: {Path(out) / 'viewer.html'} (open in a browser); overview: "
            f"{Path(out) / 'overview.png'}")


def _run_view(args) -> int:
    from slicer.pipeline.view import write_build_viewer

    print(f"wrote {write_build_viewer(args.build)}")
    return 0


def _run_velocity(args) -> int:
    import json

    from slicer.core.atomic import prepare_output_dir
    from slicer.pipeline.settings import load_settings
    from slicer.pipeline.velocity_survey import analyse_velocity, write_velocity_outputs

    settings = load_settings(args.survey, sample_interval=args.sample_interval,
                             time_zero=args.time_zero, positions=args.positions, crs=args.crs,
                             antenna_separation=args.antenna_separation)
    figures = None
    if args.out:
        prepare_output_dir(args.out, overwrite=args.overwrite, create=False)
        figures = Path(args.out) / "figures"
    analysis = analyse_velocity(settings, progress=not args.quiet, figures=figures)
    if args.out:
        write_velocity_outputs(analysis, args.out, overwrite=True)
    if args.json:
        print(json.dumps(analysis.to_json(), indent=2))
        return 0
    print(f"{'line':<10} {'x':>12} {'y':>13} {'time ns':>8} {'v m/ns':>7} {'+-':>6}  kept")
    for f in analysis.to_json()["fits"]:
        print(f"{f['line']:<10} {f['x']:12.2f} {f['y']:13.2f} {f['time']:8.2f} "
              f"{f['velocity']:7.4f} {f['velocity_std']:6.4f}  {'yes' if f['kept'] else 'no'}")
    print(f"survey velocity {analysis.velocity:.4f} +- {analysis.velocity_std:.4f} m/ns from "
          f"{len(analysis.kept)} of {len(analysis.fits)} hyperbolas")
    return 0


def _run_plan(args) -> int:
    import json

    from slicer.velocity.planning import plan_survey

    plan = plan_survey(frequency_mhz=args.frequency, permittivity=args.permittivity,
                       velocity=args.velocity, conductivity_ms_per_m=args.conductivity,
                       target_depth_m=args.target_depth, target_size_m=args.target_size)
    rows = plan.as_table()
    if args.json:
        print(json.dumps({"quantities": [
            {"quantity": q, "value": v, "unit": u, "source": src} for q, v, u, src in rows],
            "warnings": list(plan.warnings)}, indent=2))
        return 0
    width = max(len(q) for q, *_ in rows)
    for quantity, value, unit, source in rows:
        print(f"{quantity:<{width}}  {value:>10.4g} {unit:<6}  {source}")
    for message in plan.warnings:
        print(f"slicer: warning: {message}", file=sys.stderr)
    return 0


def _run_map(args) -> int:
    from slicer.pipeline import results
    if args.command == "outline":
        print(results.outline_build(args.build, args.out, threshold=args.threshold,
                                    min_area=args.min_area, overwrite=args.overwrite))
    else:
        points = [results.parse_point(t) for t in args.through]
        print(results.section_build(args.build, points, args.out, spacing=args.spacing,
                                    overwrite=args.overwrite))
    return 0


def _show_warning(message, category, filename, lineno, file=None, line=None):
    if issubclass(category, SlicerWarning):
        print(f"slicer: warning: {message}", file=sys.stderr)
    else:
        _default_showwarning(message, category, filename, lineno, file, line)


_default_showwarning = warnings.showwarning


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``slicer`` command; returns the exit code."""
    argv = sys.argv[1:] if argv is None else list(argv)
    parser = make_parser()
    try:
        args = parser.parse_args(argv)
        if args.command == "build" and (args.survey is None) == (args.repeat is None):
            parser.error("slicer build: the following arguments are required: "
                         "LINES.csv|SURVEY.toml, or --repeat RECORD (not both)")
    except KeyboardInterrupt:
        print("slicer: interrupted before it started; nothing was written", file=sys.stderr)
        return 130
    warnings.showwarning = _show_warning
    try:
        if args.command == "build":
            return _run_build(args, argv)
        if args.command == "plan":
            return _run_plan(args)
        if args.command == "velocity":
            return _run_velocity(args)
        if args.command in ("outline", "section"):
            return _run_map(args)
        if args.command == "view":
            return _run_view(args)
        return _run_demo(args)
    except SlicerError as exc:
        print(f"slicer: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OSError as exc:  # disk full, permissions: the system's words, one line
        name = f"{exc.filename}: " if exc.filename else ""
        print(f"slicer: error: {name}{exc.strerror or exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("slicer: interrupted; the output folder holds a whole build (the earlier one, or "
              "this one if it was already switched in)", file=sys.stderr)
        return 130
    finally:
        warnings.showwarning = _default_showwarning


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
