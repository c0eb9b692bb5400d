"""The options of ``slicer build`` (and the display options ``slicer section`` shares).

Each flag is a key of :data:`slicer.pipeline.options.OPTIONS`, whose limits are appended to its
help; this module imports nothing heavy, so ``slicer --help`` stays quick.
"""

from __future__ import annotations

import argparse

#: Exit code of bad input (a usage error or any library error).
EXIT_BAD_INPUT = 2


def number_or_auto(text: str):
    return text if text in ("auto", "off") else float(text)


def number(text: str) -> float:
    """An option's number (argparse names this function in its message: "invalid number
    value")."""
    return float(text)


floats = number


def add_build_options(p: argparse.ArgumentParser) -> None:
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
    g.add_argument("--antenna-along", type=floats, metavar="M",
                   help="antenna centre this far ahead of the GNSS receiver (m, default 0)")
    g.add_argument("--antenna-across", type=floats, metavar="M",
                   help="antenna centre this far right of the GNSS receiver, facing the "
                        "direction of travel (m, default 0)")
    g.add_argument("--trace-spacing", type=floats, metavar="M",
                   help="resample every line to this even trace spacing after positioning")
    g.add_argument("--control-points", metavar="FILE",
                   help="CSV name,local_x,local_y,x,y: the line table is in local grid metres, "
                        "tied to the survey CRS by these points")
    g.add_argument("--control-fit", choices=("similarity", "affine"),
                   help="local grid to CRS fit: similarity (scale, rotation, shift; default) "
                        "or affine (6 parameters)")
    g.add_argument("--control-tolerance", type=floats, metavar="M",
                   help="refuse the fit if a control point misses by more (default 0.05 m)")
    g.add_argument("--sample-interval", type=floats, metavar="NS",
                   help="sample interval in ns (needed when the files cannot hold it)")
    g = p.add_argument_group("processing")
    g.add_argument("--time-zero", type=number_or_auto, metavar="NS|auto",
                   help="time zero in ns on the raw record, or 'auto' to pick the direct "
                        "wave's first peak on each line (default auto)")
    g.add_argument("--time-zero-threshold", type=floats, metavar="FRACTION",
                   help="fraction of the largest amplitude the direct wave reaches (default 0.5)")
    g.add_argument("--dewow", type=number_or_auto, metavar="NS|auto|off",
                   help="running-mean window removing wow (default auto: 1.5 dominant periods)")
    g.add_argument("--background", metavar="scaled|median|mean[:TOP-BOTTOM]|off",
                   help="background removal (default scaled: each line's median trace fitted "
                        "to every trace, so no ghost appears under a strong reflector); median "
                        "or mean subtract it whole (flat layers go too); ':TOP-BOTTOM' limits "
                        "it to that time window in ns, e.g. median:0-12 removes ringing and "
                        "keeps the layers below")
    g.add_argument("--antenna-separation", type=floats, metavar="M",
                   help="transmitter-receiver distance in m: a picked time zero is the direct "
                        "wave minus separation / c, and depths follow the bistatic path "
                        "(default 0)")
    g.add_argument("--attribute", choices=("envelope", "signed"),
                   help="slice values: envelope (default) or signed, the envelope with the "
                        "sign of each window's strongest reflection relative to the direct "
                        "wave (metal and wetter ground one way, voids and drier fill the "
                        "other)")
    g.add_argument("--zigzag-shift", type=number_or_auto, metavar="auto|M|off",
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
    v.add_argument("--velocity", type=floats, metavar="M_PER_NS",
                   help="radar velocity in the ground, m/ns (0 < v < 0.2998)")
    v.add_argument("--permittivity", type=floats, metavar="ER",
                   help="relative permittivity of the ground (v = c / sqrt(er))")
    v.add_argument("--velocity-model", metavar="FILE",
                   help="velocity-model TOML file: constant, layered (interval or RMS "
                        "velocities) or lateral (see README)")
    g.add_argument("--velocity-std", type=floats, metavar="M_PER_NS",
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
                   help="the ground's elevation: gnss (track heights less --gnss-height), "
                        "table (columns start_elevation, end_elevation) or a GeoTIFF")
    g.add_argument("--gnss-height", type=floats, metavar="M",
                   help="GNSS antenna height above the ground (--terrain gnss)")
    g.add_argument("--datum", metavar="NAME",
                   help="vertical datum of the elevations, e.g. EGM2008 (recorded, not converted)")
    g.add_argument("--thickness", type=floats, metavar="M|NS",
                   help="slice thickness (default: the step)")
    g.add_argument("--level", action="store_const", const=True, default=None,
                   help="remove line-to-line stripes from the slice values before gridding "
                        "(robust, against neighbouring lines; a feature along most of one "
                        "line can be taken for a stripe)")
    g.add_argument("--cell", type=floats, metavar="M",
                   help="grid cell in m (default: a round number near a quarter of the line "
                        "spacing)")
    g.add_argument("--radius", type=floats, metavar="M",
                   help="search radius in m: cells farther from any trace stay nodata, "
                        "unless between two lines at most --max-gap apart (default 0.75 x "
                        "line spacing)")
    g.add_argument("--max-gap", type=floats, metavar="M",
                   help="widest gap in m between parallel lines that is bridged by "
                        "interpolation; a wider gap (missing lines, two blocks) stays nodata "
                        "beyond --radius from the lines beside it (default 2.5 x line "
                        "spacing; 0 bridges nothing)")
    g = p.add_argument_group("engine")
    g.add_argument("--scheduler", metavar="auto|threads|processes|local:N|tcp://HOST:PORT",
                   help="where the work runs: auto (default: threads below 50 000 traces, "
                        "processes above; 300 000 where workers are spawned), dask threads, "
                        "dask processes, a LocalCluster of N workers, or an existing "
                        "dask.distributed cluster")
    g.add_argument("--memory-limit", metavar="SIZE",
                   help="memory budget of the build's working data, e.g. 2GB (default 1GiB); "
                        "a build that cannot fit is refused before it starts")
    g = p.add_argument_group("output")
    g.add_argument("--formats", metavar="tif,zarr,nc",
                   help="what to write besides the overview and record.json, a comma list: "
                        "tif (one Cloud Optimized GeoTIFF per slice, in slices/), zarr (the "
                        "cube as a chunked Zarr store, cube.zarr), nc (the cube as CF "
                        "NetCDF-4, cube.nc); default tif")
    g.add_argument("--radargrams", action=argparse.BooleanOptionalAction, default=None,
                   help="draw each processed line as radargrams/LINE.png, shown in viewer.html "
                        "on a click (default on)")
    g.add_argument("--title", help="title of the overview sheet")
    add_display_options(g)
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


def add_display_options(g) -> None:
    """``--colormap``, ``--stretch`` and ``--clip`` (see :mod:`slicer.outputs.display`)."""
    g.add_argument("--colormap", metavar="NAME",
                   help="colour map of the overview or section: any matplotlib name "
                        "(default viridis; signed slices PuOr_r centred on zero; gray for "
                        "greyscale)")
    g.add_argument("--stretch", choices=("shared", "per-slice"),
                   help="one colour range for all slices, so they compare (shared, default), "
                        "or each slice its own, so faint slices show detail (per-slice)")
    g.add_argument("--clip", metavar="LOW:HIGH",
                   help="percentiles of the values at the two ends of the colour map "
                        "(default 2:98)")
