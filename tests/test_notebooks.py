"""The notebooks in notebooks/ run top to bottom without error, and are committed without outputs.

Each notebook is executed with nbclient in a fresh kernel ("python3"), with the non-interactive
matplotlib backend and a temporary working directory, so that a change of the public API that
breaks a notebook fails the test suite (the notebooks never rot).  If no "python3" kernel spec is
installed, one for the running interpreter is installed into a temporary directory first.
"""

import os
from pathlib import Path

import jupyter_client.kernelspec
import nbclient
import nbformat
import pytest

NOTEBOOK_DIR = Path(__file__).resolve().parent.parent / "notebooks"
NOTEBOOKS = ("01_quick_start.ipynb", "02_ascent_attribution.ipynb", "03_check_your_numbers.ipynb")
KERNEL = "python3"
CELL_TIMEOUT = 120  # seconds per cell: generous for a loaded 2-core machine (each notebook takes ~15 s)


def _execute(nb, cwd, monkeypatch, tmp_path):
    """Execute ``nb`` in place in a fresh kernel started in ``cwd``."""

    def client():
        return nbclient.NotebookClient(nb, kernel_name=KERNEL, timeout=CELL_TIMEOUT,
                                       resources={"metadata": {"path": str(cwd)}})

    try:
        client().execute()
    except jupyter_client.kernelspec.NoSuchKernel:
        # a fresh environment without a registered kernel: register this interpreter's kernel
        # in a temporary prefix and make Jupyter look there
        import ipykernel.kernelspec

        prefix = tmp_path / "kernel_prefix"
        ipykernel.kernelspec.install(prefix=str(prefix), kernel_name=KERNEL)
        monkeypatch.setenv("JUPYTER_PATH", os.pathsep.join(
            p for p in (str(prefix / "share" / "jupyter"), os.environ.get("JUPYTER_PATH")) if p))
        client().execute()


def _errors(nb):
    return [(i, out.get("ename"), out.get("evalue"))
            for i, cell in enumerate(nb.cells) if cell.cell_type == "code"
            for out in cell.get("outputs", []) if out.get("output_type") == "error"]


def test_the_notebooks_are_all_here():
    # the three notebooks of the tool (issue: quick start, ascent attribution, checking your numbers)
    found = sorted(p.name for p in NOTEBOOK_DIR.glob("*.ipynb"))
    assert found == sorted(NOTEBOOKS)


@pytest.mark.parametrize("name", NOTEBOOKS)
def test_committed_notebook_has_no_outputs(name):
    # common practice: notebooks are committed stripped, so diffs show code, not results
    nb = nbformat.read(str(NOTEBOOK_DIR / name), as_version=4)
    nbformat.validate(nb)
    code = [c for c in nb.cells if c.cell_type == "code"]
    assert code, f"{name} has no code cells"
    for i, cell in enumerate(code):
        assert cell.outputs == [], f"{name}: code cell {i} carries outputs"
        assert cell.execution_count is None, f"{name}: code cell {i} has an execution count"
    assert nb.metadata["kernelspec"]["name"] == KERNEL


@pytest.mark.slow
@pytest.mark.parametrize("name", NOTEBOOKS)
def test_notebook_executes(name, tmp_path, monkeypatch):
    # the notebook runs top to bottom; a cell error raises CellExecutionError in execute()
    monkeypatch.setenv("MPLBACKEND", "Agg")
    workdir = tmp_path / "work"
    workdir.mkdir()
    monkeypatch.chdir(workdir)
    nb = nbformat.read(str(NOTEBOOK_DIR / name), as_version=4)
    _execute(nb, workdir, monkeypatch, tmp_path)
    assert _errors(nb) == []
    code = [c for c in nb.cells if c.cell_type == "code"]
    assert all(c.execution_count is not None for c in code), "a code cell was not executed"
    # the notebook cleans up after itself: nothing is left in the working directory
    assert list(workdir.iterdir()) == []
