"""The notebooks run: every code cell of each notebook executes without error, in order."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

NOTEBOOKS = sorted((Path(__file__).resolve().parents[1] / "notebooks").glob("*.ipynb"))


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.name for p in NOTEBOOKS])
def test_notebook_runs(path, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # figures the notebook saves land here
    cells = json.loads(path.read_text(encoding="utf-8"))["cells"]
    namespace: dict = {}
    for i, cell in enumerate(cells):
        if cell["cell_type"] == "code":
            exec(compile("".join(cell["source"]), f"{path.name}[cell {i}]", "exec"), namespace)
    assert list(tmp_path.glob("*.png")), "the notebook should save its figure"


def test_there_is_a_notebook():
    assert NOTEBOOKS
