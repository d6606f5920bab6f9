"""The notebooks are stored without outputs and run top to bottom (nbclient), so they cannot rot.

References: ``nbformat`` validates each file against the Jupyter notebook JSON
schema; ``nbclient`` executes it in a fresh IPython kernel (``ipykernel``); the
notebooks' own checks compare against scikit-learn (``Ridge``) and the published
min-norm risk (Hastie, Montanari, Rosset & Tibshirani, *Ann. Statist.* 2022).
"""
from __future__ import annotations

from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")
pytest.importorskip("ipykernel")

NOTEBOOKS = sorted((Path(__file__).resolve().parents[1] / "notebooks").glob("*.ipynb"))


def test_there_are_the_three_notebooks():
    names = [p.name for p in NOTEBOOKS]
    assert len(names) >= 3
    for key in ("tour", "threshold", "pipeline"):
        assert any(key in n for n in names), names


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_stored_without_outputs(path):
    nb = nbformat.read(path, as_version=4)
    nbformat.validate(nb)
    for cell in nb.cells:
        if cell.cell_type == "code":
            assert cell.outputs == [] and cell.execution_count is None, path.name


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_runs_top_to_bottom(path, tmp_path):
    nb = nbformat.read(path, as_version=4)
    client = nbclient.NotebookClient(nb, timeout=180, kernel_name="python3",
                                     resources={"metadata": {"path": str(tmp_path)}})
    client.execute()  # raises CellExecutionError on any error
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs
              if o.output_type == "error"]
    assert errors == []
    # something was shown: text or a figure from the last cell
    last = [c for c in nb.cells if c.cell_type == "code"][-1]
    assert last.outputs, path.name
    # figures are shown inline as images (Jupyter's image/png output), never as a repr
    shown = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs]
    texts = " ".join(str(o.get("data", {}).get("text/plain", "")) + str(o.get("text", ""))
                     for o in shown)
    assert "<Figure size" not in texts
    if any("figure" in c.source for c in nb.cells if c.cell_type == "code"):
        assert any("image/png" in o.get("data", {}) for o in shown), path.name
