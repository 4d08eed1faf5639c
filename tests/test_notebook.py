"""The example notebook (tests/notebooks/sample_campaign.ipynb) runs from start to end with
nbclient, in a fresh kernel, so the documented Python API cannot drift from the code."""

from __future__ import annotations

from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")

NOTEBOOK = Path(__file__).parent / "notebooks" / "sample_campaign.ipynb"
pytestmark = pytest.mark.slow


def test_example_notebook_executes():
    nb = nbformat.read(NOTEBOOK, as_version=4)
    client = nbclient.NotebookClient(nb, timeout=300, kernel_name="python3",
                                     resources={"metadata": {"path": str(NOTEBOOK.parent)}})
    client.execute()  # raises CellExecutionError with the failing cell's traceback
    outputs = "".join(o.get("text", "") for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", []))
    assert "R3 reduces the VV RCS of the bare object by" in outputs
    assert "Conventions" not in outputs or "CF-1.8" in outputs
    # nothing written beside the notebook
    assert sorted(p.name for p in NOTEBOOK.parent.iterdir()) == ["sample_campaign.ipynb"]
