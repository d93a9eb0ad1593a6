"""Time and peak memory of the worst inputs known, each read in a fresh process.

Every case is written to a file first; a child process then runs ``planview.load`` on it
(``--mode reader``: the reader alone; ``--mode export``: also ``to_text`` and ``to_json``) and the parent reports wall time and
the child's peak resident memory (``wait4``). The bar: every input under the size limit is
read or refused within 10 s and 2 GB.

Run: python bench/bench_limits.py [--cases NAME,...] [--mb N] [--mode load|reader|export]
     python bench/bench_limits.py --per-mb     (peak memory per input MB, per format)
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from hostile_inputs import yaml_alias_bomb, yaml_merge_bomb  # noqa: E402

# ---------------------------------------------------------------------------------------
# A realistic plan, as the dicts PostgreSQL's JSON format holds, and four writers
# ---------------------------------------------------------------------------------------

def plan_tree(operators: int) -> dict:
    """A balanced tree of hash joins over filtered scans, with the keys EXPLAIN (ANALYZE,
    BUFFERS, VERBOSE) prints on each node."""
    counter = iter(range(10**9))
    buffers = {"Shared Hit Blocks": 5, "Shared Read Blocks": 0, "Shared Dirtied Blocks": 0,
               "Shared Written Blocks": 0, "Local Hit Blocks": 0, "Local Read Blocks": 0,
               "Local Dirtied Blocks": 0, "Local Written Blocks": 0, "Temp Read Blocks": 0,
               "Temp Written Blocks": 0}

    def scan() -> dict:
        i = next(counter)
        return {"Node Type": "Seq Scan", "Parent Relationship": "Outer", "Parallel Aware": False,
                "Async Capable": False, "Relation Name": f"t{i}", "Schema": "public", "Alias": f"t{i}",
                "Startup Cost": 0.0, "Total Cost": 35.5, "Plan Rows": 1000 + i, "Plan Width": 8,
                "Actual Startup Time": 0.01, "Actual Total Time": 0.5, "Actual Rows": 900 + i,
                "Actual Loops": 1, "Output": [f"t{i}.id", f"t{i}.x"],
                "Filter": f"(t{i}.x > {i})", "Rows Removed by Filter": 100, **buffers}

    def build(n: int, relationship: str) -> dict:
        if n <= 2:
            node = scan()
        else:
            rest = n - 2
            left, right = max(1, rest - rest // 2), max(1, rest // 2)
            i = next(counter)
            hash_node = {"Node Type": "Hash", "Parent Relationship": "Inner", "Parallel Aware": False,
                         "Async Capable": False, "Startup Cost": 1.0, "Total Cost": 2.0,
                         "Plan Rows": 1000, "Plan Width": 8, "Actual Startup Time": 0.1,
                         "Actual Total Time": 0.1, "Actual Rows": 950, "Actual Loops": 1,
                         "Output": [f"b{i}.id"], "Hash Buckets": 1024, "Original Hash Buckets": 1024,
                         "Hash Batches": 1, "Original Hash Batches": 1, "Peak Memory Usage": 45,
                         **buffers, "Plans": [build(right, "Outer")]}
            node = {"Node Type": "Hash Join", "Parent Relationship": "Outer", "Parallel Aware": False,
                    "Async Capable": False, "Join Type": "Inner", "Startup Cost": 1.0,
                    "Total Cost": 99.0, "Plan Rows": 2000, "Plan Width": 16,
                    "Actual Startup Time": 0.2, "Actual Total Time": 3.0, "Actual Rows": 1800 + i,
                    "Actual Loops": 1, "Output": [f"a{i}.id", f"b{i}.id"], "Inner Unique": False,
                    "Hash Cond": f"(a{i}.id = b{i}.id)", **buffers,
                    "Plans": [build(left, "Outer"), hash_node]}
        node["Parent Relationship"] = relationship
        return node

    root = build(operators, "Outer")
    del root["Parent Relationship"]
    return root


def _walk(root: dict):
    """(node, depth) in pre-order, without recursion."""
    todo = [(root, 0)]
    while todo:
        node, depth = todo.pop()
        yield node, depth
        todo.extend((kid, depth + 1) for kid in reversed(node.get("Plans", [])))


def write_json(root: dict, out) -> None:
    json.dump([{"Plan": root, "Planning Time": 1.0, "Triggers": [], "Execution Time": 10.0}],
              out, indent=2)


def _yaml_scalar(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    return json.dumps(value)


def write_yaml(root: dict, out) -> None:
    """The layout EXPLAIN (FORMAT YAML) prints (two spaces a level, lists with ``- ``)."""
    out.write("- Plan: \n")
    todo = [(root, "    ", "    ")]
    while todo:
        node, first, pad = todo.pop()
        lead = first
        kids = []
        for key, value in node.items():
            if key == "Plans":
                kids = value
                continue
            if isinstance(value, list):
                out.write(f"{lead}{key}: \n")
                for item in value:
                    out.write(f"{pad}  - {_yaml_scalar(item)}\n")
            else:
                out.write(f"{lead}{key}: {_yaml_scalar(value)}\n")
            lead = pad
        if kids:
            out.write(f"{pad}Plans: \n")
            for kid in reversed(kids):
                todo.append((kid, pad + "  - ", pad + "    "))
    out.write("  Planning Time: 1.000\n  Triggers: \n  Execution Time: 10.000\n")


def write_xml(root: dict, out) -> None:
    """The layout EXPLAIN (FORMAT XML) prints (keys with dashes, lists as <Item>)."""
    from xml.sax.saxutils import escape

    out.write('<explain xmlns="http://www.postgresql.org/2009/explain">\n  <Query>\n')
    todo: list = [("open", root, "    ")]
    while todo:
        action, node, pad = todo.pop()
        if action == "close":
            out.write(node)
            continue
        out.write(f"{pad}<Plan>\n")
        todo.append(("close", f"{pad}</Plan>\n", pad))
        inner = pad + "  "
        for key, value in node.items():
            tag = key.replace(" ", "-")
            if key == "Plans":
                todo.append(("close", f"{inner}</Plans>\n", inner))
                for kid in reversed(value):
                    todo.append(("open", kid, inner + "  "))
                todo.append(("close", f"{inner}<Plans>\n", inner))
            elif isinstance(value, list):
                items = "".join(f"{inner}  <Item>{escape(str(v))}</Item>\n" for v in value)
                out.write(f"{inner}<{tag}>\n{items}{inner}</{tag}>\n")
            else:
                text = _yaml_scalar(value) if isinstance(value, bool) else escape(str(value))
                out.write(f"{inner}<{tag}>{text}</{tag}>\n")
    out.write("  </Query>\n</explain>\n")


def _text_label(node: dict) -> str:
    op = node["Node Type"]
    if op == "Seq Scan" and "Schema" in node:
        return f"Seq Scan on {node['Schema']}.{node['Relation Name']} {node['Alias']}"
    if op == "Seq Scan":
        return f"Seq Scan on {node['Relation Name']}"
    return op


def write_text(root: dict, out) -> None:
    """The layout EXPLAIN (ANALYZE, BUFFERS, VERBOSE) prints in text."""
    for node, depth in _walk(root):
        pad = "" if depth == 0 else "  " + "      " * (depth - 1) + "->  "
        detail = " " * (len(pad) + 2 if depth else 2)
        out.write(f"{pad}{_text_label(node)}  (cost={node['Startup Cost']:.2f}..{node['Total Cost']:.2f} "
                  f"rows={node['Plan Rows']} width={node['Plan Width']}) (actual time="
                  f"{node['Actual Startup Time']:.3f}..{node['Actual Total Time']:.3f} "
                  f"rows={node['Actual Rows']} loops={node['Actual Loops']})\n")
        out.write(f"{detail}Output: {', '.join(node['Output'])}\n")
        for key in ("Hash Cond", "Filter"):
            if key in node:
                out.write(f"{detail}{key}: {node[key]}\n")
        if "Rows Removed by Filter" in node:
            out.write(f"{detail}Rows Removed by Filter: {node['Rows Removed by Filter']}\n")
        if node["Node Type"] == "Hash":
            out.write(f"{detail}Buckets: 1024  Batches: 1  Memory Usage: 45kB\n")
        if "Shared Hit Blocks" in node:
            out.write(f"{detail}Buffers: shared hit=5\n")
    out.write("Planning Time: 1.000 ms\nExecution Time: 10.000 ms\n")


WRITERS = {"text": write_text, "json": write_json, "xml": write_xml, "yaml": write_yaml}


def dense_tree(operators: int) -> dict:
    """The most operators a megabyte can hold that the check still works on: one Append over
    filtered scans, each a misestimate (an origin the diagnosis reads), few keys a node."""
    kids = [{"Node Type": "Seq Scan", "Parent Relationship": "Member", "Relation Name": f"t{i}",
             "Alias": f"t{i}", "Startup Cost": 0.0, "Total Cost": 1.0, "Plan Rows": 1,
             "Plan Width": 4, "Actual Startup Time": 0.01, "Actual Total Time": 0.02,
             "Actual Rows": 5000 + i, "Actual Loops": 1, "Output": [f"t{i}.c"],
             "Filter": f"(t{i}.c = {i})", "Rows Removed by Filter": 7}
            for i in range(max(1, operators - 1))]
    return {"Node Type": "Append", "Startup Cost": 0.0, "Total Cost": 1.0 * len(kids),
            "Plan Rows": len(kids), "Plan Width": 4, "Actual Startup Time": 0.01,
            "Actual Total Time": 1.0, "Actual Rows": sum(k["Actual Rows"] for k in kids),
            "Actual Loops": 1, "Output": ["c"], "Plans": kids}


SHAPES = {"balanced": plan_tree, "dense": dense_tree}


def write_plan(fmt: str, megabytes: float, path: Path, shape: str = "dense") -> int:
    """A plan of about `megabytes` MB in `fmt`; returns its operator count."""
    make = SHAPES[shape]
    with open(path, "w") as out:
        WRITERS[fmt](make(1001), out)
    per_operator = path.stat().st_size / 1001
    operators = max(3, int(megabytes * 1e6 / per_operator))
    for _ in range(3):  # deeper trees indent more: correct the estimate until it fits
        with open(path, "w") as out:
            WRITERS[fmt](make(operators), out)
        size = path.stat().st_size
        if size <= megabytes * 1e6:
            break
        operators = int(operators * megabytes * 1e6 / size * 0.98)
    return operators


# ---------------------------------------------------------------------------------------
# The hostile cases
# ---------------------------------------------------------------------------------------

SCAN_LINE = "Seq Scan on t  (cost=0.00..1.00 rows=1 width=4) (actual time=0.010..0.020 rows=5000 loops=1)\n"


def many_clauses(count: int) -> str:
    clause = " AND ".join(f"(t.c{i} = {i})" for i in range(count))
    return SCAN_LINE + f"  Filter: ({clause})\n  Rows Removed by Filter: 5\n"


def long_filter(megabytes: float) -> str:
    literal = "x" * int(megabytes * 1e6)
    return SCAN_LINE + f"  Filter: (t.c = '{literal}'::text)\n"


def deep_text(levels: int) -> str:
    lines = [SCAN_LINE.replace("Seq Scan on t", "Limit").rstrip("\n")]
    for depth in range(1, levels):
        lines.append("  " + "      " * (depth - 1) + "->  " + lines[0])
    return "\n".join(lines) + "\n"


def many_statements(count: int) -> str:
    return "".join(SCAN_LINE + "  Filter: (t.x > 1)\nPlanning Time: 0.1 ms\nExecution Time: 0.1 ms\n"
                   for _ in range(count))


def make_cases(megabytes: float, tmp: Path) -> dict[str, Path]:
    cases: dict[str, Path] = {}
    for fmt in ("text", "json", "xml", "yaml"):
        target = _limit_mb(fmt) * 0.99 if megabytes <= 0 else megabytes
        path = tmp / f"plan_{fmt}_{target:.0f}mb.{fmt}"
        write_plan(fmt, target, path)
        cases[path.stem] = path
    small = {
        "text_30mb": None,
        "yaml_alias_bomb": yaml_alias_bomb(),
        "yaml_merge_bomb": yaml_merge_bomb(),
        "clauses_50k": many_clauses(50_000),
        "filter_10mb": long_filter(10),
        "deep_text_3500": deep_text(3_500),
        "statements_20k": many_statements(20_000),
    }
    for name, text in small.items():
        path = tmp / f"{name}.txt"
        if text is None:
            write_plan("text", 30, path, shape="balanced")
        else:
            path.write_text(text)
        cases[name] = path
    return cases


def _limit_mb(fmt: str) -> float:
    from planview import source

    return source.max_input_bytes(fmt) / 1e6 if hasattr(source, "max_input_bytes") else 200


# ---------------------------------------------------------------------------------------
# Running one case in a child and measuring it
# ---------------------------------------------------------------------------------------

CHILD = """
import sys, planview
from pathlib import Path
from planview import engines, source
try:
    if sys.argv[2] == "reader":  # the reader alone: read, detect, parse
        text = source.read_text(Path(sys.argv[1]))
        module, fmt = engines.detect(text)
        source.check_format_size(text, fmt)
        outcome = f"parsed {len(module.parse(text, fmt).nodes):,} operators (reader only)"
    else:
        plan = planview.load(Path(sys.argv[1]))
        outcome = f"read {len(plan.nodes):,} operators, {len(plan.findings):,} origins"
        if sys.argv[2] == "1":
            plan.to_text(); plan.to_json()
            outcome += ", exported"
