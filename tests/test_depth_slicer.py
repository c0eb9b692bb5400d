"""Tests of depth_slicer, the command's entry point outside the package: it runs slicer's CLI,
and says in one line when the importable ``slicer`` is another distribution's (an unrelated PyPI
distribution uses the same import name)."""

import subprocess
import sys
from pathlib import Path

import depth_slicer

ROOT = Path(__file__).resolve().parents[1]


def _run(pythonpath: Path | None, *argv: str) -> subprocess.CompletedProcess:
    path = [str(pythonpath)] if pythonpath else []
    code = "import sys, depth_slicer; sys.exit(depth_slicer.main(sys.argv[1:]))"
    env = {"PYTHONPATH": ":".join([*path, str(ROOT)])}
    return subprocess.run([sys.executable, "-c", code, *argv], capture_output=True, text=True,
                          env=env, cwd=ROOT.parent, timeout=60)


def test_runs_the_command_line(capsys):
    assert depth_slicer.main(["plan", "--frequency", "400", "--permittivity", "9",
                              "--target-depth", "1", "--json"]) == 0
    assert '"quantities"' in capsys.readouterr().out


def test_a_foreign_slicer_is_named_in_one_line(tmp_path):
    foreign = tmp_path / "slicer"
    foreign.mkdir()
    (foreign / "__init__.py").write_text("def slice_it():\n    return 1\n")
    done = _run(tmp_path, "--version")
    assert done.returncode == 2
    assert done.stderr.count("\n") == 1 and "Traceback" not in done.stderr
    assert str(foreign / "__init__.py") in done.stderr and "not depth-slicer's" in done.stderr


def test_our_slicer_passes_the_check():
    done = _run(None, "--version")
    assert done.returncode == 0 and done.stdout.startswith("slicer ")
