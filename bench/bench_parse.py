"""Speed of planview.load, and whether it stays linear in the plan's size and its errors.

One run prints, for generated PostgreSQL plans of 10,000 and 20,000 operators, each once
well estimated and once with half its scans off by 10 to 1,000x, in JSON and in text:

- the ratio of `planview.load` to a bare `json.loads` of the same JSON document
  (floor 3x, goal 1.5x; for the well-estimated plans);
- the ratio to one regex pass over the lines of the same text plan (floor 5x, goal 3x);
- the ratio of the many-error plan to the well-estimated one (floor 3x, goal 1.5x);
- the ratio of 20k operators to 10k (floor 2.2x, goal 2x);

and the same figures for one paste of 20,000 statements. Each time is the best of
`--repeat` runs. `--profile` adds a cProfile of loading the 10k plans.

Run: python bench/bench_parse.py [--repeat R] [--profile]
"""

from __future__ import annotations

import argparse
import cProfile
import io
import json
import pstats
import re
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import planview  # noqa: E402

FLOORS = {"json": (3.0, 1.5), "text": (5.0, 3.0), "errors": (3.0, 1.5), "scale": (2.2, 2.0)}


def _factor(i: int) -> float:
    """A fixed spread of error factors from 10x to 1,000x, alternating under and over."""
    size = 10 ** (1 + (i * 7 % 13) / 6.0)
    return size if i % 4 == 1 else 1 / size


