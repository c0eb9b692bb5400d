"""Two line sets at right angles, positioned from their trace headers and tied at crossings.

An invented scene made by slicer's own synthetic generator: a 4 m x 4 m patch walked west-east
and then south-north, over a buried layer and three stones. The crew's radar was slow to
settle on some lines, so their time zero is off by up to half a nanosecond and their gain
differs. The build takes every position from the SEG-Y trace headers (the line table names only
the files), measures the ties where lines cross, corrects each line, and puts every stone
within one cell of where it lies. Run:

    python examples/crossed_grid.py [FOLDER]   # FOLDER: where to work (default a new temp one)
"""

import sys
import tempfile
from pathlib import Path

import numpy as np

import slicer
from slicer.synthetic import Ground, Layer, PointTarget, Radar, grid_lines, simulate_line

W, S = 512000.0, 4650000.0


def main(work: Path | None = None) -> None:
    """Run the example in ``work`` (an empty or new folder; default a new temporary one, which
    is kept for you to open)."""
    work = Path(tempfile.mkdtemp(prefix="slicer-crossed-")) if work is None else Path(work)
    work.mkdir(parents=True, exist_ok=True)
    # each stone at the centre of a 0.1 m cell, 5 cm from a line of each set
    stones = (PointTarget(W + 1.05, S + 1.05, 0.45), PointTarget(W + 3.05, S + 2.05, 0.75),
              PointTarget(W + 2.05, S + 2.95, 0.95))
    ground = Ground(velocity=0.1, targets=stones, layers=(Layer(1.3, 0.4),))
    plans = (grid_lines(west=W, south=S, length=4.0, width=4.0, line_spacing=0.5,
                        trace_spacing=0.05, direction="x", prefix="E")
             + grid_lines(west=W, south=S, length=4.0, width=4.0, line_spacing=0.5,
                          trace_spacing=0.05, direction="y", prefix="N"))
    rng = np.random.default_rng(2026)
    late = rng.uniform(-0.5, 0.5, len(plans))  # ns: how late each line's time zero came
    folder = work / "survey"
    folder.mkdir()
    for plan, dt in zip(plans, late, strict=True):
        radar = Radar(samples=400, seed=4, time_zero_ns=3.0 + dt)
        raw = simulate_line(ground, radar, plan) * np.float32(rng.uniform(0.7, 1.4))
        slicer.write_segy_line(raw, folder / f"{plan.name}.sgy")  # x, y into the headers
    (folder / "files.csv").write_text("file\n" + "".join(f"{p.name}.sgy\n" for p in plans))

    settings = slicer.load_settings(folder / "files.csv", positions="headers", ties="apply",
                                    crs="EPSG:32633", sample_interval=0.1, time_zero=3.0,
                                    velocity=0.1, cell=0.1, depths="0:1.6:0.1",
                                    out=work / "slices")
    result = slicer.build(settings, progress=False)
    ties = result.record["ties"]
    print(f"ties at {ties['ties_used']} crossings: time misfit {ties['misfit_before_ns']:.3f} ns "
          f"before, {ties['misfit_after_ns']:.3f} ns after correction")
    worst = np.abs(np.array([c["time_zero_ns"] for c in ties["corrections"]])
                   - (late - late.mean())).max()
    print(f"largest error of a line's time-zero correction: {worst:.3f} ns")
    cube = result.cube
    for stone in stones:
        k = int(np.argmin(np.abs(cube["depth"].values - stone.depth)))
        plane = cube.isel(depth=k).sel(x=slice(stone.x - 0.5, stone.x + 0.5),
                                       y=slice(stone.y + 0.5, stone.y - 0.5))
        j, i = np.unravel_index(int(np.nanargmax(plane.values)), plane.shape)
        dx, dy = float(plane["x"][i]) - stone.x, float(plane["y"][j]) - stone.y
        print(f"stone at {stone.depth:.2f} m: brightest cell {dx:+.2f} m east, {dy:+.2f} m "
              "north of it")
    print(f"wrote {len(result.files)} files to {work / 'slices'}")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else None)  # optional: the folder to work in
