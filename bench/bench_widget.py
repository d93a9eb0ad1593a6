"""How fast the review draws a 5,000-operator plan, and how big its offline page is.

Run: ``python bench/bench_widget.py [--operators 5000]``. It generates a PostgreSQL JSON plan
(a balanced tree of hash joins over scans, with a few planted misestimates), then, with
Debian's Chromium driven by Playwright:

- opens the exported page from file:// (network blocked) and times navigation start to the
  tree drawn;
- starts JupyterLab, and times from running a cell to the tree drawn in its output, both for
  ``planview.review(plan)`` on a plan loaded in an earlier cell and for loading and reviewing
  in one cell.

Goals: under 1 s to the tree drawn, under 2 MB for the page. It prints the figures; it is a
script, not a test.
"""

from __future__ import annotations

import argparse
import json
import random
import statistics
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))

TABLES = ["parcels", "depots", "drivers", "routes", "stops", "vans", "shifts", "customers"]


def generate_plan(operators: int, seed: int = 7) -> list:
    """A PostgreSQL EXPLAIN (ANALYZE, FORMAT JSON) document with about `operators` nodes."""
    rng = random.Random(seed)
    counter = [0]
    planted = set(rng.sample(range(operators // 2), 20))

    def scan() -> dict:
        counter[0] += 1
        table = rng.choice(TABLES)
        est = rng.randint(10, 50_000)
        actual = est * (rng.choice([40, 300, 0.01]) if counter[0] in planted else rng.uniform(0.6, 1.6))
        return {"Node Type": "Seq Scan", "Parent Relationship": "Outer", "Parallel Aware": False,
                "Relation Name": table, "Alias": f"{table[0]}{counter[0]}", "Startup Cost": 0.0,
                "Total Cost": est / 10, "Plan Rows": est, "Plan Width": 16,
                "Actual Startup Time": 0.01, "Actual Total Time": est / 1000,
                "Actual Rows": max(0, int(actual)), "Actual Loops": 1,
                "Filter": f"(zone_{counter[0] % 17} = 'north')", "Rows Removed by Filter": rng.randint(0, 500)}

    def build(leaves: int) -> dict:
        if leaves == 1:
            return scan()
        left, right = build(leaves // 2), build(leaves - leaves // 2)
        right["Parent Relationship"] = "Inner"
        est = max(1, int(min(left["Plan Rows"], right["Plan Rows"]) * rng.uniform(0.5, 2)))
        actual = max(0, int(min(left["Actual Rows"], right["Actual Rows"]) * rng.uniform(0.5, 2)))
        hashed = {"Node Type": "Hash", "Parent Relationship": "Inner", "Parallel Aware": False,
                  "Startup Cost": 1.0, "Total Cost": 2.0, "Plan Rows": right["Plan Rows"], "Plan Width": 16,
                  "Actual Startup Time": 0.1, "Actual Total Time": 0.1, "Actual Rows": right["Actual Rows"],
                  "Actual Loops": 1, "Plans": [right]}
        return {"Node Type": "Hash Join", "Parent Relationship": "Outer", "Parallel Aware": False,
                "Join Type": "Inner", "Startup Cost": 1.0, "Total Cost": 100.0, "Plan Rows": est,
                "Plan Width": 32, "Actual Startup Time": 0.5, "Actual Total Time": 5.0,
                "Actual Rows": actual, "Actual Loops": 1,
                "Hash Cond": f"(a{counter[0]}.id = b{counter[0]}.ref)", "Plans": [left, hashed]}

    root = build(max(2, (operators + 2) // 3))
    root.pop("Parent Relationship", None)
    return [{"Plan": root, "Planning Time": 12.0, "Triggers": [], "Execution Time": 900.0}]


def bench_export(plan, repeats: int) -> dict:
    from browser_harness import browser_context, offline

    folder = Path(tempfile.mkdtemp(prefix="planview-bench-"))
    page_path = folder / "review.html"
    started = time.perf_counter()
    html = plan.to_html(page_path)
    write_s = time.perf_counter() - started
    drawn = []
    with browser_context() as context:
        offline(context)
        for _ in range(repeats):
            page = context.new_page()
            started = time.perf_counter()
            page.goto(page_path.as_uri(), wait_until="commit")
            page.wait_for_selector(".pv-review[data-drawn]", timeout=30_000)
            wall = time.perf_counter() - started
            page.wait_for_selector(".pv-review[data-painted-ms]", timeout=30_000)
            in_page = float(page.locator(".pv-review").get_attribute("data-painted-ms"))
            drawn.append((wall * 1000, in_page))
            page.close()
    return {"bytes": len(html.encode("utf-8")), "write_s": write_s, "drawn": drawn}


def bench_lab(document_path: Path, repeats: int) -> dict:
    import nbformat
    from browser_harness import browser_context, jupyter_lab, run_all_cells, wait_kernel_idle

    root = Path(tempfile.mkdtemp(prefix="planview-bench-lab-"))
    (root / "plan.json").write_text(document_path.read_text())
    nb = nbformat.v4.new_notebook()
    nb.cells = [
        nbformat.v4.new_code_cell("import planview\nplan = planview.load('plan.json')\nplan"),
        nbformat.v4.new_code_cell("planview.review(plan)"),
        nbformat.v4.new_code_cell("planview.review('plan.json')"),
    ]
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nbformat.write(nb, root / "bench.ipynb")
    results = {"review": [], "load_and_review": []}
    with jupyter_lab(root) as lab, browser_context() as context:
        page = context.new_page()
        page.goto(lab.url("lab/tree/bench.ipynb"))
        run_all_cells(page)  # warm: kernel, widget manager, the modules loaded once
        page.locator(".pv-review[data-drawn]").nth(2).wait_for(timeout=120_000)
        page.locator(".js-plotly-plot").nth(2).wait_for(timeout=120_000)
        wait_kernel_idle(page)
        cells = page.locator(".jp-Notebook .jp-Cell")
        for _ in range(repeats):
            for index, key in ((1, "review"), (2, "load_and_review")):
                cell = cells.nth(index)
                cell.locator(".jp-InputArea-editor").click()
                page.evaluate("i => { window.__pvBench = performance.now(); }", index)
                page.keyboard.press("Control+Enter")
                page.wait_for_function(
                    """i => {
                        const c = document.querySelectorAll('.jp-Notebook .jp-Cell')[i];
                        const el = c && c.querySelector('.pv-review[data-drawn]');
                        if (!el) return false;
                        if (!el.__pvSeen) { el.__pvSeen = performance.now() - window.__pvBench; }
                        return true;
                    }""", arg=index, timeout=120_000, polling="raf")
                elapsed = page.evaluate(
                    "i => document.querySelectorAll('.jp-Notebook .jp-Cell')[i].querySelector('.pv-review').__pvSeen",
                    index)
                results[key].append(elapsed)
                # the charts follow the tree; let them land before the next run is timed
                page.wait_for_function(
                    "i => document.querySelectorAll('.jp-Notebook .jp-Cell')[i].querySelector('.js-plotly-plot')",
                    arg=index, timeout=120_000)
                wait_kernel_idle(page)
    return results


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--operators", type=int, default=5000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--skip-lab", action="store_true")
    args = parser.parse_args(argv)

    import planview

    document = generate_plan(args.operators)
    folder = Path(tempfile.mkdtemp(prefix="planview-bench-plan-"))
    document_path = folder / "plan.json"
    document_path.write_text(json.dumps(document))
    started = time.perf_counter()
    plan = planview.load(document_path)
    load_s = time.perf_counter() - started
    print(f"plan: {len(plan.nodes):,} operators, {len(plan.findings)} origins; "
          f"planview.load {load_s * 1000:.0f} ms")

    export = bench_export(plan, args.repeats)
    walls = [w for w, _ in export["drawn"]]
    pages = [p for _, p in export["drawn"]]
    print(f"export page: {export['bytes'] / 1e6:.2f} MB (goal < 2 MB), written in {export['write_s'] * 1000:.0f} ms")
    print(f"export page, navigation start to the first frame with the tree: median "
          f"{statistics.median(pages):.0f} ms ({', '.join(f'{p:.0f}' for p in pages)}) (goal < 1000 ms)")
    print(f"export page, goto() to the tree seen by Playwright (charts drawn too): median "
          f"{statistics.median(walls):.0f} ms ({', '.join(f'{p:.0f}' for p in walls)})")
    if not args.skip_lab:
        lab = bench_lab(document_path, args.repeats)
        for key, label in (("review", "planview.review(plan), plan loaded before"),
                           ("load_and_review", "planview.review('plan.json'), load included")):
            values = lab[key]
            print(f"JupyterLab, run cell to tree drawn, {label}: median {statistics.median(values):.0f} ms "
                  f"({', '.join(f'{v:.0f}' for v in values)})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
