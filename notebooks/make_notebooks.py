"""Build the project's notebooks from the cell sources below, without outputs.

The ``.ipynb`` files are generated so that their source can be reviewed here as plain Python
and so that a committed notebook never carries outputs. Cell ids are fixed, so running this
script twice gives the same bytes; ``tests/test_notebooks.py`` checks that the committed files
equal what this script makes.

    python notebooks/make_notebooks.py          # (re)write every notebook next to this script
    python notebooks/make_notebooks.py --check  # exit 1 if a committed notebook differs
"""

from __future__ import annotations

import argparse
import sys
import textwrap
from pathlib import Path

import nbformat
from nbformat.v4 import new_code_cell, new_markdown_cell, new_notebook

HERE = Path(__file__).resolve().parent

#: Metadata tag of a code cell that must draw at least one figure when it runs.
FIGURE_TAG = "figure"


def _md(text: str) -> tuple[str, str, tuple[str, ...]]:
    return ("markdown", text, ())


def _code(text: str, *tags: str) -> tuple[str, str, tuple[str, ...]]:
    return ("code", text, tags)


def _figure(text: str) -> tuple[str, str, tuple[str, ...]]:
    return _code(text, FIGURE_TAG)


LINES_TO_SLICES = [
    _md("""
        # From survey lines to depth slices

        This notebook walks through slicer's Python API on the invented demo survey that
        `slicer.synthetic` writes: a 20 m x 14 m grid over the stone footings of a small
        outbuilding, a hearth slab, rubble, a field drain, a flat soil boundary and a few
        isolated stones and boulders, surveyed with 29 west-east lines 0.5 m apart. Because
        the ground is invented, its truth is known and every result below can be compared
        with it.

        Everything is written into a new temporary folder; nothing is written next to this
        notebook. The whole notebook runs in well under a minute on a laptop.

        Conventions (see the glossary in `DEVELOPERS.md`): `twt` is two-way travel time in ns,
        0 at time zero after correction; `depth` is in m, positive down; `x`, `y` are easting
        and northing in the survey CRS, in m; `distance` is the distance along a line from its
        start, in m.
        """),
    _code("""
        %matplotlib inline
        import json
        import shutil
        import tempfile
        from pathlib import Path

        import matplotlib.pyplot as plt
        import numpy as np
        import rasterio
        import xarray as xr
        from IPython.display import Image

        import slicer
        from slicer.synthetic import demo_survey, write_survey

        work = Path(tempfile.mkdtemp(prefix="slicer-notebook-"))
        print("slicer", slicer.__version__, "working in", work)
        """),
    _md("""
        ## 1. The demo survey

        `demo_survey()` returns the invented ground (velocity, attenuation, targets, a layer),
        the radar (400 MHz, 0.1 ns samples, 512 samples, time zero at 3.0 ns) and the planned
        lines; `write_survey` simulates every line and writes one SEG-Y file per line, the
        line table `lines.csv` and the ground truth `truth.json`.
        """),
    _code("""
        ground, radar, lines, crs = demo_survey()
        survey = write_survey(work / "survey", ground, radar, lines, crs=crs, progress=False)
        print(len(survey.files), "line files, CRS", survey.crs)
        print()
        print("\\n".join(survey.line_table.read_text().splitlines()[:6]))
        """),
    _md("""
        The line table names each line's file and the ground positions of its first and last
        traces; traces are spaced evenly between them. Every other line runs backwards
        (zigzag). The truth lists every target; positions are shown here relative to the
        south-west corner of the survey.
        """),
    _code("""
        truth = json.loads(survey.truth_file.read_text())
        west = min(min(line.start_x, line.end_x) for line in lines)
        south = min(min(line.start_y, line.end_y) for line in lines)
        print(f"velocity {truth['velocity_m_per_ns']} m/ns, "
              f"time zero {truth['time_zero_ns']} ns, "
              f"sample interval {truth['sample_interval_ns']} ns")
        for t in truth["targets"]:
            if t["kind"] == "point":
                where = f"({t['x'] - west:5.2f}, {t['y'] - south:5.2f})"
            elif t["kind"] == "line":
                where = (f"({t['x0'] - west:5.2f}, {t['y0'] - south:5.2f}) to "
                         f"({t['x1'] - west:5.2f}, {t['y1'] - south:5.2f})")
            else:
                where = (f"({t['xmin'] - west:5.2f}, {t['ymin'] - south:5.2f}) to "
                         f"({t['xmax'] - west:5.2f}, {t['ymax'] - south:5.2f})")
            print(f"{t['kind']:6s} depth {t['depth']:.2f} m  at {where} m")
        """),
    _md("""
        ## 2. One line, step by step

        `read_line_table` reads and checks the table; `read_line` reads one file into a Line
        (an `xarray.DataArray` with dims `trace`, `twt`) and `place_line` gives every trace its
        `x`, `y` and `distance`. Line `L018` runs west to east at 9.0 m north: it crosses the
        building's footings and internal wall, the field drain and passes 5 cm from the deepest
        boulder.
        """),
    _code("""
        entries = slicer.read_line_table(survey.line_table)
        entry = next(e for e in entries if e.file.stem == "L018")
        raw = slicer.place_line(slicer.read_line(entry.file), entry)
        raw
        """),
    _md("""
        A small helper draws a radargram: distance along the line across, two-way time growing
        downward. Signed amplitudes use a diverging scale clipped at the 99th percentile, so
        that weak late reflections are not lost behind the direct wave.
        """),
    _figure("""
        def radargram(line, title, ax=None, axis="twt", clip=99.0):
            \"\"\"Draw a Line with distance across and ``axis`` (twt or depth) growing down.\"\"\"
            if ax is None:
                ax = plt.figure(figsize=(10, 3.6), layout="constrained").add_subplot()
            values = line.transpose(axis, "trace").values
            down = line[axis].values
            along = line["distance"].values
            extent = (along[0], along[-1], down[-1], down[0])  # top of the image is the start
            if line.name == "envelope":
                image = ax.imshow(values, aspect="auto", extent=extent, cmap="magma",
                                  vmin=0, vmax=np.percentile(values, clip))
            else:
                limit = np.percentile(np.abs(values), clip)
                image = ax.imshow(values, aspect="auto", extent=extent, cmap="RdBu_r",
                                  vmin=-limit, vmax=limit)
            ax.set_xlabel("distance along the line (m)")
            ax.set_ylabel("two-way travel time (ns)" if axis == "twt" else "depth (m)")
            ax.set_title(title)
            ax.figure.colorbar(image, ax=ax, label=f"{line.name} ({line.attrs.get('units')})")
            return ax


        radargram(raw, "L018, raw record");
        """),
    _md("""
        **Time zero.** The direct (air-ground) wave arrives first and strongest. Its main peak
        is time zero: the moment the wave enters the ground. `pick_time_zero` finds it on the
        line's mean trace; the demo radar put it at 3.0 ns. `correct_time_zero` shifts the
        `twt` coordinate so that 0 is the ground surface (samples are not resampled; those
        before time zero keep negative times).
        """),
    _figure("""
        picked = slicer.pick_time_zero(raw)
        print(f"picked time zero {picked:.3f} ns; the demo radar used "
              f"{truth['time_zero_ns']} ns (difference {picked - truth['time_zero_ns']:+.3f} ns)")

        mean_trace = raw.mean("trace")
        ax = plt.figure(figsize=(8, 3), layout="constrained").add_subplot()
        ax.plot(raw["twt"], mean_trace, color="black", lw=1)
        ax.axvline(picked, color="tab:red", label=f"picked {picked:.2f} ns")
        ax.axvline(truth["time_zero_ns"], color="tab:blue", ls="--",
                   label=f"known {truth['time_zero_ns']} ns")
        ax.set_xlim(0, 12)
        ax.set_xlabel("two-way travel time in the raw record (ns)")
        ax.set_ylabel("mean amplitude (1)")
        ax.set_title("L018, mean trace near the direct wave")
        ax.legend()

        line = slicer.correct_time_zero(raw, time_zero="auto")
        print("twt now starts at", round(float(line["twt"][0]), 3), "ns")
        """),
    _md("""
        **Dewow.** Wow is a slow drift of each trace's baseline (the receiver saturating near
        the transmitter). `dewow` subtracts a running mean; by default the window is 1.5
        periods of the line's dominant frequency.
        """),
    _figure("""
        print(f"dominant frequency {slicer.dominant_frequency(line) * 1000:.0f} MHz")
        line = slicer.dewow(line)
        radargram(line, "after time zero and dewow");
        """),
    _md("""
        **Background removal.** The direct wave and antenna ringing are the same on every
        trace and hide shallow reflections as horizontal bands. `remove_background` subtracts
        the line's median trace (the median resists the strong local reflections that a mean
        would smear along the whole line). A truly flat reflector running the whole line is
        removed with it, the usual price of this step: here the sand-over-gravel boundary at
        1.65 m (the faint band near 36 ns in the raw record).
        """),
    _figure("""
        line = slicer.remove_background(line, method="median")
        radargram(line, "after background removal");
        """),
    _md("""
        **Gain.** Amplitudes fall with depth through spreading and attenuation. `apply_gain`
        multiplies each trace by a curve of two-way time; `power` with exponent 1 (gain
        proportional to `twt`) compensates geometric spreading.
        """),
    _figure("""
        line = slicer.apply_gain(line, kind="power", value=1.0)
        radargram(line, "after gain (power 1)");
        """),
    _md("""
        **Envelope.** A slice should show where reflections are, whatever their sign. The
        envelope is the magnitude of the analytic signal (Hilbert transform along `twt`): one
        positive hump per reflection. The hyperbolas of the footings, the drain and the
        boulder stand out. The Line's `history` records every step.
        """),
    _figure("""
        env = slicer.envelope(line)
        radargram(env, "envelope")
        print(env.attrs["history"].replace("; ", "\\n"))
        """),
    _md("""
        ## 3. Time to depth, and slice windows

        With one ground velocity `v` (m/ns) a reflector at two-way time `twt` below time zero
        lies at depth `d = v * twt / 2`: the wave goes down and back. Here the velocity of the
        invented ground, 0.1 m/ns, is known; on a real site it comes from hyperbola fitting or
        a target of known depth. `to_depth` relabels the `twt` axis as `depth`; the markers
        show the true depth of point targets within 0.25 m of this line.
        """),
    _figure("""
        velocity = truth["velocity_m_per_ns"]
        print("twt 10, 20, 40 ns ->", slicer.depth_from_time([10.0, 20.0, 40.0],
                                                             velocity=velocity), "m")
        env_depth = slicer.to_depth(env, velocity=velocity)
        ax = radargram(env_depth, "envelope against depth (v = 0.1 m/ns)", axis="depth")
        ax.set_ylim(2.4, -0.1)
        start, end = np.array(entry.start), np.array(entry.end)
        ahead = (end - start) / entry.length  # unit vector along the line
        for t in truth["targets"]:
            if t["kind"] != "point":
                continue
            offset = np.array([t["x"], t["y"]]) - start
            across = ahead[0] * offset[1] - ahead[1] * offset[0]
            if abs(across) < 0.25:
                ax.plot(np.dot(ahead, offset), t["depth"], "c+", ms=14, mew=2)
        """),
    _md("""
        A slice value is the mean envelope over a depth window `[top, bottom)`.
        `make_windows(0, 2.4, 0.1)` gives 24 windows 0.1 m thick, and `reduce_to_windows`
        turns each trace of 512 samples into 24 numbers: a `(trace, slice)` table. This is
        all that is kept of a line before gridding.
        """),
    _figure("""
        windows = slicer.make_windows(0.0, 2.4, 0.1)
        print(windows.describe())
        table = slicer.reduce_to_windows(env, windows, velocity=velocity)
        print(dict(table.sizes))

        ax = plt.figure(figsize=(10, 3.6), layout="constrained").add_subplot()
        image = ax.imshow(table.T.values, aspect="auto", cmap="magma",
                          extent=(env["distance"][0], env["distance"][-1],
                                  windows.bottom[-1], windows.top[0]))
        ax.set_xlabel("distance along the line (m)")
        ax.set_ylabel("depth window (m)")
        ax.set_title("L018 reduced to 24 depth windows")
        ax.figure.colorbar(image, ax=ax, label="mean envelope (1)");
        """),
    _md("""
        ## 4. The whole survey

        `load_settings` reads the line table (or a TOML survey file) and checks every option,
        naming the option at fault when one is wrong. `build_cube` runs the chain above on
        every line (one line in memory at a time), grids the slice values onto 0.1 m cells and
        returns the cube (dims `depth`, `y`, `x`) without writing anything. Time zero is picked
        on each line (`"auto"`); the record lists every pick.
        """),
    _code("""
        settings = slicer.load_settings(survey.line_table, crs=survey.crs, time_zero="auto",
                                        velocity=velocity, cell=0.1, depths="0:2.4:0.1",
                                        out=work / "build")
        result = slicer.build_cube(settings, progress=False)
        cube = result.cube
        picks = [done["time_zero_ns"] for done in result.record["lines"]]
        print(f"time zero picks {min(picks):.3f} to {max(picks):.3f} ns over {len(picks)} lines")
        print(result.record["processing"])
        cube
        """),
    _md("""
        Four point targets stand apart from everything else (2.5 m or more from any other
        target in plan): the stones and boulders placed to check positions. Each is drawn on
        the slice whose window holds its depth, with its true position as a red circle.
        `plot_slice` plots large coordinates relative to the grid's south-west corner; the
        image extent gives that origin.
        """),
    _code("""
        def plan_distance(point, other):
            \"\"\"Plan distance (m) from a point target to another target of the truth.\"\"\"
            px, py = point["x"], point["y"]
            if other["kind"] == "point":
                return float(np.hypot(px - other["x"], py - other["y"]))
            if other["kind"] == "plate":
                dx = max(other["xmin"] - px, 0.0, px - other["xmax"])
                dy = max(other["ymin"] - py, 0.0, py - other["ymax"])
                return float(np.hypot(dx, dy))
            a = np.array([other["x0"], other["y0"]])
            b = np.array([other["x1"], other["y1"]])
            u = np.clip(np.dot([px, py] - a, b - a) / np.dot(b - a, b - a), 0.0, 1.0)
            return float(np.hypot(*([px, py] - (a + u * (b - a)))))


        targets = truth["targets"]
        isolated = [t for t in targets if t["kind"] == "point"
                    and min(plan_distance(t, o) for o in targets if o is not t) >= 2.5]
        for t in isolated:
            print(f"point at ({t['x'] - west:.2f}, {t['y'] - south:.2f}) m, "
                  f"depth {t['depth']:.2f} m")
        """),
    _figure("""
        def slice_holding(depth):
            \"\"\"Index of the slice whose window [top, bottom) holds ``depth`` (m).\"\"\"
            inside = (cube["depth_top"].values <= depth) & (depth < cube["depth_bottom"].values)
            return int(np.flatnonzero(inside)[0])


        transform = slicer.cube_transform(cube)
        fig, axes = plt.subplots(2, 2, figsize=(11, 7.5), layout="constrained")
        for ax, t in zip(axes.flat, isolated, strict=False):
            slicer.plot_slice(cube, slice_holding(t["depth"]), ax=ax)
            left, _, bottom, _ = ax.images[0].get_extent()
            origin_x = transform.c - left  # transform.c, .f: the grid's west and north edges
            origin_y = transform.f + transform.e * cube.sizes["y"] - bottom
            ax.plot(t["x"] - origin_x, t["y"] - origin_y, "o", mfc="none", mec="red",
                    ms=18, mew=1.5)
        """),
    _md("""
        How far is the brightest cell near each target from its truth? The search looks at
        every cell within 0.5 m in plan (one line spacing) and within 0.3 m in depth, and
        reports the brightest cell's offset. The demo puts every point target at a cell centre
        (cells are 0.1 m) and in the middle of a slice (0.1 m thick), so a faithful build puts
        the brightest cell right on it; an offset of a cell or more would show a shift in
        positioning, time zero or velocity.
        """),
    _code("""
        xx, yy = np.meshgrid(cube["x"].values, cube["y"].values)
        depths = cube["depth"].values
        for t in isolated:
            near = np.hypot(xx - t["x"], yy - t["y"]) <= 0.5
            layers = np.abs(depths - t["depth"]) <= 0.3
            values = np.where(near[None] & layers[:, None, None], cube.values, np.nan)
            k, j, i = np.unravel_index(np.nanargmax(values), values.shape)
            dx, dy, dz = xx[j, i] - t["x"], yy[j, i] - t["y"], depths[k] - t["depth"]
            contrast = values[k, j, i] / np.nanmedian(cube.values[k])
            print(f"target at ({t['x'] - west:5.2f}, {t['y'] - south:5.2f}) m, "
                  f"{t['depth']:.2f} m deep: brightest cell {dx:+.2f} m east, "
                  f"{dy:+.2f} m north, {dz:+.2f} m deeper; {contrast:.0f} x the slice median")
        """),
    _md("""
        ## 5. Files: GeoTIFF slices, the cube, the overview and the record

        `build` does what `build_cube` does and then writes, into `settings.out` (which must be
        new or empty): one GeoTIFF per slice, an overview sheet and a record of every setting
        and input with its checksum, and the cube as CF NetCDF (`cube.nc`) and Zarr
        (`cube.zarr`) when `formats` asks for them, as here (the default is `"tif"`, the
        slices only). The build folder is switched in whole, only once everything is written.
        """),
    _code("""
        settings = settings.replace(formats="tif,zarr,nc")
        built = slicer.build(settings, progress=False)
        for path in built.files:
            print(f"{path.relative_to(settings.out)!s:42s} {path.stat().st_size / 1024:7.1f} kB")
        """),
    _md("""
        A slice GeoTIFF opens with rasterio (or any GIS): it carries its CRS, an exact
        transform, NaN as nodata and its depth window in the metadata.
        """),
    _code("""
        index = slice_holding(isolated[0]["depth"])
        tif = sorted((settings.out / "slices").glob("*.tif"))[index]
        with rasterio.open(tif) as src:
            print(tif.name)
            print("CRS", src.crs, "| nodata", src.nodata, "|", src.width, "x", src.height)
            print(src.transform)
            tags = src.tags()
            print({key: tags[key] for key in ("DEPTH_TOP", "DEPTH_BOTTOM", "VELOCITY_M_PER_NS")})
            band = src.read(1)
        print("same values as the cube:", np.array_equal(band, cube.values[index], equal_nan=True))
        """),
    _md("""
        The cube is CF-1.8 NetCDF: xarray opens it with its depth bounds and grid mapping
        (and `slicer.read_cube_netcdf` reads it back into the in-memory cube layout).
        """),
    _code("""
        with xr.open_dataset(settings.out / "cube.nc") as ds:
            print(ds)
            print()
            print(ds["envelope"].sel(depth=1.45, method="nearest").attrs)
        """),
    _code("""
        record = json.loads((settings.out / "record.json").read_text())
        print("inputs recorded:", len(record["inputs"]), "| seconds:", record["seconds"])
        Image(filename=str(sorted(settings.out.glob("overview*.png"))[0]), width=900)
        """),
    _md("""
        The temporary folder is removed at the end; skip this cell to keep the files.
        """),
    _code("""
        shutil.rmtree(work)
        """),
]

