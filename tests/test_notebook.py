"""The example notebook (docs/example.ipynb) executes from top to bottom in a fresh kernel
(nbclient), including the inline dashboard; any error fails the test."""

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def test_example_notebook_executes(tmp_path, monkeypatch):
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    nb = nbformat.read(ROOT / "docs" / "example.ipynb", as_version=4)
    monkeypatch.chdir(tmp_path)
    nbclient.NotebookClient(nb, timeout=300, kernel_name="python3",
                            resources={"metadata": {"path": str(tmp_path)}}).execute()
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs]
    assert not [o for o in outputs if o.output_type == "error"]
    text = " ".join(str(o.get("text", "")) + str(o.get("data", {}).get("text/plain", ""))
                    for o in outputs)
    assert "the conclusion changes" in text and "highly persistent" in text
    assert any("<iframe" in str(o.get("data", {}).get("text/html", "")) for o in outputs)
