"""MySQL: the reader against the example outputs of the MySQL Reference Manual.

No MySQL server can run here. Every input below is transcribed from the manual, section
15.8.2 "EXPLAIN Statement", "Obtaining Information with EXPLAIN ANALYZE" (plans/mysql/README.md
lists which file is which example); the expected numbers are the ones the manual prints.
"""

from __future__ import annotations

from pathlib import Path

import pytest

import planview
from planview.engines import mysql as engine
from planview.errors import PlanParseError

PLANS = Path(__file__).resolve().parent.parent / "plans" / "mysql"


def load(name: str):
    return planview.load(PLANS / name)


def test_hash_join_8_0():
    # source: MySQL 8.0 manual, EXPLAIN ANALYZE example 1
    plan = load("8.0-hash-join.txt")
    assert (plan.engine, plan.format) == ("mysql", "tree")
    join, probe, build = plan.nodes
    assert join.label == "Inner hash join (t2.c2 = t1.c1)" and join.operator == "Inner hash join"
    assert join.condition_texts("hash_cond") == ["t2.c2 = t1.c1"]
    assert (join.est_rows, join.actual_rows, join.starts) == (6, 6, 1)
    assert join.startup_cost == 4.70 or join.total_cost == 4.70
    assert join.actual_startup_ms == 0.032 and join.actual_total_ms == 0.035
    # the "-> Hash" heading is folded into the build side, which is the join's inner input
    assert (probe.relation, probe.parent_relationship) == ("t2", "Outer")
    assert (build.relation, build.parent_relationship, build.extra.get("hashed")) == ("t1", "Inner", True)
    assert plan.findings == []


def test_hash_join_9_5_number_format():
    # source: MySQL 9.5 manual: estimated 5 rows, found 1, and a filter estimated at 1.67
    join = load("9.5-hash-join.txt").nodes[0]
    assert (join.est_rows, join.actual_rows) == (5, 1)
    assert join.actual_startup_ms == 0.121
    scan = load("9.5-hash-join.txt").nodes[1]
    assert scan.actual_startup_ms == 0.0126
    filt = load("9.5-filter.txt").nodes[0]
    assert filt.est_rows == 1.67 and filt.condition_texts("filter") == ["(t3.i > 8)"]


def test_filter_and_range_8_0():
    # source: MySQL 8.0 manual, examples 2 and 3
    filt, scan = load("8.0-filter.txt").nodes
    assert (filt.est_rows, filt.actual_rows, scan.est_rows, scan.actual_rows) == (5, 6, 15, 15)
    assert scan.operator == "Table scan" and scan.relation == "t3"
    _, rng = load("8.0-range.txt").nodes
    assert (rng.operator, rng.relation, rng.index) == ("Index range scan", "t3", "PRIMARY")


def test_json_v2_analyze_both_shapes():
    # source: MySQL 9.5 manual: EXPLAIN ANALYZE FORMAT=JSON, bare and with INTO @v1
    bare = load("9.5-analyze.json")
    assert (bare.engine, bare.format) == ("mysql", "json")
    filt, scan = bare.nodes
    assert filt.condition_texts("filter") == ["(t3.pk < 17)"]
    assert (scan.relation, scan.index, scan.est_rows, scan.actual_rows, scan.starts) == ("t3", "PRIMARY", 3, 3, 1)
    assert scan.actual_total_ms == 0.034214
    wrapped = load("9.5-analyze-into.json")
    assert wrapped.statements[0].query_text.startswith("/* select#1 */")
    assert [(n.est_rows, n.actual_rows) for n in wrapped.nodes] == [(17, 17), (17, 17)]
    assert wrapped.engine_version == "2.0"


def test_explain_without_analyze():
    # source: MySQL 9.5 manual: EXPLAIN with explain_format=TREE, and FORMAT=JSON v2
    for name in ("9.5-explain-tree.txt", "9.5-explain.json"):
        plan = load(name)
        assert not plan.has_actuals and any("no actuals" in n for n in plan.notes)
        assert [n.est_rows for n in plan.nodes] == [17, 17]
    tree = load("9.5-explain-tree.txt")
    assert tree.nodes[1].label == "Index range scan on country using PRIMARY over ('A' <= Code <= 'A????????')"