#: Every notebook this script makes: file name -> cells.

VELOCITY_AND_MIGRATION = [
    _md("""
        # Ground velocity and migration on a synthetic line

        Depth slices are only as true as the velocity behind them. This notebook makes one
        synthetic line over buried stones and an obliquely crossed wall footing (an invented
        scene from `slicer.synthetic`), finds its diffraction hyperbolas without any picks,
        fits each one, combines them into one velocity, and then migrates the line so that each
        hyperbola collapses back onto its stone.
        """),
    _code("""
        %matplotlib inline
        import matplotlib.pyplot as plt
        import numpy as np

        import slicer
        from slicer import (
            find_diffractions,
            fit_hyperbola,
            hyperbola_time,
            migrate,
            survey_velocity,
        )
        from slicer.synthetic import (
            Ground,
            LineTarget,
            PlannedLine,
            PointTarget,
            Radar,
            simulate_line,
        )

        TRUE_V = 0.1  # m/ns
        stones = [PointTarget(3.0, 0.0, 0.6), PointTarget(6.5, 0.0, 1.1),
                  PointTarget(10.0, 0.0, 1.6)]
        wall = LineTarget(12.0, -3.0, 15.0, 3.0, 0.8)  # crossed at about 63 degrees
        ground = Ground(velocity=TRUE_V, targets=(*stones, wall))
        plan = PlannedLine("demo-line", 0.0, 0.0, 16.0, 0.0, 321)
        raw = simulate_line(ground, Radar(seed=5), plan)
        line = slicer.correct_time_zero(raw, time_zero="auto")
        print(f"time zero picked at {line.attrs['time_zero_ns']:.3f} ns (the radar's is 3.0 ns)")
        """),
    _md("""
        ## Fitting one hyperbola from picks

        A point target at depth `z0` below `x0` gives `t(x) = (2/v) sqrt(z0^2 + (x - x0)^2)`.
        Picking the strongest sample near the predicted curve on traces around the first stone
        and fitting by least squares gives the velocity with its standard error.
        """),
    _code("""
        env = slicer.envelope(slicer.remove_background(line, method="median"))
        x = line["distance"].values
        near = np.abs(x - 3.0) < 1.2
        guess = hyperbola_time(x[near], x0=3.0, t0=12.0, velocity=0.1)
        twt = env["twt"].values
        picks = []
        for i, t_guess in zip(np.flatnonzero(near), guess, strict=True):
            window = np.abs(twt - t_guess) < 1.5
            picks.append(twt[window][np.argmax(env.values[i, window])])
        fit = fit_hyperbola(x[near], np.array(picks))
        print(f"v = {fit.velocity:.4f} +- {fit.velocity_std:.4f} m/ns, apex {fit.x0:.2f} m, "
              f"depth {fit.depth:.3f} m (true 0.600 m)")
        """),
    _md("""
        ## Searching the whole line

        `find_diffractions` scans trial velocities for the focusing of every hyperbola, fits each
        one it finds and keeps the good fits. The wall, crossed obliquely, looks faster than the
        ground (`v / sin(angle)`); `survey_velocity` keeps the slowest consistent group.
        """),
    _figure("""
        found = find_diffractions(line)
        estimate = survey_velocity(found, min_count=2)
        for f in found:
            print(f"apex {f.distance:5.2f} m  {f.time:5.1f} ns  "
                  f"v = {f.velocity:.4f} +- {f.velocity_std:.4f}")
        print(f"survey velocity {estimate.velocity:.4f} +- {estimate.std:.4f} m/ns (true {TRUE_V})")
        fig, ax = plt.subplots(figsize=(10, 4))
        data = line.values - np.median(line.values, axis=0)
        lim = np.percentile(np.abs(data), 99)
        ax.imshow(data.T, aspect="auto", cmap="gray", vmin=-lim, vmax=lim,
                  extent=(x[0], x[-1], twt[-1], twt[0]))
        for f in found:
            xs = np.linspace(f.distance - 2, f.distance + 2, 100)
            ax.plot(xs, f.fit.travel_time(xs), "r", lw=1)
        ax.set_xlabel("distance along line (m)")
        ax.set_ylabel("two-way time (ns)")
        """),
    _md("""
        ## Migration

        Stolt (1978) f-k migration with the right velocity collapses each hyperbola to a focus;
        10 % too slow or too fast leaves it smeared. The half-maximum width of the first stone's
        envelope along the line shows it.
        """),
    _figure("""
        def width(envelope_line, x0, t0):
            k = int(np.argmin(np.abs(envelope_line["twt"].values - t0)))
            band = envelope_line.values[:, max(k - 5, 0):k + 6].max(axis=1)
            sel = np.abs(x - x0) < 2
            return float((band[sel] >= band[sel].max() / 2).sum() * (x[1] - x[0]))

        prepared = slicer.remove_background(line, method="median")
        t_stone = 2 * 0.6 / TRUE_V
        fig, axes = plt.subplots(1, 4, figsize=(14, 3.5), sharey=True)
        cases = [("not migrated", None), ("v -10 %", 0.9 * TRUE_V), ("true v", TRUE_V),
                 ("v +10 %", 1.1 * TRUE_V)]
        for ax, (label, v) in zip(axes, cases, strict=True):
            m = prepared if v is None else migrate(prepared, velocity=v, method="stolt")
            e = slicer.envelope(m)
            ax.imshow(e.values.T, aspect="auto", extent=(x[0], x[-1], twt[-1], twt[0]))
            ax.set_title(f"{label}: width {width(e, 3.0, t_stone):.2f} m")
            ax.set_xlabel("distance (m)")
        axes[0].set_ylabel("two-way time (ns)")
        """),
]

