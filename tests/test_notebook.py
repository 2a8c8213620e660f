"""The notebook runs: ``notebooks/walkthrough.ipynb`` executed by a real Jupyter kernel on a small scene.

nbclient drives an ipykernel ``python3`` kernel (the interpreter running the tests) through every cell,
after the parameter cell's source is replaced in memory by a small scene. Checks: the notebook is valid
nbformat >= 4.5 with a unique id on every cell (nbformat's own schema validation), it is committed
without outputs, every code cell ran without error, the figures were shown inline (``image/png``
outputs), and nothing was written to the working directory.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

import unmix

NOTEBOOK = Path(__file__).resolve().parents[1] / "notebooks" / "walkthrough.ipynb"
#: The small run of the test suite (the notebook's own defaults are for reading).
SMALL = {"SIZE": 48, "N_TIME": 16}
#: Inline figures each cell must show: the cells that display the report's figures (cell id -> count).
FIGURES = {"spectra": 1, "quality-maps": 2, "composites": 2, "trend-maps": 4, "series": 2, "agreement": 1}


def _read():
    return nbformat.read(NOTEBOOK, as_version=nbformat.NO_CONVERT)


def _parameter_cell(nb):
    tagged = [c for c in nb.cells if "parameters" in c.get("metadata", {}).get("tags", [])]
    assert len(tagged) == 1, "the notebook needs exactly one code cell tagged 'parameters'"
    return tagged[0]


@pytest.fixture(scope="module")
def executed(tmp_path_factory):
    """The notebook run on the small scene in an empty working directory: (notebook, directory, executable)."""
    nb = _read()
    cell = _parameter_cell(nb)
    cell.source = "\n".join(f"{k} = {v}" for k, v in SMALL.items()) + "\nSEED = 7"
    probe = nbformat.v4.new_code_cell("import sys\nprint(sys.executable)")
    probe.id = "test-probe-executable"
    nb.cells.append(probe)
    workdir = tmp_path_factory.mktemp("notebook_cwd")
    # the kernel imports the same unmix as the tests (a checkout or a worktree ahead of an installed copy)
    root = str(Path(unmix.__file__).resolve().parents[1])
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([root, *filter(None, [os.environ.get("PYTHONPATH")])])}
    env.pop("MPLBACKEND", None)
    client = NotebookClient(nb, kernel_name="python3", timeout=900, allow_errors=False,
                            resources={"metadata": {"path": str(workdir)}})
    client.execute(env=env)  # passed on to the kernel manager's start_kernel
    executable = "".join(o.get("text", "") for o in nb.cells[-1].outputs if o.output_type == "stream").strip()
    nb.cells.pop()
    return nb, workdir, executable


def test_notebook_is_valid_with_cell_ids():
    nb = _read()
    nbformat.validate(nb)  # the nbformat schema: from 4.5 on, every cell must carry a valid id
    assert (nb.nbformat, nb.nbformat_minor) >= (4, 5)
    ids = [c.get("id") for c in nb.cells]
    assert all(ids) and len(set(ids)) == len(ids)
    source = _parameter_cell(nb).source
    assert all(f"{k} =" in source for k in SMALL)
    assert nb.metadata["kernelspec"]["name"] == "python3"


def test_notebook_is_committed_without_outputs():
    for cell in _read().cells:
        if cell.cell_type == "code":
            assert cell.outputs == [] and cell.execution_count is None, f"cell {cell.id} keeps outputs; clear them"


def test_notebook_shows_figures_and_saves_none():
    sources = "\n".join(c.source for c in _read().cells if c.cell_type == "code")
    assert "savefig" not in sources and "to_csv" not in sources and "write_" not in sources


def test_kernel_is_the_tests_interpreter(executed):
    _, _, executable = executed
    assert Path(executable).resolve() == Path(sys.executable).resolve()


def test_every_cell_ran_without_error(executed):
    nb, _, _ = executed
    for cell in nb.cells:
        if cell.cell_type != "code":
            continue
        assert cell.execution_count is not None, f"cell {cell.id} did not run"
        errors = [o for o in cell.outputs if o.output_type == "error"]
        assert not errors, f"cell {cell.id}: {errors[0]['ename']}: {errors[0]['evalue']}"
        stderr = [o.text for o in cell.outputs if o.output_type == "stream" and o.name == "stderr"]
        assert not stderr, f"cell {cell.id} wrote to stderr: {stderr[0][:300]}"


def test_figures_are_displayed_inline(executed):
    nb, _, _ = executed
    cells = {c.id: c for c in nb.cells}
    for cid, count in FIGURES.items():
        images = [o for o in cells[cid].outputs if "image/png" in o.get("data", {})]
        assert len(images) == count, f"cell {cid} shows {len(images)} figures, expected {count}"
    # tables are shown as tables (pandas' HTML), e.g. the date ledger
    assert any("text/html" in o.get("data", {}) for o in cells["ledger"].outputs)


def test_notebook_writes_no_file(executed):
    _, workdir, _ = executed
    assert sorted(p.name for p in workdir.iterdir()) == []
