"""Every notebook runs top to bottom in a real kernel (nbclient), so none of them rots.

The notebooks are stored without outputs; running them here does not write them back.
"""

from __future__ import annotations

from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

ROOT = Path(__file__).parents[1]
NOTEBOOKS = sorted((ROOT / "notebooks").glob("*.ipynb"))


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.name for p in NOTEBOOKS])
def test_notebook_runs_and_is_stored_without_outputs(path, monkeypatch):
    nb = nbformat.read(path, as_version=4)
    for cell in nb.cells:
        if cell.cell_type == "code":
            assert not cell.get("outputs"), f"{path.name}: stored with outputs"
    monkeypatch.setenv("MPLBACKEND", "Agg")
    client = NotebookClient(nb, timeout=600, kernel_name="python3",
                            resources={"metadata": {"path": str(ROOT)}})
    client.execute()
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])
              if o.get("output_type") == "error"]
    assert not errors


def test_there_are_six_notebooks():
    assert len(NOTEBOOKS) >= 6