def test_readable_numbers_and_never_executed():
    # a constructed input, not a MySQL output: the line shape of the manual's example 1 with
    # numbers in the manual's stated format rules (8.0.33+: "1.23e+9", "934e-6")
    text = ("-> Nested loop inner join  (cost=1.2e+6 rows=1.23e+6) (actual time=934e-6..2.5 rows=12 loops=1)\n"
            "    -> Table scan on a  (cost=0.75 rows=5) (actual time=0.01..0.02 rows=5 loops=1)\n"
            "    -> Index lookup on b using ix (k=a.k)  (cost=0.3 rows=2) (never executed)\n")
    plan = planview.load(text)
    join, outer, inner = plan.nodes
    assert join.est_rows == 1.23e6 and join.actual_startup_ms == 934e-6
    assert inner.executed is False and inner.condition_texts("index_cond") == ["k=a.k"]
    assert (inner.relation, inner.index) == ("b", "ix")
    assert join.origin  # 1.23e+6 estimated against 12 found, with both inputs well estimated


def test_subquery_heading_becomes_a_sub_plan():
    # a constructed input, not a MySQL output: a heading line without numbers, as
    # docs (ENGINE-FORMATS.md) describe `-> Select #2 (subquery in condition; ...)`
    text = ("-> Filter: (t.a > (select #2))  (cost=1 rows=3) (actual time=0.1..0.2 rows=3 loops=1)\n"
            "    -> Table scan on t  (cost=1 rows=10) (actual time=0.1..0.1 rows=10 loops=1)\n"
            "    -> Select #2 (subquery in condition; run only once)\n"
            "        -> Aggregate: max(u.b)  (cost=1 rows=1) (actual time=0.1..0.1 rows=1 loops=1)\n"
            "            -> Table scan on u  (cost=1 rows=4) (actual time=0.1..0.1 rows=4 loops=1)\n")
    plan = planview.load(text, engine="mysql")
    agg = next(n for n in plan.nodes if n.operator == "Aggregate")
    assert agg.parent == 0 and agg.parent_relationship == "SubPlan"
    assert agg.subplan_name == "Select #2 (subquery in condition; run only once)"
    assert [plan.nodes[c].relation for c in plan.nodes[0].children] == ["t", None]


@pytest.mark.parametrize("cause", ["correlation", "skew", "range_gap", "stale_statistics",
                                   "default_selectivity"])
def test_fixes_are_histogram_statements(cause):
    sql, caution = engine.suggest_fix(cause, "shop.orders", ["status"])
    # statement form from the MySQL manual, ANALYZE TABLE Statement (histogram statistics), with
    # the names in backticks (manual, "Schema Object Names")
    assert "ANALYZE TABLE `orders` UPDATE HISTOGRAM ON `status` WITH" in sql and "BUCKETS;" in sql
    assert "change process" in caution and "DBA" in caution and "lock" in caution


def test_classic_json_is_refused_with_what_to_run():
    # source: the MySQL 9.5 manual's EXPLAIN FORMAT=JSON (version 1) example, abridged to its keys
    text = ('{"query_block": {"select_id": 1, "cost_info": {"query_cost": "3.67"}, "table": '
            '{"table_name": "country", "access_type": "range", "rows_examined_per_scan": 17}}}')
    with pytest.raises(PlanParseError) as err:
        planview.load(text)
    assert err.value.engine == "mysql" and "explain_json_format_version=2" in str(err.value)


def test_bad_lines_name_the_line():
    with pytest.raises(PlanParseError) as err:
        planview.load("-> Table scan on t  (cost=1 rows=2) (actual time=0.1..0.2 rows=2 loops=1)\n"
                      "    garbage here\n", engine="mysql", fmt="tree")
    assert err.value.line == 2
