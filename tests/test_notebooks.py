"""The worked notebooks stay runnable: each jupytext percent-format script in ``notebooks/``
is turned into a notebook and executed by a real Jupyter kernel (nbclient) on a small ensemble
(``EDDYHOP_QUICK=1``); every cell must run and every figure must reach the output as a PNG."""

from __future__ import annotations

from pathlib import Path

import pytest

NOTEBOOKS = sorted((Path(__file__).resolve().parent.parent / "notebooks").glob("*.py"))
# figures each notebook displays (one PNG output per display(...) of a Figure)
EXPECTED_FIGURES = {"start_positions.py": 3, "peclet_sweep_aging.py": 3}


def test_at_least_two_notebooks():
    assert len(NOTEBOOKS) >= 2
    assert {p.name for p in NOTEBOOKS} >= set(EXPECTED_FIGURES)


@pytest.mark.slow  # a Jupyter kernel per notebook: ~10-20 s each on two cores
@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_notebook_executes(path, tmp_path, monkeypatch):
    jupytext = pytest.importorskip("jupytext")
    nbclient = pytest.importorskip("nbclient")
    monkeypatch.setenv("EDDYHOP_QUICK", "1")
    monkeypatch.setenv("MPLBACKEND", "Agg")
    monkeypatch.setenv("TMPDIR", str(tmp_path))  # the sweep notebook's folder lands here
    notebook = jupytext.read(path)
    assert notebook.cells[0].cell_type == "markdown"
    client = nbclient.NotebookClient(notebook, timeout=600, kernel_name="python3",
                                     resources={"metadata": {"path": str(tmp_path)}})
    client.execute()
    outputs = [o for cell in notebook.cells if cell.cell_type == "code"
               for o in cell.get("outputs", [])]
    assert not [o for o in outputs if o.get("output_type") == "error"]
    pngs = [o for o in outputs if "image/png" in o.get("data", {})]
    assert len(pngs) == EXPECTED_FIGURES.get(path.name, len(pngs)) >= 1
    text = "".join(o.get("text", "") for o in outputs if o.get("output_type") == "stream")
    assert "nan" not in text.lower().replace("nano", "")
