"""The base engine, the shared validator and tree builder, and the typed facts the diagnosis reads."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from plan_files import is_capture

import planview
from planview.engines import engine_of, engines
from planview.engines._tree import read_number
from planview.errors import PlanParseError
from planview.model import Relationship

PLANS = Path(__file__).resolve().parent.parent / "plans"
BUNDLED = sorted(p for p in PLANS.rglob("*") if p.is_file() and is_capture(p)
                 and p.suffix in (".json", ".txt") and p.parent != PLANS)


@pytest.mark.parametrize("bad", [float("nan"), float("inf"), -1, True, "ten", [1]])
def test_one_validator_refuses_what_no_engine_prints(bad):
    """A row or loop count is a finite number of at least 0 in every engine's manual."""
    with pytest.raises(PlanParseError):
        read_number(bad, engine="any", fmt="json", key="rows")


def test_one_validator_reads_what_engines_print():
    assert read_number("1,234", engine="any", fmt="text", thousands=True) == 1234.0
    assert read_number("934e-6", engine="any", fmt="tree") == pytest.approx(0.000934)
    assert read_number(-2.5, engine="any", fmt="json", signed=True) == -2.5  # a cost may be negative
    assert read_number(None, engine="any", fmt="json") is None


def test_every_built_in_engine_is_an_engine_of_tables():
    for name, module in engines().items():
        engine = engine_of(module)
        assert engine.NAME == name and module.role == engine.role


@pytest.mark.parametrize("path", BUNDLED, ids=lambda p: str(p.relative_to(PLANS)))
def test_relationships_are_typed(path):
    """PostgreSQL prints a node's relationship as one of Outer, Inner, Member, Subquery,
    InitPlan, SubPlan (src/backend/commands/explain.c, ExplainNode); every engine's reader
    uses the same six."""
    try:
        plan = planview.load(path)
    except PlanParseError:
        pytest.skip("not a plan planview reads")
    for node in plan.nodes:
        if node.parent_relationship is not None:
            assert isinstance(node.parent_relationship, Relationship), node.parent_relationship
    for record in plan.report()["nodes"]:  # the report keeps the engine's spelling
        assert record["parent_relationship"] is None or json.dumps(record["parent_relationship"]) \
            == json.dumps(str(record["parent_relationship"]))


def test_a_seq_scan_reads_its_rows_plus_those_its_filter_removed():
    """PostgreSQL's manual ("Using EXPLAIN"): a Seq Scan reads every row; "Rows Removed by
    Filter" counts those it read and dropped, per loop."""
    path = next(p for p in BUNDLED if p.suffix == ".json" and "postgresql" in p.parts
                and '"Rows Removed by Filter"' in p.read_text() and '"Seq Scan"' in p.read_text())
    plan = planview.load(path)
    raw_nodes = []
    todo = json.loads(path.read_text())
    todo = todo if isinstance(todo, list) else [todo]
    while todo:
        item = todo.pop()
        if isinstance(item, dict):
            if item.get("Node Type") == "Seq Scan" and "Rows Removed by Filter" in item:
                raw_nodes.append(item)
            todo.extend(item.values())
        elif isinstance(item, list):
            todo.extend(item)
    scans = [n for n in plan.nodes if n.operator == "Seq Scan" and n.rows_removed.get("Filter")]
    assert scans and len(scans) == len(raw_nodes)
    for node in scans:
        assert node.reads_whole_relation
        assert node.rows_discarded == node.rows_removed["Filter"]
    printed = sorted(r["Rows Removed by Filter"] for r in raw_nodes)
    assert sorted(n.rows_discarded for n in scans) == printed
