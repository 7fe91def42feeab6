"""Execute the worked notebooks in notebooks/ (as CI does) and check that every cell runs.

Each notebook holds its own assertion cells (e.g. an exported circuit reproduces the fitted
state, a measured oscillation frequency agrees with a spectral gap); an AssertionError there
fails the test like any other cell error.
"""

from __future__ import annotations

import os
import shutil
import time
from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")
pytest.importorskip("ipykernel")

NOTEBOOKS = Path(__file__).resolve().parent.parent / "notebooks"
CELL_TIMEOUT = 600  # seconds per cell: generous for a loaded CI machine; the notebooks take ~1 min


@pytest.mark.parametrize("name", ["lab_depth_sizing.ipynb", "confinement_sweep.ipynb"])
def test_notebook_runs(name, tmp_path, monkeypatch):
    source = NOTEBOOKS / name
    work = tmp_path / "work"
    work.mkdir()
    shutil.copy(source, work / name)
    nb = nbformat.read(work / name, as_version=4)
    assert not any(cell.get("outputs") for cell in nb.cells if cell.cell_type == "code"), \
        f"{name} is stored with outputs; clear them before committing"
    monkeypatch.setenv("MPLBACKEND", "Agg")
    monkeypatch.setenv("FLUXLINE_CACHE_DIR", str(tmp_path / "cache"))
    monkeypatch.setenv("PYTHONPATH", os.pathsep.join(filter(None, [str(NOTEBOOKS.parent),
                                                                 os.environ.get("PYTHONPATH")])))
    client = nbclient.NotebookClient(nb, timeout=CELL_TIMEOUT, kernel_name="python3",
                                     resources={"metadata": {"path": str(work)}})
    started = time.perf_counter()
    client.execute()  # raises CellExecutionError (with the cell's traceback) on any error
    seconds = time.perf_counter() - started
    # execute() raises on any failing cell; what is left to check is that the notebook checks
    # something (its own asserts against exact results) and that it ran to its last cell
    code = [cell for cell in nb.cells if cell.cell_type == "code"]
    assert sum(cell.source.count("assert ") for cell in code) >= 3, f"{name} asserts nothing"
    last = "".join(out.get("text", "") for out in code[-1].get("outputs", []) if out.get("output_type") == "stream")
    assert "notebook ran in" in last, f"{name} did not reach its last cell"
    print(f"{name}: executed in {seconds:.1f} s")
