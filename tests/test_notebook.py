"""The walkthrough notebook executes from top to bottom (nbclient), so it cannot go stale.

The notebook checks itself as it runs (the morphometry and the delineation agree on the
crossing's area; a higher channel threshold gives a shorter network — common practice, no
source); this test adds that it is committed with its outputs stripped.
"""

from pathlib import Path

import pytest

NOTEBOOK = Path(__file__).resolve().parents[1] / "notebooks" / "walkthrough.ipynb"


def test_notebook_is_committed_without_outputs():
    """Read with nbformat: every code cell without outputs or execution count, so the
    repository holds no stale results (common practice, no source)."""
    nbformat = pytest.importorskip("nbformat")
    nb = nbformat.read(NOTEBOOK, as_version=4)
    code = [c for c in nb.cells if c.cell_type == "code"]
    assert len(code) >= 6
    for c in code:
        assert c.outputs == [] and c.execution_count is None


def test_notebook_executes(tmp_path):
    """nbclient runs every cell in a fresh kernel: no error output, at least three figures
    and the longest-flow-path line printed (the notebook's own checks run inside it;
    common practice, no source)."""
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    pytest.importorskip("ipykernel", reason="ipykernel is needed to run the notebook")
    nb = nbformat.read(NOTEBOOK, as_version=4)
    client = nbclient.NotebookClient(nb, timeout=240, kernel_name="python3",
                                     resources={"metadata": {"path": str(tmp_path)}})
    client.execute()  # raises CellExecutionError with the cell and traceback on failure
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs]
    assert not [o for o in outputs if o.get("output_type") == "error"]
    images = [o for o in outputs if "image/png" in o.get("data", {})]
    assert len(images) >= 3  # the catchment map, profile + χ, the threshold comparison
    text = "".join(o.get("text", "") for o in outputs)
    assert "longest flow path" in text