except planview.PlanParseError as exc:
    outcome = "refused: " + str(exc)[:110]
print(outcome)
"""


def run_case(path: Path, mode: str, timeout: float = 300) -> tuple[float, float, str]:
    """(seconds, peak RSS in MB, outcome) of loading `path` in a fresh interpreter."""
    start = time.perf_counter()
    child = subprocess.Popen([sys.executable, "-c", CHILD, str(path), mode],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                             env={**os.environ, "PYTHONPATH": str(ROOT)}, cwd=ROOT)
    try:
        out, err = child.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        child.kill()
        child.communicate()
        return time.perf_counter() - start, float("nan"), f"TIMEOUT after {timeout:.0f} s"
    elapsed = time.perf_counter() - start
    # communicate() has reaped the child; its rusage is the children's maximum so far, and
    # cases run one at a time, so read it through a fresh wait-free probe below
    peak = _last_child_peak_mb()
    outcome = out.strip() or ("CRASH: " + (err.strip().splitlines() or ["?"])[-1])
    return elapsed, peak, outcome


_SEEN_PEAK = [0.0]


def _last_child_peak_mb() -> float:
    import resource

    peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    _SEEN_PEAK[0] = peak
    return peak


def run_isolated(path: Path, mode: str) -> tuple[float, float, str]:
    """Run one case from a fresh parent so RUSAGE_CHILDREN holds that child alone."""
    result = subprocess.run([sys.executable, __file__, "--one", str(path), "--mode", mode],
                            capture_output=True, text=True)
    line = result.stdout.strip().splitlines()[-1] if result.stdout.strip() else "nan\tnan\tCRASH"
    seconds, peak, outcome = line.split("\t", 2)
    return float(seconds), float(peak), outcome


def per_mb(tmp: Path) -> None:
    """Peak RSS per input MB for each format, from two sizes (the slope, not the baseline)."""
    print(f"{'format':6} {'MB':>6} {'operators':>10} {'seconds':>8} {'peak MB':>8}")
    for fmt in ("text", "json", "xml", "yaml"):
        points = []
        for megabytes in (10, 40):
            path = tmp / f"per_mb.{fmt}"
            operators = write_plan(fmt, megabytes, path)
            size = path.stat().st_size / 1e6
            seconds, peak, outcome = run_isolated(path, "reader")
            points.append((size, peak, seconds, operators))
            print(f"{fmt:6} {size:6.1f} {operators:10,} {seconds:8.2f} {peak:8.0f}  {outcome[:60]}")
        (s1, p1, t1, n1), (s2, p2, t2, n2) = points
        print(f"{fmt:6} slope: {(p2 - p1) / (s2 - s1):.1f} MB of memory and {(t2 - t1) / (s2 - s1):.3f} s "
              f"per input MB; {(p2 - p1) * 1e6 / (n2 - n1):,.0f} bytes per operator")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--cases", help="comma-separated case names (default: all)")
    parser.add_argument("--mb", type=float, default=0, help="plan size per format (default: the format's limit)")
    parser.add_argument("--mode", choices=("load", "reader", "export"), default="load",
                        help="planview.load (default), the reader alone, or load and render text and JSON")
    parser.add_argument("--per-mb", action="store_true")
    parser.add_argument("--one", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one:
        seconds, peak, outcome = run_case(Path(args.one), {"export": "1"}.get(args.mode, args.mode))
        print(f"{seconds:.2f}\t{peak:.0f}\t{outcome}")
        return
    with tempfile.TemporaryDirectory() as name:
        tmp = Path(name)
        if args.per_mb:
            per_mb(tmp)
            return
        cases = make_cases(args.mb, tmp)
        wanted = args.cases.split(",") if args.cases else list(cases)
        print(f"{'case':26} {'input MB':>8} {'seconds':>8} {'peak MB':>8}  outcome")
        for name in wanted:
            path = cases[name]
            seconds, peak, outcome = run_isolated(path, args.mode)
            flag = "" if seconds <= 10 and peak <= 2048 else "  OVER 10 s / 2 GB"
            print(f"{name:26} {path.stat().st_size / 1e6:8.2f} {seconds:8.2f} {peak:8.0f}  {outcome}{flag}")


if __name__ == "__main__":
    main()
