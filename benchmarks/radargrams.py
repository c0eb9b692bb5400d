"""What the radargrams and the viewer page cost a build, on one mid-size synthetic survey.

Builds the same survey (default about 65 000 traces, ``--traces``; the contract settings of
build_throughput.py: 24 depth slices, 0.1 m cells, the default outputs) with
``radargrams = true`` (the default: one picture per line, drawn on a thread while the tiles are
gridded, and the viewer page holding them) and ``false`` (the viewer page only), ``--repeat``
times each, every build in a fresh process, alternating so that a busy spell of the machine hits
both alike.

The table gives the median and minimum wall time of ``slicer.build``, the ratio of the medians
to the build without radargrams, the median CPU time of the build (every thread of its process),
the record's time of the drawing thread (which overlaps the gridding) and of writing
``viewer.html``, and the sizes of ``radargrams/`` and ``viewer.html``.

It then times the PNG writing of the same pages (read back from the last build's
``radargrams/``) by slicer's own writer (:func:`slicer.outputs.radargram_frame.png_bytes`)
against Pillow's PNG encoder at levels 1 and 6, the library path it replaced: milliseconds per
page (best of 5 passes over every page, CPU time of this process) and the mean size.

    python benchmarks/radargrams.py
    python benchmarks/radargrams.py --traces 200000 --repeat 1
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import _common  # noqa: F401 - first: one BLAS thread before numpy loads
from _common import _f, _table, in_fresh_process, survey_options, work_folder  # noqa: E402
from build_throughput import SETTINGS, make_survey  # noqa: E402

#: The ways measured: (label, radargrams).
WAYS = [("no radargrams", False), ("radargrams", True)]


def measure(table: str, out: str, radargrams: bool, scheduler: str) -> dict:
    """One build in this (fresh) process: wall and CPU seconds, the record's phases, sizes."""
    import slicer
    settings = slicer.load_settings(Path(table), **SETTINGS, out=Path(out), overwrite=True,
                                    radargrams=radargrams, scheduler=scheduler)
    started, cpu = time.perf_counter(), time.process_time()
    result = slicer.build(settings, progress=False)
    seconds, cpu = time.perf_counter() - started, time.process_time() - cpu
    pictures = sum(p.stat().st_size for p in (Path(out) / "radargrams").glob("*.png"))
    return {"seconds": seconds, "cpu": cpu, "phases": dict(result.record["seconds"]),
            "traces": result.record["survey"]["traces"],
            "lines": result.record["survey"]["lines"],
            "shape": tuple(int(n) for n in result.cube.shape),
            "viewer": (Path(out) / "viewer.html").stat().st_size, "pictures": pictures}


def compare_png_writers(folder: Path, repeat: int = 5) -> list[list[str]]:
    """Rows (writer, ms per page, mean kB) for the palette pages in ``folder``."""
    import io

    import numpy as np
    from PIL import Image

    from slicer.outputs.radargram_frame import png_bytes
    pages = []
    for path in sorted(folder.glob("*.png")):
        with Image.open(path) as im:
            pages.append((np.asarray(im), np.asarray(im.getpalette(), dtype=np.uint8)))

    def pillow(level):
        def write(indices, palette):
            image = Image.fromarray(indices, mode="P")
            image.putpalette(palette.tolist())
            buffer = io.BytesIO()
            image.save(buffer, format="png", compress_level=level, dpi=(80, 80))
            return buffer.getvalue()
        return write

    rows = []
    for name, write in (("slicer png_bytes (Sub rows, zlib 1, Z_RLE)",
                         lambda i, p: png_bytes(i, p, dpi=80)),
                        ("Pillow, compress_level 1", pillow(1)),
                        ("Pillow, compress_level 6 (its default)", pillow(6))):
        best, sizes = float("inf"), []
        for _ in range(repeat):
            started = time.process_time()
            sizes = [len(write(i, p)) for i, p in pages]
            best = min(best, time.process_time() - started)
        rows.append([name, _f(1e3 * best / len(pages), 2), _f(statistics.mean(sizes) / 1e3, 1)])
    return rows


def parse_args(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    survey_options(p)
    return p.parse_args(argv)


def main(argv=None) -> int:
    args = parse_args(argv)
    with work_folder(args.keep, "slicer-radargrams-") as root:
        table, _, made, _ = make_survey(root / "survey", args.traces)
        print(f"survey: {args.traces} traces requested, written in {_f(made, 1)} s; "
              f"scheduler {args.scheduler}; {args.repeat} builds per way")
        runs = {label: [] for label, _ in WAYS}
        info = None
        for _ in range(args.repeat):
            for label, radargrams in WAYS:
                out = root / "out" / label.replace(" ", "_")
                info = in_fresh_process(measure, str(table), str(out), radargrams,
                                        args.scheduler)
                runs[label].append(info)
        print(f"{info['traces']} traces in {info['lines']} lines -> cube {info['shape']}")
        base = statistics.median(r["seconds"] for r in runs[WAYS[0][0]])
        rows = []
        for label, _ in WAYS:
            got = runs[label]
            seconds = [r["seconds"] for r in got]

            def median(key, got=got):
                return statistics.median(r["phases"].get(key, float("nan")) for r in got)

            rows.append([label, _f(statistics.median(seconds)), _f(min(seconds)),
                         _f(statistics.median(seconds) / base),
                         _f(statistics.median(r["cpu"] for r in got)),
                         _f(median("radargrams_drawn")), _f(median("viewer")),
                         _f(got[-1]["pictures"] / 2**20), _f(got[-1]["viewer"] / 2**20)])
        print(_table(["build", "median s", "min s", "x without", "CPU s", "drawing s",
                      "viewer s", "radargrams MiB", "viewer MiB"], rows))
        pages = root / "out" / WAYS[1][0].replace(" ", "_") / "radargrams"
        print(f"\nPNG writing of the {len(list(pages.glob('*.png')))} radargram pages")
        print(_table(["writer", "ms per page", "mean kB"], compare_png_writers(pages)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
