"""Speed of planview.load on a generated 10,000-operator PostgreSQL plan.

Prints, in one run, the ratio of `planview.load` time to a bare `json.loads` of the same
JSON text, and to one regex pass over the lines of the same plan in text format.
Floor: at most 3x and 5x. Goal: 1.5x and 3x.

Run: python bench/bench_parse.py [--operators N] [--repeat R]
"""

from __future__ import annotations

import argparse
import json
import re
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import planview  # noqa: E402


def generate(operators: int) -> tuple[str, str]:
    """A balanced plan of hash joins over filtered scans, as JSON and as text."""
    counter = iter(range(10**9))

    def scan(depth: int) -> dict:
        i = next(counter)
        return {"Node Type": "Seq Scan", "Parent Relationship": "Outer", "Parallel Aware": False,
                "Async Capable": False, "Relation Name": f"t{i}", "Alias": f"t{i}",
                "Startup Cost": 0.0, "Total Cost": 35.5, "Plan Rows": 1000 + i, "Plan Width": 8,
                "Actual Startup Time": 0.01, "Actual Total Time": 0.5, "Actual Rows": 900 + i,
                "Actual Loops": 1, "Filter": f"(t{i}.x > {i})", "Rows Removed by Filter": 100,
                "Shared Hit Blocks": 5, "Shared Read Blocks": 0}

    def build(n: int) -> dict:
        """n operators: a join, its hash, and the two sides sharing the rest."""
        if n <= 2:
            return scan(0)
        rest = n - 2  # this join and its Hash
        left = max(1, rest - rest // 2)
        right = max(1, rest // 2)
        i = next(counter)
        hash_node = {"Node Type": "Hash", "Parent Relationship": "Inner", "Parallel Aware": False,
                     "Startup Cost": 1.0, "Total Cost": 2.0, "Plan Rows": 1000, "Plan Width": 8,
                     "Actual Startup Time": 0.1, "Actual Total Time": 0.1, "Actual Rows": 950,
                     "Actual Loops": 1, "Plans": [build(right)]}
        return {"Node Type": "Hash Join", "Parent Relationship": "Outer", "Parallel Aware": False,
                "Join Type": "Inner", "Startup Cost": 1.0, "Total Cost": 99.0, "Plan Rows": 2000,
                "Plan Width": 16, "Actual Startup Time": 0.2, "Actual Total Time": 3.0,
                "Actual Rows": 1800 + i, "Actual Loops": 1, "Hash Cond": f"(a{i}.id = b{i}.id)",
                "Plans": [build(left), hash_node]}

    root = build(operators)
    root.pop("Parent Relationship", None)
    doc = [{"Plan": root, "Planning Time": 1.0, "Triggers": [], "Execution Time": 10.0}]
    json_text = json.dumps(doc, indent=2)
    parsed = planview.load(json_text)
    lines = []
    for node in parsed.nodes:
        pad = "" if node.depth == 0 else "  " + "      " * (node.depth - 1) + "->  "
        detail = " " * (len(pad) + 2 if node.depth else 2)
        lines.append(f"{pad}{node.label}  (cost={node.startup_cost:.2f}..{node.total_cost:.2f} "
                     f"rows={node.est_rows:.0f} width={node.width:.0f}) (actual time=0.010..0.500 "
                     f"rows={node.actual_rows:.0f} loops={node.starts:.0f})")
        for cond in node.conditions:
            lines.append(f"{detail}{cond.key}: {cond.text}")
        for key, count in node.rows_removed.items():
            lines.append(f"{detail}Rows Removed by {key}: {count:.0f}")
    lines += ["Planning Time: 1.000 ms", "Execution Time: 10.000 ms"]
    return json_text, "\n".join(lines)


# Two baselines of "one regex pass over the lines":
# FIGURES_RE finds only an operator line's figures (the least a reader could do);
# LINE_RE reads what a parser needs from every line: indentation, arrow, label, figures.
FIGURES_RE = re.compile(r"\(cost=([\d.]+)\.\.([\d.]+) rows=(\d+) width=(\d+)\)"
                        r"(?: \(actual time=([\d.]+)\.\.([\d.]+) rows=([\d.]+) loops=(\d+)\))?")
LINE_RE = re.compile(r"^( *)(->  )?(\S.*?)(?:  \(cost=([\d.]+)\.\.([\d.]+) rows=(\d+) width=(\d+)\))?"
                     r"(?: \(actual time=([\d.]+)\.\.([\d.]+) rows=([\d.]+) loops=(\d+)\))?$")


def best_of(repeat: int, func) -> float:
    best = float("inf")
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - start)
    return best


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--operators", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    json_text, text = generate(args.operators)
    n_json = len(planview.load(json_text).nodes)
    n_text = len(planview.load(text).nodes)
    assert n_json == n_text, (n_json, n_text)

    t_json_loads = best_of(args.repeat, lambda: json.loads(json_text))
    t_load_json = best_of(args.repeat, lambda: planview.load(json_text))
    t_figures = best_of(args.repeat, lambda: [FIGURES_RE.search(line) for line in text.splitlines()])
    t_regex = best_of(args.repeat, lambda: [LINE_RE.match(line) for line in text.splitlines()])
    t_load_text = best_of(args.repeat, lambda: planview.load(text))

    print(f"operators: {n_json}  (JSON {len(json_text) / 1e6:.1f} MB, text {len(text) / 1e6:.1f} MB)")
    print(f"json.loads            {t_json_loads * 1000:8.1f} ms")
    print(f"planview.load (JSON)  {t_load_json * 1000:8.1f} ms   ratio {t_load_json / t_json_loads:5.2f}x"
          "   (floor 3x, goal 1.5x)")
    print(f"regex pass, full line {t_regex * 1000:8.1f} ms")
    print(f"regex pass, figures   {t_figures * 1000:8.1f} ms")
    print(f"planview.load (text)  {t_load_text * 1000:8.1f} ms   ratio {t_load_text / t_regex:5.2f}x"
          f" over the full-line pass (floor 5x, goal 3x); {t_load_text / t_figures:5.2f}x over figures only")


if __name__ == "__main__":
    main()
