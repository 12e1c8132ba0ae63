"""The walkthrough notebook executes without error (so it cannot rot)."""

from pathlib import Path

import pytest

NOTEBOOK = Path(__file__).resolve().parents[2] / "notebooks" / "walkthrough.ipynb"


@pytest.mark.timeout(300)
def test_walkthrough_executes(tmp_path):
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    nb = nbformat.read(str(NOTEBOOK), as_version=4)
    client = nbclient.NotebookClient(nb, timeout=240, kernel_name="python3",
                                     resources={"metadata": {"path": str(tmp_path)}})
    client.execute()  # raises CellExecutionError on any failing cell
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])]
    assert not [o for o in outputs if o.get("output_type") == "error"]
    # the pictures are there: matplotlib figures rendered as PNG
    assert sum("image/png" in o.get("data", {}) for o in outputs) >= 4


def test_notebook_matches_its_builder():
    """The committed notebook is what notebooks/build_walkthrough.py produces (no hand edits lost)."""
    import importlib.util

    nbformat = pytest.importorskip("nbformat")
    spec = importlib.util.spec_from_file_location("build_walkthrough", NOTEBOOK.with_name("build_walkthrough.py"))
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    committed = nbformat.read(str(NOTEBOOK), as_version=4)
    assert [c.source for c in committed.cells] == [src for _, src in mod.CELLS]