NOTEBOOKS = {"lines_to_slices.ipynb": LINES_TO_SLICES,
             "velocity_and_migration.ipynb": VELOCITY_AND_MIGRATION}


def make_notebook(cells) -> nbformat.NotebookNode:
    """A notebook of ``cells`` without outputs, with ids fixed by position."""
    nb = new_notebook(metadata={
        "kernelspec": {"name": "python3", "display_name": "Python 3 (ipykernel)",
                       "language": "python"},
        "language_info": {"name": "python"},
    })
    for number, (kind, text, tags) in enumerate(cells):
        source = textwrap.dedent(text).strip("\n")
        cell_id = f"cell-{number:02d}"
        if kind == "markdown":
            nb.cells.append(new_markdown_cell(source, id=cell_id))
        else:
            metadata = {"tags": list(tags)} if tags else {}
            nb.cells.append(new_code_cell(source, id=cell_id, metadata=metadata))
    nbformat.validate(nb)
    return nb


def render(name: str) -> str:
    """The exact text of notebook ``name`` as this script writes it."""
    return nbformat.writes(make_notebook(NOTEBOOKS[name])) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true",
                        help="do not write; exit 1 if a notebook differs from its source")
    args = parser.parse_args(argv)
    stale = []
    for name in NOTEBOOKS:
        path = HERE / name
        text = render(name)
        current = path.read_text(encoding="utf-8") if path.exists() else None
        if current == text:
            continue
        if args.check:
            stale.append(name)
        else:
            path.write_text(text, encoding="utf-8")
            print(f"wrote {path}")
    for name in stale:
        print(f"{name} differs from make_notebooks.py", file=sys.stderr)
    return 1 if stale else 0


if __name__ == "__main__":
    sys.exit(main())
