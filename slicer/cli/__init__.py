"""The ``slicer`` command line: a thin layer over the library.

Options are parsed into one :class:`~slicer.BuildSettings`; the library's one exception family
(:class:`~slicer.SlicerError`) becomes one line on stderr and exit code 2.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import warnings
from pathlib import Path

from slicer.cli.build_options import (
    EXIT_BAD_INPUT,
    add_build_options,
    add_display_options,
    floats,
    number_or_auto,
)
from slicer.core.errors import SlicerError, SlicerWarning


class _Parser(argparse.ArgumentParser):
    """argparse that reports a usage error in one line (and exit code 2), and takes only whole
    option names (``--over`` is not ``--overwrite``)."""

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("allow_abbrev", False)
        super().__init__(*args, **kwargs)

    def error(self, message):  # noqa: D102 - argparse API
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see --help)\n")


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
    add_build_options(b)
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
    ve.add_argument("--sample-interval", type=floats, metavar="NS",
                    help="sample interval in ns, when the files cannot hold it")
    ve.add_argument("--time-zero", type=number_or_auto, metavar="NS|auto",
                    help="time zero in ns on the raw record, or auto (default)")
    ve.add_argument("--positions", choices=("table", "headers", "track"),
                    help="trace positions from the line table (default), the trace headers or "
                         "each row's GNSS track (see slicer build --help)")
    ve.add_argument("--crs", help="CRS of the line coordinates")
    ve.add_argument("--antenna-separation", type=floats, metavar="M",
                    help="transmitter-receiver distance in m: time zero is the direct wave "
                         "minus separation / c and the hyperbolas are fitted with the "
                         "bistatic path (default 0)")
    ve.add_argument("--antenna-height", type=floats, metavar="M",
                    help="height of the radar antennas above the ground (0: on it): the picks "
                         "are corrected for the ground coupling that makes straight "
                         "hyperbolas read fast (default: no correction; slower)")
    ve.add_argument("--target-radius", action="append", metavar="R[+-S][@X1,Y1,X2,Y2...]",
                    help="radius in m of round targets (pipes) known from the site, with its "
                         "uncertainty S (default a tenth of R): their hyperbolas are fitted "
                         "as round targets of that radius instead of points, which read fast "
                         "by about sqrt(c / (c - R)) for the centre at depth c; with @ and a "
                         "route (x,y pairs in the survey CRS) only for the fits within 0.5 m "
                         "of it; repeat for several targets (one without a route at most)")
    ve.add_argument("--earliest", type=floats, metavar="NS",
                    help="earliest apex time searched, ns after time zero (default two periods "
                         "of the dominant frequency, below the direct wave's remains): lower it "
                         "for targets just under the surface, such as rebar at a few cm cover")
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
    pl.add_argument("--frequency", type=floats, required=True, metavar="MHZ",
                    help="antenna centre frequency, MHz")
    pv = pl.add_mutually_exclusive_group(required=True)
    pv.add_argument("--permittivity", type=floats, metavar="ER",
                    help="relative permittivity of the ground")
    pv.add_argument("--velocity", type=floats, metavar="M_PER_NS",
                    help="radar velocity in the ground, m/ns")
    pl.add_argument("--conductivity", type=floats, default=0.0, metavar="MS_PER_M",
                    help="electrical conductivity of the ground, mS/m (default 0)")
    pl.add_argument("--target-depth", type=floats, required=True, metavar="M",
                    help="depth of the deepest target, m")
    pl.add_argument("--target-size", type=floats, metavar="M",
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
                       "stand out of their slice (robust deviations above its median) and are "
                       "not the echo of a stronger reflector, as one polygon layer per slice "
                       "patch ('outlines') and one of 3-D bodies ('bodies') in a GeoPackage in "
                       "the survey CRS.")
    o.add_argument("build", metavar="OUT", help="folder of an earlier slicer build")
    o.add_argument("--out", metavar="FILE.gpkg", required=True, help="GeoPackage to write")
    o.add_argument("--threshold", type=floats, default=3.0, metavar="K",
                   help="robust standard deviations above the slice median (default 3)")
    o.add_argument("--min-area", type=floats, metavar="M2",
                   help="smallest outline kept, m2 (default four cells)")
    o.add_argument("--fraction", type=floats, default=0.4, metavar="F",
                   help="share of the strongest anomaly whose echo can reach a cell that the "
                        "cell must reach (0: off; default 0.4)")
    o.add_argument("--floor", type=floats, default=0.02, metavar="F",
                   help="share of the survey's strongest anomaly a cell must reach (0: off; "
                        "default 0.02)")
    o.add_argument("--overwrite", action="store_true", help="replace an existing FILE.gpkg")

    se = sub.add_parser("section", help="a vertical section through a build's cube",
                        description="Cut the cube of the build in OUT along a path through "
                        "two or more points (survey CRS, m) and draw distance against depth.")
    se.add_argument("build", metavar="OUT", help="folder of an earlier slicer build")
    se.add_argument("--through", nargs="+", required=True, metavar="X,Y",
                    help="the path's points in the survey CRS, m (two or more)")
    se.add_argument("--spacing", type=floats, metavar="M",
                    help="distance between samples along the path (default: the cell)")
    se.add_argument("--out", metavar="FILE.png", required=True, help="figure to write")
    se.add_argument("--overwrite", action="store_true", help="replace an existing FILE.png")
    add_display_options(se)
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
    pages = sorted(Path(out).glob("overview*.png")) or [Path(out) / "overview.png"]
    more = f" ({len(pages)} pages)" if len(pages) > 1 else ""
    return (f"viewer: {Path(out) / 'viewer.html'} (open in a browser); overview: "
            f"{pages[0]}{more}")


def _run_view(args) -> int:
    from slicer.pipeline.view import write_build_viewer

    print(f"wrote {write_build_viewer(args.build)}")
    return 0


def _run_velocity(args) -> int:
    import json

    from slicer.core.atomic import prepare_output_dir
    from slicer.pipeline.settings import load_settings
    from slicer.pipeline.velocity_survey import analyse_velocity, write_velocity_outputs
    from slicer.velocity.targets import parse_target_radius

    settings = load_settings(args.survey, sample_interval=args.sample_interval,
                             time_zero=args.time_zero, positions=args.positions, crs=args.crs,
                             antenna_separation=args.antenna_separation,
                             antenna_height=args.antenna_height,
                             target_radius=args.target_radius)
    targets = [parse_target_radius(text) for text in settings.target_radius or ()]
    figures = None
    if args.out:
        prepare_output_dir(args.out, overwrite=args.overwrite, create=False)
        figures = Path(args.out) / "figures"
    analysis = analyse_velocity(settings, progress=not args.quiet, figures=figures,
                                antenna_height=settings.antenna_height,
                                target_radius=targets or None, earliest=args.earliest)
    if args.out:
        write_velocity_outputs(analysis, args.out, overwrite=True)
    if settings.antenna_height is None:  # on stderr: --json keeps stdout for the JSON
        print(UNCOUPLED_NOTE, file=sys.stderr)
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


#: Said after a velocity found without the correction for ground-coupled antennas (README,
#: "Antennas on or near the ground": full-wave surveys read 10-17 % fast without it).
UNCOUPLED_NOTE = ("slicer velocity: note: no correction for antennas coupled to the ground "
                  "(--antenna-height not given); on ground-coupled data straight hyperbolas "
                  "read fast, 10-17 % on full-wave simulations: give the antennas' height above "
                  "the ground (0 on it) if they were not held well above it")


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
                                    min_area=args.min_area, fraction=args.fraction,
                                    floor=args.floor, overwrite=args.overwrite))
    else:
        points = [results.parse_point(t) for t in args.through]
        from slicer.outputs.display import parse_display
        display = parse_display(colormap=args.colormap, stretch=args.stretch, clip=args.clip)
        print(results.section_build(args.build, points, args.out, spacing=args.spacing,
                                    overwrite=args.overwrite, display=display))
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
        out = getattr(args, "out", None)
        if out is not None and not os.path.lexists(out):  # a first build: nothing to keep
            print("slicer: interrupted; nothing was written", file=sys.stderr)
        else:
            print("slicer: interrupted; the output folder holds a whole build (the earlier "
                  "one, or this one if it was already switched in)", file=sys.stderr)
        return 130
    finally:
        warnings.showwarning = _default_showwarning


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
