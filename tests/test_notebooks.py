"""The example notebooks run headless from top to bottom (nbclient), so they never rot.

Each runs in a temporary copy of example_notebooks/ beside a link to the repository's plans/,
so whatever a notebook writes stays out of the work tree.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

import planview

REPO = Path(__file__).resolve().parent.parent
NOTEBOOKS = REPO / "example_notebooks"


def run(name: str, tmp_path: Path):
    (tmp_path / "plans").symlink_to(REPO / "plans")
    folder = tmp_path / "example_notebooks"
    folder.mkdir()
    shutil.copy(NOTEBOOKS / name, folder / name)
    nb = nbformat.read(folder / name, as_version=4)
    NotebookClient(nb, timeout=180, kernel_name="python3", resources={"metadata": {"path": str(folder)}}).execute()
    return nb, folder


def outputs(nb, kind: str) -> list[str]:
    found = []
    for cell in nb.cells:
        for out in cell.get("outputs", []):
            if out.get("output_type") == "error":
                raise AssertionError(f"{out['ename']}: {out['evalue']}")
            if kind == "stream" and out.get("output_type") == "stream":
                found.append(out["text"])
            if kind != "stream" and kind in out.get("data", {}):
                found.append(out["data"][kind])
    return found


def test_walkthrough_runs_and_shows_reviews(tmp_path):
    nb, folder = run("review_walkthrough.ipynb", tmp_path)
    streams = "".join(outputs(nb, "stream"))
    assert len(outputs(nb, "application/vnd.jupyter.widget-view+json")) >= 3
    static = outputs(nb, "text/html")
    assert any("Plan review" in h for h in static)  # the fallback for viewers with no widgets
    assert "planview: " in streams and "Traceback" not in streams  # the bad-input cell: one line
    # the review opens on the origin of rank 1 (the view keeps the report's ranking); no click
    # happened, so that is what the kernel sees
    multi = planview.load(REPO / "plans" / "postgresql" / "pg16" / "multi.json")
    top = min(multi.findings, key=lambda f: f.rank)
    assert f"selected: {top.node} {multi.nodes[top.node].label}" in streams
    stale = planview.load(REPO / "plans" / "postgresql" / "pg16" / "stale.json")
    assert (folder / "stale-review.html").read_text() == stale.to_html()


def test_duckdb_notebook_runs_a_live_query(tmp_path):
    pytest.importorskip("duckdb")
    nb, _ = run("duckdb_live.ipynb", tmp_path)
    streams = "".join(outputs(nb, "stream"))
    assert "planview: duckdb" in streams
    assert outputs(nb, "application/vnd.jupyter.widget-view+json")
    line = next(s for s in streams.splitlines() if s.startswith("selected: "))
    assert line.split()[1].isdigit()  # the review found an origin in DuckDB's own profile
