"""The analyst's notebook runs top to bottom (nbclient), on a reduced replicate count."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

NOTEBOOK = Path(__file__).resolve().parents[1] / "notebooks" / "school_meals_survey.ipynb"


@pytest.mark.slow
def test_notebook_runs_top_to_bottom(tmp_path, monkeypatch):
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    pytest.importorskip("ipykernel")
    # a kernel spec for this very interpreter, so the notebook sees the installed samplewright
    # whatever other kernels the machine has (a fresh CI machine may have none)
    spec = tmp_path / "jupyter" / "kernels" / "samplewright-test"
    spec.mkdir(parents=True)
    (spec / "kernel.json").write_text(
        json.dumps(
            {
                "argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
                "display_name": "samplewright test",
                "language": "python",
            }
        )
    )
    monkeypatch.setenv("JUPYTER_PATH", str(tmp_path / "jupyter"))
    monkeypatch.setenv("SAMPLEWRIGHT_NOTEBOOK_REPLICATES", "200")
    monkeypatch.setenv("SAMPLEWRIGHT_NOTEBOOK_OUT", str(tmp_path))
    monkeypatch.setenv("PYDEVD_DISABLE_FILE_VALIDATION", "1")
    nb = nbformat.read(NOTEBOOK, as_version=4)
    client = nbclient.NotebookClient(
        nb, timeout=600, kernel_name="samplewright-test", resources={"metadata": {"path": str(tmp_path)}}
    )
    client.execute()  # raises CellExecutionError on the first failing cell
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])]
    assert not [o for o in outputs if o.get("output_type") == "error"]
    images = [o for o in outputs if "image/png" in o.get("data", {})]
    assert len(images) >= 4  # the figures the notebook reads show inline
    text = "".join(o.get("text", "") for o in outputs if o.get("output_type") == "stream")
    assert "200 replicates per design and size" in text
    results = tmp_path / "results"
    for name in (
        "summary.csv",
        "replicates.parquet",
        "frontier.csv",
        "recommendation.json",
        "run.json",
        "report.html",
        "brief.md",
    ):
        assert (results / name).exists(), name
    assert json.loads((results / "run.json").read_text())["replicates"] == 200
