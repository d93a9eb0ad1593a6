"""Version differences in PostgreSQL's text format.

Sources: the PostgreSQL 18 manual's "Multivariate Statistics Examples" prints actual rows with
two decimals, "(actual rows=100.00 loops=1)"; PostgreSQL 17 renamed "InitPlan 1 (returns $0)"
to "InitPlan 1" with references written "(InitPlan 1).col1" (release notes; the exact lines
below are written from memory of that format, marked as such). PG 15/16 lines are real captures.
"""

from __future__ import annotations

from plan_files import path

import planview

PG18_MANUAL = """\
Seq Scan on t  (cost=0.00..195.00 rows=1 width=8) (actual rows=100.00 loops=1)
  Filter: ((a = 1) AND (b = 1))
  Rows Removed by Filter: 9900
"""

# from memory of PostgreSQL 17's format (not a capture)
PG17_INITPLAN = """\
Seq Scan on invoices  (cost=3971.02..8442.02 rows=66667 width=12) (actual time=30.1..60.2 rows=40000.00 loops=1)
  Filter: (total_cents > (InitPlan 1).col1)
  Rows Removed by Filter: 160000
  InitPlan 1
    ->  Aggregate  (cost=3971.00..3971.02 rows=1 width=32) (actual time=30.0..30.0 rows=1.00 loops=1)
          ->  Seq Scan on invoices invoices_1  (cost=0.00..3471.00 rows=200000 width=4) (actual time=0.01..15.0 rows=200000.00 loops=1)
"""


def test_pg18_two_decimal_rows():
    plan = planview.load(PG18_MANUAL)
    node = plan.nodes[0]
    assert plan.engine_version == "18"
    assert (node.est_rows, node.actual_rows, node.starts) == (1, 100, 1)
    assert node.rows_removed == {"Filter": 9900}
    assert plan.findings and plan.findings[0].cause == "correlation"


def test_pg17_initplan_without_returns():
    plan = planview.load(PG17_INITPLAN)
    assert [n.operator for n in plan.nodes] == ["Seq Scan", "Aggregate", "Seq Scan"]
    sub = plan.nodes[1]
    assert sub.parent_relationship == "InitPlan" and sub.subplan_name == "InitPlan 1"
    clause_plan = planview.load(PG17_INITPLAN)
    assert clause_plan.nodes[0].conditions[0].text == "(total_cents > (InitPlan 1).col1)"


def test_pg18_decimals_keep_fractional_rows_per_loop():
    """PG 18 prints 0.21 rows a loop where PG 17 and earlier printed 0; no repair is needed."""
    text = path("15", "nested_loop_inherited", "text").read_text()
    plan15 = planview.load(text)
    assert plan15.engine_version is None
    decimal = "\n".join(
        line.replace(" loops=", ".00 loops=") if "actual time=" in line else line
        for line in text.splitlines())
    plan18 = planview.load(decimal)
    assert plan18.engine_version == "18"
    assert [n.actual_total for n in plan18.nodes if not n.derived] == \
        [n.actual_rows * n.starts for n in plan18.nodes if not n.derived]
