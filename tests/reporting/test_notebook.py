"""notebooks/explore_results.ipynb runs headless, top to bottom, on a real small run."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

NOTEBOOK = Path(__file__).resolve().parents[2] / "notebooks" / "explore_results.ipynb"

pytestmark = pytest.mark.slow


def test_notebook_is_committed_without_outputs():
    nb = json.loads(NOTEBOOK.read_text())
    code = [c for c in nb["cells"] if c["cell_type"] == "code"]
    assert code and all(not c["outputs"] and c["execution_count"] is None for c in code)
    assert any("HARNESS_RESULTS" in "".join(c["source"]) for c in code)


def test_notebook_executes(sweep_dir, monkeypatch):
    import nbformat
    from jupyter_client.kernelspec import KernelSpecManager
    from nbclient import NotebookClient

    # the "python3" kernel must be this interpreter (the venv), where harness is installed
    spec = KernelSpecManager().get_kernel_spec("python3")
    assert spec.argv[0] in ("python", "python3", sys.executable), spec.argv
    monkeypatch.setenv("HARNESS_RESULTS", str(sweep_dir))
    monkeypatch.setenv("PATH", str(Path(sys.executable).parent), prepend=":")
    nb = nbformat.read(NOTEBOOK, as_version=4)
    NotebookClient(
        nb, kernel_name="python3", timeout=300, resources={"metadata": {"path": str(NOTEBOOK.parent)}}
    ).execute()
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs]
    assert not [o for o in outputs if o.output_type == "error"]
    images = [o for o in outputs if "image/png" in o.get("data", {})]
    assert len(images) == 2  # the rank plot and the heatmap
    text = json.dumps([o.get("data", {}).get("text/plain", "") for o in outputs])
    assert "avg_rank" in text and "te_kfold" in text
