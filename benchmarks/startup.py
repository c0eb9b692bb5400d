"""Start-up time of the command line, against the interpreter and the libraries it could load.

Every command runs in a fresh process, ``--repeat`` times, alternating between commands so that
a busy spell of the machine hits all of them alike; the table gives the median wall time and
its ratio to a bare interpreter (``python -c pass``), measured in the same run. With
``--before REV`` the same commands also run against the package as it was at that git revision
(checked out into a temporary folder), so a change to start-up is measured before and after in
one run.

    python benchmarks/startup.py                      # this checkout
    python benchmarks/startup.py --before 30abad4     # and the flat layout before the split
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from _common import _f, _table, compile_slicer

ROOT = Path(__file__).resolve().parents[1]
NEUTRAL = tempfile.gettempdir()

#: What the commands run, as arguments of the CLI's ``main``.
COMMANDS = {
    "slicer --help": ["--help"],
    "slicer --version": ["--version"],
    "slicer plan ...": ["plan", "--frequency", "400", "--permittivity", "9",
                        "--target-depth", "1"],
}

#: Peers: the interpreter alone and the libraries a command might pull in.
PEERS = {
    "python -c pass": "pass",
    "import numpy": "import numpy",
    "import xarray": "import xarray",
    "import dask.array": "import dask.array",
    "import matplotlib.pyplot": "import matplotlib.pyplot",
    "import scipy.signal": "import scipy.signal",
}

#: Imports of the package timed here (and at ``--before``): the package alone, and what a
#: build's worker process imports before its first task (``worker_processes.WARM_MODULES``;
#: paid once by the fork server that forks the workers).
IMPORTS = {
    "import slicer": "import slicer",
    "a build's worker": ("import slicer.pipeline.line_tasks, slicer.outputs.radargram, "
                         "slicer.pipeline.worker_outputs"),
    "a build's writers": ("import slicer.pipeline.build, slicer.pipeline.cube_build, "
                          "slicer.outputs.sink, slicer.pipeline.view, "
                          "slicer.pipeline.worker_outputs"),
}


def _cli_code(module: str, argv: list[str]) -> str:
    return (f"import sys\nfrom {module} import main\ntry:\n    main({argv!r})\n"
            "except SystemExit:\n    pass\n")


def _wall(code: str, pythonpath: str | None) -> float:
    # Run from a neutral folder: ``python -c`` puts the working folder first on sys.path.
    env = dict(os.environ)
    if pythonpath is not None:
        env["PYTHONPATH"] = pythonpath
    start = time.perf_counter()
    subprocess.run([sys.executable, "-c", code], env=env, check=True, cwd=NEUTRAL,
                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - start


def _checkout(rev: str, folder: Path) -> Path:
    """The package at ``rev``, extracted with ``git archive`` (no work tree is touched)."""
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev, "slicer"],
                             check=True, capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", str(folder)], input=archive, check=True)
    return folder


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=7)
    parser.add_argument("--before", metavar="REV",
                        help="also time the package at this git revision")
    args = parser.parse_args()

    runs: dict[str, tuple[str, str | None]] = {k: (v, None) for k, v in PEERS.items()}
    here = str(ROOT)
    for name, argv in COMMANDS.items():
        runs[name] = (_cli_code("slicer.cli", argv), here)
    for name, code in IMPORTS.items():
        runs[name] = (code, here)
    with tempfile.TemporaryDirectory() as tmp:
        if args.before:
            old = str(_checkout(args.before, Path(tmp)))
            old_cli = ("slicer.cli" if any((Path(old) / "slicer" / p).exists()
                                           for p in ("cli.py", "cli"))
                       else "slicer._cli")
            for name, argv in COMMANDS.items():
                runs[f"{name} @ {args.before}"] = (_cli_code(old_cli, argv), old)
            for name, code in IMPORTS.items():
                runs[f"{name} @ {args.before}"] = (code, old)
        for folder in {path for _, path in runs.values() if path is not None}:
            compile_slicer(Path(folder) / "slicer")  # as pip install does: see _common
        for code, path in runs.values():  # warm the file cache once
            _wall(code, path)
        times: dict[str, list[float]] = {name: [] for name in runs}
        for _ in range(args.repeat):
            for name, (code, path) in runs.items():
                times[name].append(_wall(code, path))

    floor = statistics.median(times["python -c pass"])
    rows = [[name, _f(statistics.median(t), 3), _f(min(t), 3),
             _f(statistics.median(t) / floor, 1)] for name, t in times.items()]
    print(f"start-up, {args.repeat} runs each, fresh processes, {os.cpu_count()} cores, "
          f"python {sys.version.split()[0]}")
    print(_table(["command", "median s", "min s", "x python -c pass"], rows))
    if args.before:
        for name in [*COMMANDS, *IMPORTS]:
            new = statistics.median(times[name])
            old = statistics.median(times[f"{name} @ {args.before}"])
            print(f"{name}: {old:.2f} s before, {new:.2f} s now ({old / new:.2f}x as fast)")


if __name__ == "__main__":
    main()
