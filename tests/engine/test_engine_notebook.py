"""The engine example notebook runs top to bottom in a real kernel (nbclient), on a smaller file.

Reference for its numbers: the pandas path on the same file (read whole, which is
fine at this size) — the notebook's exact Spread columns must equal it.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import nbformat
import numpy as np
import pandas as pd
import pytest
from nbclient import NotebookClient

NOTEBOOK = Path(__file__).resolve().parents[2] / "example_notebooks" / "greenhouse_engine.ipynb"


@pytest.mark.slow
def test_engine_notebook_runs_and_labels_exactness(tmp_path, monkeypatch):
    shutil.copy(NOTEBOOK, tmp_path / NOTEBOOK.name)
    nb = nbformat.read(tmp_path / NOTEBOOK.name, as_version=4)
    monkeypatch.setenv("NBEDA_DEMO_ROWS", "250000")  # the kernel inherits it; sample is 100,000 rows
    NotebookClient(nb, timeout=600, kernel_name="python3", resources={"metadata": {"path": str(tmp_path)}}).execute()
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs if o.output_type == "error"]
    assert not errors, errors
    widget_out = nb.cells[2].outputs
    assert any("application/vnd.jupyter.widget-view+json" in o.get("data", {}) for o in widget_out)
    # The exactness table names exact and sample-based numbers.
    html = "".join(o.get("data", {}).get("text/html", "") for o in nb.cells[4].outputs)
    assert "exact (all rows, by the engine)" in html and "sample (" in html
    # The emitted code printed by the last code cell reopens the file with ibis.
    printed = "".join(o.get("text", "") for o in nb.cells[-2].outputs)
    assert "ibis.duckdb.connect" in printed and "spread = exact_spread(" in printed
    # Exact numbers equal the pandas path on the whole file (reference: pandas).
    path = tmp_path / "greenhouse_250000.parquet"
    df = pd.read_parquet(path)
    assert len(df) == 250_000 and df["plot_id"].is_unique
    import nbeda

    eng = nbeda.source(str(path)).spread().table
    ref = df.eda.spread().table
    for col in ("count", "mean", "std", "min", "max", "median", "q1", "q3", "sum"):
        np.testing.assert_allclose(eng[col].astype(float), ref[col].astype(float), rtol=1e-9)
    assert not os.path.exists(tmp_path / ".tmp")  # DuckDB spills outside the user's folder
