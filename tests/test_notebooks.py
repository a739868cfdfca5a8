"""Every worked notebook runs from top to bottom, and is saved without outputs.

The notebooks under ``notebooks/`` are written by ``notebooks/generate.py``; this file executes
each one in a fresh ``python3`` kernel with nbclient (so a change in the library that breaks a
worked example fails the suite), checks that the saved files carry no outputs or execution
counts, and that they equal what the generator writes (so nobody hand-edits one copy).
"""

from __future__ import annotations

import importlib.util
import time
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

ROOT = Path(__file__).resolve().parents[1]
NB_DIR = ROOT / "notebooks"
NOTEBOOKS = sorted(NB_DIR.glob("*.ipynb"))
#: Per-cell time limit; every notebook runs in a few seconds on two cores.
CELL_TIMEOUT_S = 120


def _generator():
    spec = importlib.util.spec_from_file_location("notebook_generator", NB_DIR / "generate.py")
    assert spec is not None and spec.loader is not None
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_there_are_at_least_three_worked_notebooks():
    assert len(NOTEBOOKS) >= 3, [p.name for p in NOTEBOOKS]


def test_saved_notebooks_equal_the_generator_output():
    gen = _generator()
    assert sorted(gen.NOTEBOOKS) == [p.name for p in NOTEBOOKS]
    for path in NOTEBOOKS:
        saved = path.read_text(encoding="utf-8")
        assert saved == gen.render(gen.NOTEBOOKS[path.name]), (
            f"{path.name} differs from notebooks/generate.py; run `python notebooks/generate.py`"
        )


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_saved_notebook_has_no_outputs(path):
    nb = nbformat.read(path, as_version=4)
    nbformat.validate(nb)
    assert nb.metadata["kernelspec"]["name"] == "python3"
    for cell in nb.cells:
        if cell.cell_type == "code":
            assert cell.outputs == [], f"{path.name}: cell {cell.id} has saved outputs"
            assert cell.execution_count is None, f"{path.name}: cell {cell.id} has a count"


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_notebook_states_question_and_caution(path):
    nb = nbformat.read(path, as_version=4)
    markdown = [c.source for c in nb.cells if c.cell_type == "markdown"]
    code = "\n".join(c.source for c in nb.cells if c.cell_type == "code")
    assert markdown[0].startswith("# "), "the first cell states the question as a title"
    assert any(s.startswith("## Caution") for s in markdown), "no '## Caution' section"
    assert "invented" in "\n".join(markdown).lower()
    # each notebook fits, builds restrictions with the builder and tests them
    assert "lc.fit(" in code and ".wald(" in code
    assert "==" in code and "&" in code
    assert "lc.term(" in code or "lc.coef(" in code


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_notebook_executes(path, tmp_path, monkeypatch):
    # the kernel's own inline backend must draw the charts, whatever the test process uses
    monkeypatch.delenv("MPLBACKEND", raising=False)
    nb = nbformat.read(path, as_version=4)
    client = NotebookClient(
        nb,
        timeout=CELL_TIMEOUT_S,
        kernel_name="python3",
        resources={"metadata": {"path": str(tmp_path)}},
    )
    start = time.perf_counter()
    client.execute()  # raises CellExecutionError, naming the cell, if any cell fails
    elapsed = time.perf_counter() - start
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs]
    assert not [o for o in outputs if o.output_type == "error"]
    # every code cell ran, in order
    counts = [c.execution_count for c in nb.cells if c.cell_type == "code"]
    assert counts == list(range(1, len(counts) + 1))
    # every cell that draws shows its picture (exactly once), and results show their HTML form
    for cell in nb.cells:
        if cell.cell_type == "code" and ".plot(" in cell.source:
            pngs = [o for o in cell.outputs if "image/png" in o.get("data", {})]
            assert len(pngs) == 1, f"{path.name}, cell {cell.id}: {len(pngs)} pictures shown"
    assert any("lincomb-" in o.get("data", {}).get("text/html", "") for o in outputs)
    assert elapsed < 60, f"{path.name} took {elapsed:.1f} s; keep notebooks quick"
