"""Every TPC-H capture (plans/tpch/, made by plans/capture_tpch.py) reads, node for node.

Source of every expected number: the raw file the engine wrote, read here with json.load (a
walk of PostgreSQL's "Plans" and DuckDB's "children") or with a line count of the TEXT output
(one "(cost=" per PostgreSQL operator; one "╭─ " box title per DuckDB operator), never
planview's output. PostgreSQL 18 prints actual rows per loop with two decimals; those are
compared exactly with the JSON's "Actual Rows" and the TEXT's "rows=N.NN".
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

import planview

TPCH = Path(__file__).resolve().parents[1] / "plans" / "tpch"
NOT_PLANS = ("manifest.json", "README.md")
# DuckDB's tops that are not operators (its profile wraps the query in them)
DUCKDB_WRAPPERS = ("RESULT_COLLECTOR", "EXPLAIN_ANALYZE", "QUERY", "EXPLAIN")
# "(cost=a..b rows=N width=W) (actual time=x..y rows=R loops=L)" or "(actual rows=R loops=L)"
TEXT_ACTUAL = re.compile(r"\(cost=[^)]*\) \(actual (?:time=\S+ )?rows=([\d.]+) loops=(\d+)\)")

# file (relative to plans/tpch) -> why planview cannot read it yet; the next issue fixes them
KNOWN_FAILURES: dict[str, str] = {}


def _captures() -> list:
    files = sorted(p for p in TPCH.rglob("*") if p.is_file() and p.name not in NOT_PLANS
                   and not p.name.endswith(".expected.json"))  # the fixture pairs' expectations
    return [pytest.param(p, id=str(p.relative_to(TPCH)),
                         marks=[pytest.mark.xfail(strict=True, reason=KNOWN_FAILURES[key])]
                         if (key := str(p.relative_to(TPCH))) in KNOWN_FAILURES else [])
            for p in files]


CAPTURES = _captures()


def _pg_nodes(statement_list: list) -> list[dict]:
    """Every operator of a PostgreSQL JSON plan in pre-order (children in "Plans" order)."""
    out: list[dict] = []
    todo = [s["Plan"] for s in reversed(statement_list)]
    while todo:
        node = todo.pop()
        out.append(node)
        todo.extend(reversed(node.get("Plans", [])))
    return out


def _duckdb_operator_count(doc: dict) -> int:
    tops = doc.get("operator") or doc.get("children") or []
    while len(tops) == 1 and tops[0].get("name") in DUCKDB_WRAPPERS:
        tops = tops[0].get("children") or []
    count, todo = 0, list(tops)
    while todo:
        node = todo.pop()
        count += 1
        todo.extend(node.get("children") or [])
    return count


def _major(path: Path) -> int | None:
    folder = path.relative_to(TPCH).parts[0]
    return int(folder[2:]) if folder.startswith("pg") else None


def test_the_capture_is_complete():
    """22 queries (TPC-H specification) x (3 PostgreSQL versions x 2 modes x 2 formats + 3 DuckDB
    files); manifest.json lists a failure for anything missing."""
    manifest = json.loads((TPCH / "manifest.json").read_text())
    missing = []
    for engine, info in manifest["engines"].items():
        if engine.startswith("pg"):
            wanted = {f"q{n:02d}.{mode}": (f"q{n:02d}.{mode}.json", f"q{n:02d}.{mode}.txt")
                      for n in range(1, 23) for mode in ("par", "serial")}
        else:
            wanted = {f"q{n:02d}": (f"q{n:02d}.json", f"q{n:02d}.profile.json", f"q{n:02d}.txt")
                      for n in range(1, 23)}
        missing += [f"{engine}/{name}" for stem, names in wanted.items() if stem not in info["failures"]
                    for name in names if not (TPCH / engine / name).is_file()]
    assert missing == []
    assert sorted(manifest["engines"]) == ["duckdb", "pg15", "pg16", "pg18"]


@pytest.mark.parametrize("path", CAPTURES)
def test_capture_reads_node_for_node(path: Path):
    text = path.read_text(encoding="utf-8")
    plan = planview.load(text)
    major = _major(path)
    if major is not None and path.suffix == ".json":
        raw = _pg_nodes(json.loads(text))
        assert len(plan.nodes) == len(raw)
        # exact: the per-loop actual rows and the estimate the server printed, node by node
        assert [n.actual_rows for n in plan.nodes] == [r["Actual Rows"] for r in raw]
        assert [n.starts for n in plan.nodes] == [r["Actual Loops"] for r in raw]
        assert [n.est_rows for n in plan.nodes] == [r["Plan Rows"] for r in raw]
    elif major is not None:
        actuals = [TEXT_ACTUAL.search(line) for line in text.splitlines() if "(cost=" in line]
        assert len(plan.nodes) == len(actuals)
        printed = [(float(m.group(1)), float(m.group(2))) if m else None for m in actuals]
        assert [(n.actual_rows, n.starts) if p else None for n, p in zip(plan.nodes, printed)] == printed
    elif path.suffix == ".json":
        assert len(plan.nodes) == _duckdb_operator_count(json.loads(text))
    else:
        assert len(plan.nodes) == sum(line.count("╭─ ") for line in text.splitlines()) - text.count("╭─ Summary")
    assert plan.engine == ("duckdb" if major is None else "postgresql")


@pytest.mark.parametrize("path", [p for p in sorted((TPCH / "pg18").glob("*.*")) if not p.name.endswith(".expected.json")],
                         ids=lambda p: p.name)
def test_pg18_capture_is_read_as_18(path: Path):
    """The captures came from PostgreSQL 18.6 (manifest.json, server_version_num 180006)."""
    assert planview.load(path.read_text(encoding="utf-8")).engine_version == "18"


@pytest.mark.parametrize("path", [p for p in sorted((TPCH / "pg15").glob("*.*")) + sorted((TPCH / "pg16").glob("*.*"))
                                  if not p.name.endswith(".expected.json")],
                         ids=lambda p: f"{p.parent.name}/{p.name}")
def test_pg15_and_16_captures_are_not_read_as_18(path: Path):
    """manifest.json: these came from 15 and 16, which print none of 18's keys nor decimal rows."""
    assert planview.load(path.read_text(encoding="utf-8")).engine_version != "18"


def test_pg18_rows_have_two_decimals_and_some_are_fractional():
    # also what tells 18's JSON from 17's: "Disabled" is on every node of a PostgreSQL 18 JSON plan
    """PostgreSQL 18 release notes: EXPLAIN shows fractional row counts; the captures hold such
    rows (else the exactness check above would prove nothing about decimals)."""
    fractional = [r["Actual Rows"] for p in sorted((TPCH / "pg18").glob("*.json"))
                  if not p.name.endswith(".expected.json")
                  for r in _pg_nodes(json.loads(p.read_text())) if r["Actual Rows"] % 1]
    assert len(fractional) > 10
    assert all("Disabled" in r for r in _pg_nodes(json.loads((TPCH / "pg18" / "q01.serial.json").read_text())))
    assert not any("Disabled" in r for r in _pg_nodes(json.loads((TPCH / "pg16" / "q01.serial.json").read_text())))
    text = (TPCH / "pg18" / "q01.serial.txt").read_text()
    assert re.search(r"rows=\d+\.\d\d loops=", text)
