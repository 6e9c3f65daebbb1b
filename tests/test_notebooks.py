"""The demo notebooks run end to end (nbclient), and are committed without outputs."""

from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")
pytest.importorskip("ipykernel")
pytest.importorskip("matplotlib")
pytest.importorskip("sklearn")

NOTEBOOKS = sorted((Path(__file__).resolve().parent.parent / "notebooks-demo").glob("*.ipynb"))


@pytest.fixture
def venv_kernel(tmp_path, monkeypatch):
    """Makes the kernel "python3" this interpreter (the venv with shiftweight installed), not
    whatever "python3" kernel the machine has registered: JUPYTER_PATH is searched first."""
    from ipykernel.kernelspec import write_kernel_spec

    write_kernel_spec(str(tmp_path / "jupyter" / "kernels" / "python3"))
    monkeypatch.setenv("JUPYTER_PATH", str(tmp_path / "jupyter"))
    return "python3"


def test_there_are_two_notebooks():
    assert [p.name for p in NOTEBOOKS] == ["01_detect_weigh_diagnose.ipynb", "02_retrain_and_evaluate.ipynb"]


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.stem)
def test_notebook_is_committed_without_outputs(path):
    nb = nbformat.read(str(path), as_version=4)
    for cell in nb.cells:
        if cell.cell_type == "code":
            assert cell.outputs == [] and cell.execution_count is None, f"{path.name} has outputs"


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.stem)
def test_notebook_runs_without_error(path, tmp_path, venv_kernel):
    nb = nbformat.read(str(path), as_version=4)
    client = nbclient.NotebookClient(
        nb,
        timeout=300,  # per cell; the machine running the suite may be slow and shared
        kernel_name=venv_kernel,
        resources={"metadata": {"path": str(tmp_path)}},
    )
    client.execute()  # raises CellExecutionError on the first failing cell
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs if o.output_type == "error"]
    assert errors == []
    # every code cell ran
    assert all(c.execution_count is not None for c in nb.cells if c.cell_type == "code")