def generate_tree(operators: int, misestimated: bool) -> dict:
    """A balanced plan of hash joins over filtered scans, built without recursion.

    Misestimated: every second scan's actual rows are its estimate times 10 to 1,000 (or
    divided by it), the joins above keep their figures, as a plan off at its leaves would.
    """
    counter = iter(range(10**9))
    scans = iter(range(10**9))

    def scan() -> dict:
        i = next(counter)
        s = next(scans)
        est = 1000 + i
        actual = 900 + i
        if misestimated and s % 2 == 1:
            actual = max(1, round(est * _factor(s)))
        return {"Node Type": "Seq Scan", "Parent Relationship": "Outer", "Parallel Aware": False,
                "Async Capable": False, "Relation Name": f"t{i}", "Alias": f"t{i}",
                "Startup Cost": 0.0, "Total Cost": 35.5, "Plan Rows": est, "Plan Width": 8,
                "Actual Startup Time": 0.01, "Actual Total Time": 0.5, "Actual Rows": actual,
                "Actual Loops": 1, "Filter": f"(t{i}.x > {i})", "Rows Removed by Filter": 100,
                "Shared Hit Blocks": 5, "Shared Read Blocks": 0}

    def join() -> tuple[dict, dict]:
        i = next(counter)
        hash_node = {"Node Type": "Hash", "Parent Relationship": "Inner", "Parallel Aware": False,
                     "Startup Cost": 1.0, "Total Cost": 2.0, "Plan Rows": 1000, "Plan Width": 8,
                     "Actual Startup Time": 0.1, "Actual Total Time": 0.1, "Actual Rows": 950,
                     "Actual Loops": 1, "Plans": []}
        node = {"Node Type": "Hash Join", "Parent Relationship": "Outer", "Parallel Aware": False,
                "Join Type": "Inner", "Startup Cost": 1.0, "Total Cost": 99.0, "Plan Rows": 2000,
                "Plan Width": 16, "Actual Startup Time": 0.2, "Actual Total Time": 3.0,
                "Actual Rows": 1800 + i, "Actual Loops": 1, "Hash Cond": f"(a{i}.id = b{i}.id)",
                "Plans": []}
        return node, hash_node

    def sorts(count: int, below: dict) -> dict:
        """`count` Sort nodes over `below`, so that every size is met exactly."""
        for _ in range(count):
            below = {"Node Type": "Sort", "Parent Relationship": "Outer", "Parallel Aware": False,
                     "Startup Cost": 40.0, "Total Cost": 42.0, "Plan Rows": below["Plan Rows"],
                     "Plan Width": 8, "Actual Startup Time": 0.6, "Actual Total Time": 0.7,
                     "Actual Rows": below["Actual Rows"], "Actual Loops": 1,
                     "Sort Key": f"{below.get('Alias', 's')}.x", "Plans": [below]}
        return below

    # (list, index to fill, operators it gets): a join takes 2 (itself and its Hash), the
    # sides share the rest; the outer side is pushed last, so it is numbered first (pre-order)
    root_holder: list = [None]
    todo: list[tuple[list, int, int]] = [(root_holder, 0, operators)]
    while todo:
        slot, index, n = todo.pop()
        if n <= 3:
            slot[index] = sorts(n - 1, scan())
            continue
        node, hash_node = join()
        slot[index] = node
        rest = n - 2
        node["Plans"] = [None, hash_node]
        hash_node["Plans"] = [None]
        todo.append((hash_node["Plans"], 0, max(1, rest // 2)))
        todo.append((node["Plans"], 0, max(1, rest - rest // 2)))
    root = root_holder[0]
    root.pop("Parent Relationship", None)
    return root


def as_json(roots: list[dict], indent: int | None = 2) -> str:
    doc = [{"Plan": root, "Planning Time": 1.0, "Triggers": [], "Execution Time": 10.0} for root in roots]
    return json.dumps(doc, indent=indent)


def as_text(roots: list[dict]) -> str:
    """EXPLAIN ANALYZE's text layout of the same trees (written here, not by planview)."""
    lines: list[str] = []
    for root in roots:
        todo = [(root, 0)]
        while todo:
            node, depth = todo.pop()
            pad = "" if depth == 0 else "  " + "      " * (depth - 1) + "->  "
            detail = " " * (len(pad) + 2 if depth else 2)
            label = node["Node Type"]
            if node["Node Type"] == "Hash Join":
                label = "Hash Join"
            elif "Relation Name" in node:
                label += f" on {node['Relation Name']}"
            lines.append(f"{pad}{label}  (cost={node['Startup Cost']:.2f}..{node['Total Cost']:.2f} "
                         f"rows={node['Plan Rows']} width={node['Plan Width']}) (actual "
                         f"time={node['Actual Startup Time']:.3f}..{node['Actual Total Time']:.3f} "
                         f"rows={node['Actual Rows']} loops={node['Actual Loops']})")
            for key in ("Hash Cond", "Sort Key", "Filter"):
                if key in node:
                    lines.append(f"{detail}{key}: {node[key]}")
            if "Rows Removed by Filter" in node:
                lines.append(f"{detail}Rows Removed by Filter: {node['Rows Removed by Filter']}")
            todo.extend((kid, depth + 1) for kid in reversed(node.get("Plans", [])))
        lines += ["Planning Time: 1.000 ms", "Execution Time: 10.000 ms"]
    return "\n".join(lines)


def paste_roots(statements: int) -> list[dict]:
    """Many small statements, each a join over two scans, one of them off by 10 to 1,000x."""
    roots = []
    for s in range(statements):
        root = generate_tree(4, misestimated=False)
        scan = root["Plans"][0]
        scan["Actual Rows"] = max(1, round(scan["Plan Rows"] * _factor(2 * s + 1)))
        roots.append(root)
    return roots


# One regex pass over the lines: what a text reader needs from every line (indentation,
# arrow, label, figures), the least any reader could do.
LINE_RE = re.compile(r"^( *)(->  )?(\S.*?)(?:  \(cost=([\d.]+)\.\.([\d.]+) rows=(\d+) width=(\d+)\))?"
                     r"(?: \(actual time=([\d.]+)\.\.([\d.]+) rows=([\d.]+) loops=(\d+)\))?$")


def best_of(repeat: int, func, baseline) -> tuple[float, float]:
    """The best time of `func` and of `baseline`, run in turns so that both see the same load."""
    best, best_base = float("inf"), float("inf")
    for _ in range(repeat):
        start = time.perf_counter()
        baseline()
        best_base = min(best_base, time.perf_counter() - start)
        start = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - start)
    return best, best_base


def baseline_for(fmt: str, doc: str):
    if fmt == "json":
        return lambda: json.loads(doc)
    return lambda: [LINE_RE.match(x) for x in doc.splitlines()]


class Table:
    def __init__(self) -> None:
        self.rows: list[tuple[str, float, str]] = []

    def add(self, what: str, ratio: float, kind: str) -> None:
        self.rows.append((what, ratio, kind))

    def print(self) -> None:
        print(f"{'ratio':<58} {'value':>7} {'floor':>6} {'goal':>6}  result")
        for what, ratio, kind in self.rows:
            floor, goal = FLOORS[kind]
            result = "goal met" if ratio <= goal else "floor met" if ratio <= floor else "NOT MET"
            print(f"{what:<58} {ratio:6.2f}x {floor:5.1f}x {goal:5.1f}x  {result}")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--sizes", type=int, nargs="+", default=[10_000, 20_000])
    parser.add_argument("--statements", type=int, default=20_000)
    parser.add_argument("--profile", action="store_true")
    args = parser.parse_args()
    small, large = args.sizes[0], args.sizes[-1]

    times: dict[tuple, float] = {}
    baselines: dict[tuple, float] = {}
    docs: dict[tuple, str] = {}
    print(f"{'case':<34} {'operators':>9} {'origins':>8} {'MB':>5} {'load ms':>9} {'baseline ms':>12}")
    for size in args.sizes:
        for kind in ("well", "errors"):
            root = generate_tree(size, misestimated=kind == "errors")
            for fmt in ("json", "text"):
                doc = as_json([root]) if fmt == "json" else as_text([root])
                docs[(size, kind, fmt)] = doc
                plan = planview.load(doc)
                took, baseline = best_of(args.repeat, lambda doc=doc: planview.load(doc),
                                         baseline_for(fmt, doc))
                times[(size, kind, fmt)] = took
                baselines[(size, kind, fmt)] = baseline
                print(f"{f'{kind}-estimated {fmt}' if kind == 'well' else f'half scans off, {fmt}':<34} "
                      f"{len(plan.nodes):>9,} {len(plan.findings):>8,} {len(doc) / 1e6:5.1f} "
                      f"{took * 1000:9.0f} {baseline * 1000:12.1f}")
    paste = paste_roots(args.statements)
    for fmt in ("json", "text"):
        # compact JSON: indented, 20,000 statements are 44 MB, over the JSON input limit
        doc = as_json(paste, indent=None) if fmt == "json" else as_text(paste)
        plan = planview.load(doc)
        took, baseline = best_of(args.repeat, lambda doc=doc: planview.load(doc), baseline_for(fmt, doc))
        times[("paste", fmt)] = took
        baselines[("paste", fmt)] = baseline
        print(f"{f'{args.statements:,} statements, {fmt}':<34} {len(plan.nodes):>9,} "
              f"{len(plan.findings):>8,} {len(doc) / 1e6:5.1f} {took * 1000:9.0f} {baseline * 1000:12.1f}")
    print()

    table = Table()
    for size in args.sizes:
        for fmt, against in (("json", "json.loads"), ("text", "the regex pass")):
            key = (size, "well", fmt)
            table.add(f"{size // 1000}k well-estimated {fmt} / {against}", times[key] / baselines[key], fmt)
    for fmt, against in (("json", "json.loads"), ("text", "the regex pass")):
        key = ("paste", fmt)
        table.add(f"{args.statements // 1000}k-statement paste {fmt} / {against}",
                  times[key] / baselines[key], fmt)
    for size in args.sizes:
        for fmt in ("json", "text"):
            table.add(f"{size // 1000}k {fmt}: half scans off / well-estimated",
                      times[(size, "errors", fmt)] / times[(size, "well", fmt)], "errors")
    if large != small:
        for kind in ("well", "errors"):
            for fmt in ("json", "text"):
                table.add(f"{kind if kind == 'well' else 'half scans off'} {fmt}: "
                          f"{large // 1000}k / {small // 1000}k",
                          times[(large, kind, fmt)] / times[(small, kind, fmt)], "scale")
    table.print()

    if args.profile:
        for kind in ("well", "errors"):
            for fmt in ("json", "text"):
                doc = docs[(small, kind, fmt)]
                profiler = cProfile.Profile()
                profiler.enable()
                planview.load(doc)
                profiler.disable()
                out = io.StringIO()
                pstats.Stats(profiler, stream=out).sort_stats("tottime").print_stats(15)
                print(f"\n--- profile: {small:,} operators, {kind}, {fmt} (by own time) ---")
                print("\n".join(out.getvalue().splitlines()[6:26]))


if __name__ == "__main__":
    main()
