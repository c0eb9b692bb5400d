"""Build depth slices of a small invented survey through the Python API, step by step.

The survey is made by slicer's own synthetic generator (an invented scene: two buried stones
under a 4 m x 2.5 m patch of field), written to a temporary folder. Run:

    python examples/python_api.py [FOLDER]   # FOLDER: where to work (default a new temp one)
"""

import sys
import tempfile
from pathlib import Path

import numpy as np

import slicer
from slicer.synthetic import Ground, PointTarget, Radar, grid_lines, write_survey


def main(work: Path | None = None) -> None:
    """Run the example in ``work`` (an empty or new folder; default a new temporary one, which
    is kept for you to open)."""
    work = Path(tempfile.mkdtemp(prefix="slicer-example-")) if work is None else Path(work)
    work.mkdir(parents=True, exist_ok=True)
    stones = (PointTarget(512001.05, 4650001.05, 0.55), PointTarget(512002.95, 4650001.55, 1.25))
    survey = write_survey(
        work / "survey", Ground(velocity=0.1, targets=stones), Radar(seed=1),
        grid_lines(west=512000.0, south=4650000.0, length=4.0, width=2.5, line_spacing=0.5,
                   trace_spacing=0.05, direction="x"),
        format="segy", crs="EPSG:32633", progress=False)

    # every line: read, place, process, reduce to 0.1 m depth windows
    windows = slicer.make_windows(0.0, 2.4, 0.1)
    parts = []
    for number, entry in enumerate(slicer.read_line_table(survey.line_table)):
        line = slicer.place_line(slicer.read_line(entry.file, sample_interval_ns=0.1), entry)
        line = slicer.correct_time_zero(line, time_zero=3.0)
        line = slicer.envelope(slicer.remove_background(slicer.dewow(line), method="median"))
        values = slicer.reduce_to_windows(line, windows, velocity=0.1)
        parts.append(values.assign_coords(line=("trace", np.full(values.sizes["trace"],
                                                                 number))))
    import xarray as xr
    table = xr.concat(parts, dim="trace")
    cube, grid = slicer.grid_slices(table, cell=0.1, crs="EPSG:32633", velocity=0.1)
    print(f"cube {dict(cube.sizes)}, search radius {grid['search_radius_m']:.3f} m")
    for stone in stones:
        profile = cube.sel(x=stone.x, y=stone.y, method="nearest")
        depth = float(cube["depth"][int(profile.argmax("depth"))])
        print(f"stone buried at {stone.depth:.2f} m: brightest slice centred at {depth:.2f} m")
    files = slicer.write_slice_geotiffs(cube, work / "slices", progress=False)
    print(f"wrote {len(files)} GeoTIFFs to {work / 'slices'}")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else None)  # optional: the folder to work in
