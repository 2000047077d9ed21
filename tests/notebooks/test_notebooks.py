"""The notebooks in notebooks/ run top to bottom in a fresh kernel.

Each notebook is executed with nbclient on a kernel that runs this interpreter
(a kernel spec written to a temporary JUPYTER_PATH, so the test works in any
fresh virtual environment), in a temporary working folder, with smaller
parameters injected at the end of the cell tagged ``parameters``.
"""

from __future__ import annotations

import json
import re
import sys
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

NOTEBOOKS = Path(__file__).resolve().parents[2] / "notebooks"

#: Per-cell time limit [s]; generous, as CI machines are shared.
CELL_TIMEOUT_S = 400

#: Smaller settings per notebook (common practice, no source: just enough for
#: every code path, e.g. at least one GP proposal after the initial design).
SMALL: dict[str, dict[str, object]] = {
    "01_quick_start.ipynb": {
        "BUDGET": 11, "BATCH_SIZE": 2, "N_CELLS": 60, "NUM_RESTARTS": 2, "RAW_SAMPLES": 32,
        "N_WALKERS": 10, "N_STEPS": 150, "N_REFINE_DRAWS": 2, "N_BAND_DRAWS": 3,
    },
    "02_exploring_proposals.ipynb": {
        "BUDGET": 7, "N_INITIAL": 4, "N_CELLS": 60, "NUM_RESTARTS": 2, "RAW_SAMPLES": 32,
        "SLICE_POINTS": 25, "MAP_POINTS": 12,
    },
    "04_pressure_scenario.ipynb": {
        "BUDGET": 8, "N_INITIAL": 6, "NUM_RESTARTS": 2, "RAW_SAMPLES": 32,
    },
    "03_wrapping_your_own_code.ipynb": {
        "BUDGET": 6, "N_INITIAL": 4, "N_CELLS": 50, "NUM_RESTARTS": 2, "RAW_SAMPLES": 32,
    },
}


def _parameters_cell(nb: nbformat.NotebookNode) -> nbformat.NotebookNode:
    for cell in nb.cells:
        if cell.cell_type == "code" and "parameters" in cell.metadata.get("tags", []):
            return cell
    raise AssertionError("no code cell tagged 'parameters'")


def _inject(nb: nbformat.NotebookNode, values: dict[str, object]) -> None:
    cell = _parameters_cell(nb)
    for name in values:
        # an injected name the notebook no longer uses would silently test nothing
        assert re.search(rf"^{name}\s*=", cell.source, flags=re.M), (
            f"parameter {name!r} is not set in the parameters cell"
        )
    lines = [f"{name} = {value!r}" for name, value in values.items()]
    cell.source += "\n\n# injected by tests/notebooks/test_notebooks.py\n" + "\n".join(lines) + "\n"


@pytest.fixture(scope="module")
def kernel_path(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A JUPYTER_PATH folder whose kernel spec 'python3' runs this interpreter."""
    root = tmp_path_factory.mktemp("jupyter")
    spec_dir = root / "kernels" / "python3"
    spec_dir.mkdir(parents=True)
    spec = {
        "argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
        "display_name": "Python 3 (test)",
        "language": "python",
    }
    (spec_dir / "kernel.json").write_text(json.dumps(spec), encoding="utf-8")
    return root


def test_every_notebook_has_settings() -> None:
    found = sorted(p.name for p in NOTEBOOKS.glob("*.ipynb"))
    assert found == sorted(SMALL), f"notebooks {found} vs settings for {sorted(SMALL)}"


@pytest.mark.parametrize("name", sorted(SMALL))
def test_committed_without_outputs(name: str) -> None:
    nb = nbformat.read(NOTEBOOKS / name, as_version=4)
    nbformat.validate(nb)
    for i, cell in enumerate(nb.cells):
        if cell.cell_type == "code":
            assert not cell.outputs and cell.execution_count is None, (
                f"{name} cell {i} carries outputs; clear them before committing"
            )


@pytest.mark.parametrize("name", sorted(SMALL))
def test_notebook_runs(name: str, kernel_path: Path, tmp_path: Path,
                       monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("JUPYTER_PATH", str(kernel_path))
    monkeypatch.setenv("MPLBACKEND", "Agg")
    # one math thread per process: the kernel and its worker processes share 2 cores, and
    # oversubscribed torch/OpenMP threads slowed the GP fits about tenfold on a busy machine
    monkeypatch.setenv("OMP_NUM_THREADS", "1")
    nb = nbformat.read(NOTEBOOKS / name, as_version=4)
    _inject(nb, SMALL[name])
    client = NotebookClient(nb, kernel_name="python3", timeout=CELL_TIMEOUT_S,
                            resources={"metadata": {"path": str(tmp_path)}})
    client.execute()  # raises CellExecutionError, naming the cell, on any error
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs
              if o.output_type == "error"]
    assert not errors
    images = sum("image/png" in o.get("data", {}) for c in nb.cells if c.cell_type == "code"
                 for o in c.outputs)
    assert images >= 2, f"{name}: expected figures in the outputs, found {images}"
