"""The notebooks run top to bottom (code cells executed in order in one namespace).

A kernel-based run (nbclient) comes with the notebook work; this keeps them from rotting now.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

NOTEBOOKS = sorted((Path(__file__).parents[1] / "notebooks").glob("*.ipynb"))


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.name for p in NOTEBOOKS])
def test_notebook_runs_and_is_stored_without_outputs(path, monkeypatch):
    nb = json.loads(path.read_text())
    monkeypatch.chdir(path.parents[1])
    ns: dict = {}
    for cell in nb["cells"]:
        if cell["cell_type"] != "code":
            continue
        assert not cell.get("outputs"), f"{path.name}: stored with outputs"
        exec(compile("".join(cell["source"]), f"{path.name}", "exec"), ns)  # noqa: S102


def test_there_is_a_notebook():
    assert NOTEBOOKS
