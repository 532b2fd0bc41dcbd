"""The example notebook runs from top to bottom (nbclient, as Jupyter would run it)."""

from __future__ import annotations

import nbformat
from nbclient import NotebookClient

from conftest import ROOT


def test_the_example_notebook_runs():
    path = ROOT / "examples" / "python" / "from_python.ipynb"
    notebook = nbformat.read(path, as_version=4)
    NotebookClient(notebook, timeout=600, kernel_name="python3",
                   resources={"metadata": {"path": str(path.parent)}}).execute()
    outputs = [o for cell in notebook.cells if cell.cell_type == "code" for o in cell.get("outputs", [])]
    assert not [o for o in outputs if o.get("output_type") == "error"]
    text = "".join(str(o.get("text", "")) + str(o.get("data", {}).get("text/plain", "")) for o in outputs)
    assert "share upper" in text and "gain_rate" in text
