"""The notebooks run headless from top to bottom, carry no outputs and match their generator.

Every ``notebooks/*.ipynb`` is executed with nbclient in a fresh ipykernel started from this
test's own interpreter, with ``notebooks/`` as its working directory. ipykernel prints a
harmless "running over TCP without encryption" warning on stderr at start-up; only cell errors
fail the run.
"""

from __future__ import annotations

import importlib.util
import os
from pathlib import Path

import nbformat
import pytest
from jupyter_client.kernelspec import KernelSpecManager
from jupyter_client.manager import KernelManager
from nbclient import NotebookClient
from traitlets import default

import slicer

NOTEBOOK_DIR = Path(__file__).resolve().parents[1] / "notebooks"
NOTEBOOKS = sorted(NOTEBOOK_DIR.glob("*.ipynb"))
CELL_TIMEOUT_S = 300


def _generator():
    spec = importlib.util.spec_from_file_location("make_notebooks",
                                                  NOTEBOOK_DIR / "make_notebooks.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


class _ThisInterpreterKernel(KernelManager):
    """A kernel manager that only knows ipykernel's built-in "python3" spec.

    That spec runs ``sys.executable``, so the kernel sees the packages of this test run. A
    "python3" kernelspec installed in the user's or the system's Jupyter folders would win
    otherwise, and may point to another interpreter without slicer.
    """

    @default("kernel_spec_manager")
    def _kernel_spec_manager_default(self):
        return KernelSpecManager(kernel_dirs=[])


def _kernel_env() -> dict[str, str]:
    env = dict(os.environ)
    # conftest sets MPLBACKEND=Agg for the tests; ipykernel only installs its inline backend,
    # which captures figures as outputs, when MPLBACKEND is unset.
    env.pop("MPLBACKEND", None)
    # From a source tree (PYTHONPATH, or `python -m pytest` from the repo root) the kernel,
    # started in notebooks/, must import the same slicer; an installed slicer needs nothing.
    root = Path(slicer.__file__).resolve().parents[1]
    if (root / "pyproject.toml").is_file():
        env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(root), env.get("PYTHONPATH")]))
    return env


def test_notebooks_are_found():
    assert NOTEBOOKS, f"no notebook found in {NOTEBOOK_DIR}"


def test_every_notebook_comes_from_the_generator():
    assert set(_generator().NOTEBOOKS) == {path.name for path in NOTEBOOKS}


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_committed_notebook_equals_generator_output(path):
    assert path.read_text(encoding="utf-8") == _generator().render(path.name), (
        f"{path.name} differs from make_notebooks.py; run python notebooks/make_notebooks.py")


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_committed_notebook_has_no_outputs(path):
    nb = nbformat.read(path, as_version=4)
    code = [cell for cell in nb.cells if cell.cell_type == "code"]
    assert code, f"{path.name} has no code cell"
    for number, cell in enumerate(code):
        assert cell.outputs == [], f"{path.name}: code cell {number} has outputs"
        assert cell.execution_count is None, f"{path.name}: code cell {number} was run"


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_notebook_runs_headless(path, tmp_path, monkeypatch):
    # connection files and IPython's profile go to this test's folder, not the user's home
    monkeypatch.setenv("JUPYTER_RUNTIME_DIR", str(tmp_path / "runtime"))
    monkeypatch.setenv("IPYTHONDIR", str(tmp_path / "ipython"))
    nb = nbformat.read(path, as_version=4)
    before = sorted(p.name for p in NOTEBOOK_DIR.iterdir())
    client = NotebookClient(nb, timeout=CELL_TIMEOUT_S, startup_timeout=120,
                            kernel_name="python3", kernel_manager_class=_ThisInterpreterKernel,
                            allow_errors=False,
                            resources={"metadata": {"path": str(NOTEBOOK_DIR)}})
    client.execute(env=_kernel_env())  # raises CellExecutionError on the first failing cell

    code = [cell for cell in nb.cells if cell.cell_type == "code"]
    assert all(cell.execution_count is not None for cell in code)
    tag = _generator().FIGURE_TAG
    for cell in code:
        if tag in cell.metadata.get("tags", []):
            images = [out for out in cell.outputs if "image/png" in out.get("data", {})]
            assert images, f"{path.name} cell {cell.id} should draw a figure but drew none"
    # the notebook works in a temporary folder: nothing may appear beside it
    assert sorted(p.name for p in NOTEBOOK_DIR.iterdir()) == before
