"""The plan index: subtree ranges, ancestors, what lies below, and the CTE a CTE Scan reads.

Sources: the plans under plans/, captured from real PostgreSQL 15 and 16, DuckDB, MariaDB and
MySQL servers (their READMEs say how); the tree each index is checked against is read from the
nodes' own children and parent links by a plain walk written here. The CTE case is
plans/postgresql/pg16/cte.text.txt, where PostgreSQL prints the CTE as "CTE last_visit" under
the aggregate and reads it through "CTE Scan on last_visit l" (EXPLAIN's documented layout).
"""

from __future__ import annotations

from pathlib import Path

import pytest

import planview
from planview.index import PlanIndex, relation_name
from planview.model import PlanNode

PLANS = Path(__file__).resolve().parents[1] / "plans"
PLAN_FILES = sorted(p for p in PLANS.rglob("*") if p.is_file() and p.suffix in (".txt", ".json", ".xml", ".yaml")
                    and p.name != "manifest.json" and ".expected." not in p.name)


def _below(nodes: list[PlanNode], top: int) -> list[int]:
    """Every id strictly below `top`, by a plain walk over the children lists."""
    out, todo = [], list(reversed(nodes[top].children))
    while todo:
        current = todo.pop()
        out.append(current)
        todo.extend(reversed(nodes[current].children))
    return out


def _plans():
    for path in PLAN_FILES:
        try:
            yield path, planview.load(path)
        except planview.PlanParseError:
            continue  # files that are refused on purpose (their own tests say why)


def test_there_are_plans_to_index():
    assert len(PLAN_FILES) > 100


@pytest.mark.parametrize("engine", ["postgresql", "duckdb", "mariadb", "mysql"])
def test_every_reader_emits_preorder_and_the_index_agrees_with_a_plain_walk(engine):
    checked = 0
    for path, plan in _plans():
        if plan.engine != engine:
            continue
        nodes, index = plan.nodes, plan.index
        assert index.order == range(len(nodes)), f"{path}: the reader's list is not in pre-order"
        for node in nodes:
            below = _below(nodes, node.id)
            assert [n.id for n in index.subtree(node.id)] == [node.id] + below, path
            assert all(index.contains(node.id, b) for b in below)
            outside = set(range(len(nodes))) - set(below) - {node.id}
            assert not any(index.contains(node.id, o) for o in outside)
            up, parent = [], node.parent
            while parent is not None:
                up.append(parent)
                parent = nodes[parent].parent
            assert index.ancestors(node.id) == up
            assert len(up) == node.depth
            names = {relation_name(nodes[b]) for b in below} - {None}
            assert index.relations_below(node.id) == names
            assert index.sole_relation_below(node.id) == (next(iter(names)) if len(names) == 1 else None)
        checked += 1
    assert checked, f"no bundled {engine} plan was read"


def test_origins_below_by_range():
    """`below` finds, among the origins, those in a node's subtree: the same as a plain walk."""
    for path, plan in _plans():
        origins = {f.node for f in plan.findings}
        if not origins:
            continue
        marked = plan.index.node_set(origins)
        for node in plan.nodes:
            expected = [i for i in _below(plan.nodes, node.id) if i in origins]
            assert sorted(plan.index.below(node.id, marked)) == sorted(expected), path


def test_a_cte_scan_reads_the_cte_postgresql_names():
    plan = planview.load(PLANS / "postgresql" / "pg16" / "cte.text.txt")
    scan = next(n for n in plan.nodes if n.operator == "CTE Scan")
    assert scan.cte_name == "last_visit"
    cte = next(n for n in plan.nodes if n.subplan_name == "CTE last_visit")
    assert (cte.operator, cte.strategy, cte.est_rows) == ("Aggregate", "Sorted", 88907)  # "GroupAggregate"
    assert scan.own_rule == "cte"
    # the CTE Scan's own error is taken against the CTE it reads: 88,907 estimated, 90,000 read
    assert scan.own_log10_ratio == pytest.approx(scan.log10_ratio - cte.log10_ratio)


def test_a_list_out_of_preorder_is_put_in_preorder():
    """Hand-built: root 0 with children [2, 1]; node 2 has child 3."""
    nodes = [PlanNode(id=0, parent=None, operator="R", label="R", children=[2, 1]),
             PlanNode(id=1, parent=0, operator="A", label="A", relation="a"),
             PlanNode(id=2, parent=0, operator="B", label="B", children=[3]),
             PlanNode(id=3, parent=2, operator="C", label="C", relation="c", schema="s")]
    index = PlanIndex(nodes)
    assert [n.id for n in index.walk()] == [0, 2, 3, 1]
    assert [n.id for n in index.subtree(2)] == [2, 3]
    assert index.contains(0, 1) and index.contains(2, 3) and not index.contains(2, 1)
    assert index.ancestors(3) == [2, 0]
    assert index.sole_relation_below(2) == "s.c"
    assert index.sole_relation_below(0) is None
    assert index.relations_below(0) == {"a", "s.c"}
    assert index.first_by(lambda n: n.operator) == {"R": 0, "B": 2, "C": 3, "A": 1}
