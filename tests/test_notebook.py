"""The bundled notebook runs in a real Jupyter kernel and displays the app as one widget view, which is
what JupyterLab and Voila both render."""

from __future__ import annotations

import nbformat
from nbclient import NotebookClient

from widgets.serve import notebook_path


def test_notebook_is_one_short_cell_that_displays_the_app(tmp_path, monkeypatch):
    nb = nbformat.read(notebook_path(), as_version=4)
    code = [c for c in nb.cells if c.cell_type == "code"]
    assert len(code) == 1 and len(code[0].source.splitlines()) <= 3
    monkeypatch.setenv("QUERY_STRING", "exam=ct-abdomen-pelvis&creatinine=1.4&age=60&sex=male")
    NotebookClient(nb, timeout=120, kernel_name="python3", resources={"metadata": {"path": str(tmp_path)}}).execute()
    outputs = code[0].outputs
    assert [o.output_type for o in outputs] == ["execute_result"]
    assert "application/vnd.jupyter.widget-view+json" in outputs[0].data
    assert "error" not in {o.output_type for o in outputs}
