"""Where an error is introduced, on real engines' plans: each class of false or hidden origin.

Sources, named beside each check:
- TPC-H captures in plans/tpch/ (PostgreSQL 15, 16, 18 serial and parallel; DuckDB), scale 0.5,
  made by plans/capture_tpch.py; the queries' LIMIT counts are the TPC-H specification's
  ("return the first 100 rows": Q2, Q18, Q21);
- plans run live in the test: PostgreSQL through tests/pgharness.py, DuckDB embedded.
Every expected figure is read from the raw plan with `json.load` here (`_raw_pg`, `_raw_duckdb`),
never from planview's output.
"""

from __future__ import annotations

import json
from pathlib import Path

import duckdb
import pytest

import planview

TPCH = Path(__file__).resolve().parents[1] / "plans" / "tpch"
PG = ("pg15", "pg16", "pg18")
MODES = ("serial", "par")


def _raw_pg(rel: str) -> list[dict]:
    """The plan's nodes in pre-order, as PostgreSQL printed them."""
    out, todo = [], [s["Plan"] for s in reversed(json.loads((TPCH / rel).read_text()))]
    while todo:
        node = todo.pop()
        out.append(node)
        todo.extend(reversed(node.get("Plans", [])))
    return out


def _raw_duckdb(rel: str) -> list[dict]:
    """DuckDB's operators in pre-order, below its own wrappers."""
    roots = json.loads((TPCH / rel).read_text())["operator"]
    while len(roots) == 1 and roots[0]["name"] in ("RESULT_COLLECTOR", "EXPLAIN_ANALYZE"):
        roots = roots[0]["children"]
    out, todo = [], list(reversed(roots))
    while todo:
        node = todo.pop()
        out.append(node)
        todo.extend(reversed(node.get("children", [])))
    return out


def _origin_ids(plan) -> set[int]:
    return {f.node for f in plan.findings}


# -- 1. Limit above a short input ---------------------------------------------------------

@pytest.mark.parametrize("version", PG)
@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize("query", ("q02", "q21"))
def test_limit_over_a_short_input_is_no_origin_pg(version, mode, query):
    """TPC-H Q2/Q21 (LIMIT 100) on PostgreSQL: the Limit is estimated at 1 row because its input
    is, and emitted 100 of its input's rows: min(100, input) both ways, so it is no origin."""
    rel = f"{version}/{query}.{mode}.json"
    raw = _raw_pg(rel)
    assert raw[0]["Node Type"] == "Limit" and raw[0]["Plan Rows"] == raw[1]["Plan Rows"] == 1
    assert raw[0]["Actual Rows"] == 100
    plan = planview.load(TPCH / rel)
    assert 0 not in _origin_ids(plan)
    assert plan.findings  # the error below stays an origin


@pytest.mark.parametrize("version", PG)
@pytest.mark.parametrize("mode", MODES)
def test_limit_above_fewer_rows_than_its_count_pg(version, mode):
    """TPC-H Q18 (LIMIT 100): the input returned 29 rows, estimated far above 100; the Limit's
    estimate is its count (100) and its actual its input's 29: no error of its own."""
    rel = f"{version}/q18.{mode}.json"
    raw = _raw_pg(rel)
    assert raw[0]["Plan Rows"] == 100 < raw[1]["Plan Rows"] and raw[0]["Actual Rows"] == 29
    plan = planview.load(TPCH / rel)
    assert 0 not in _origin_ids(plan)
    assert plan.nodes[0].own_log10_ratio == pytest.approx(0, abs=1e-6)


@pytest.mark.parametrize("query", ("q02", "q18"))
def test_top_n_judged_against_its_n_duckdb(query):
    """TPC-H Q2/Q18 on DuckDB: TOP_N prints Top=100; Q2's input returned 209 (it emitted 100),
    Q18's returned 29 (it emitted 29): min(100, input) both ways, so it is no origin."""
    rel = f"duckdb/{query}.json"
    raw = _raw_duckdb(rel)
    top, below = raw[0], raw[1]
    assert top["name"] == "TOP_N" and top["extra_info"]["Top"] == "100"
    assert top["intermediate_rows"] == min(100, below["intermediate_rows"])
    assert 0 not in _origin_ids(planview.load(TPCH / rel))


# -- 2. A join with one input not judged --------------------------------------------------

def _node(plan, operator: str, **fields):
    return next(n for n in plan.nodes if n.operator == operator
                and all(getattr(n, k) == v for k, v in fields.items()))


@pytest.mark.parametrize("version", PG)
def test_merge_join_inherits_from_its_input_that_ran_to_the_end(version):
    """TPC-H Q18 serial: the Merge Join (est 120k/114k, 29 rows) reads customer (stopped early
    when the other side ran out) and a Materialize over a Sort that emitted all of the 29 rows
    its Hash Join gave: that side ran to its end and carries the error of the HAVING aggregate
    (Aggregate with Filter sum(l_quantity) > 300: est 120k/114k, 29 rows). The join adds none."""
    rel = f"{version}/q18.serial.json"
    raw = _raw_pg(rel)
    merge = next(i for i, n in enumerate(raw) if n["Node Type"] == "Merge Join")
    having = next(i for i, n in enumerate(raw) if n["Node Type"] == "Aggregate" and "Filter" in n)
    sort = next(i for i, n in enumerate(raw) if i > merge and n["Node Type"] == "Sort")
    assert raw[sort]["Actual Rows"] == raw[sort + 1]["Actual Rows"] == 29  # the Sort emitted all
    assert raw[having]["Plan Rows"] / raw[having]["Actual Rows"] > 1000
    plan = planview.load(TPCH / rel)
    assert merge not in _origin_ids(plan) and having in _origin_ids(plan)
    assert plan.nodes[sort].judged
    assert having in plan.nodes[merge].inherits_from


@pytest.mark.parametrize("version", PG)
def test_merge_join_over_a_default_selectivity_aggregate(version):
    """TPC-H Q15 serial: the Merge Join (est 25, 1 row) reads supplier (2,976 of 5,000: stopped
    when revenue0 ran out) and a Sort of revenue0 that emitted its one row: the error is the
    aggregate's HAVING sum(...) = $0 (est 25, 1 row), not the join's."""
    rel = f"{version}/q15.serial.json"
    raw = _raw_pg(rel)
    assert raw[0]["Node Type"] == "Merge Join" and raw[0]["Actual Rows"] == 1
    having = next(i for i, n in enumerate(raw) if n["Node Type"] == "Aggregate" and "Filter" in n)
    plan = planview.load(TPCH / rel)
    assert 0 not in _origin_ids(plan) and having in _origin_ids(plan)


# -- 3. Errors that cannot be measured ----------------------------------------------------

@pytest.mark.pg
def test_join_over_an_empty_input_is_not_measurable(pg_servers):
    """Live PostgreSQL: a scan whose statistics still count rows that were deleted (est ~100,
    0 rows) under a selective join (est ~5, 0 rows). The join's "own" error (est 5 vs an
    input 100x over) would be an underestimate made of the one-row floors: not judged."""
    db = pg_servers.create_database(f"empty_input_{pg_servers.source}")
    db.execute("CREATE TABLE t (id int, g int); CREATE TABLE u (id int PRIMARY KEY, w int); "
               "INSERT INTO t SELECT i, i % 1000 FROM generate_series(1, 100000) i; "
               "INSERT INTO u SELECT i, i FROM generate_series(1, 5000) i; "
               "ANALYZE t; ANALYZE u; DELETE FROM t WHERE g = 5;")
    out = db.explain("SELECT * FROM t JOIN u ON u.id = t.id WHERE t.g = 5", "json")
    raw = [n for n in _walk_json(json.loads(out))]
    join, scan = raw[0], next(n for n in raw if n.get("Relation Name") == "t")
    assert join["Actual Rows"] == scan["Actual Rows"] == 0 and scan["Plan Rows"] >= 50
    assert join["Plan Rows"] < scan["Plan Rows"]
    plan = planview.load(out)
    top = plan.nodes[0]
    assert not top.origin and top.not_judged_reason.startswith("not measurable")
    t_scan = next(n for n in plan.nodes if n.relation == "t")
    assert t_scan.origin  # the stale estimate is where it was introduced


def _walk_json(doc: list) -> list[dict]:
    out, todo = [], [s["Plan"] for s in reversed(doc)]
    while todo:
        node = todo.pop()
        out.append(node)
        todo.extend(reversed(node.get("Plans", [])))
    return out


# -- 4. Grouping capped by its input ------------------------------------------------------

@pytest.mark.parametrize("version", PG)
@pytest.mark.parametrize("mode", MODES)
def test_group_capped_by_its_input_floor_is_no_origin(version, mode):
    """TPC-H Q21: GroupAggregate by s_name estimated 1 group from an input estimated at 1 row
    (the floor); it found 194 groups in 1,941 rows. Its input's error (x1,941 under) explains
    its own (x194 under) as well as none: no origin; the anti join below is."""
    rel = f"{version}/q21.{mode}.json"
    raw = _raw_pg(rel)
    agg = next(i for i, n in enumerate(raw) if n["Node Type"] == "Aggregate" and "Group Key" in n)
    assert raw[agg]["Plan Rows"] == 1 and raw[agg + 1]["Plan Rows"] == 1
    plan = planview.load(TPCH / rel)
    assert agg not in _origin_ids(plan)
    anti = next(n.id for n in plan.nodes if n.join_type == "Anti")
    assert anti in _origin_ids(plan)


# -- 5. Rounded per-loop actuals ----------------------------------------------------------

def test_exact_inner_total_shows_a_hidden_overestimate_pg15():
    """TPC-H Q3 on PostgreSQL 15: the lineitem index scan prints rows=0 loops=73,792 with an
    estimate of 4 a loop (295,168 in all); the inner nested loop above has no join filter and
    emitted 15,628 rows, so the scan returned exactly 15,628: x18.9 over, an origin (the most
    lenient end of the rounding, 36,896, hid it as x8)."""
    rel = "pg15/q03.serial.json"
    raw = _raw_pg(rel)
    loop = next(i for i, n in enumerate(raw) if n["Node Type"] == "Nested Loop")
    scan = next(i for i, n in enumerate(raw) if n.get("Relation Name") == "lineitem")
    assert "Join Filter" not in raw[loop] and raw[scan]["Actual Rows"] == 0
    exact = raw[loop]["Actual Rows"]
    est = raw[scan]["Plan Rows"] * raw[scan]["Actual Loops"]
    plan = planview.load(TPCH / rel)
    node = plan.nodes[scan]
    assert node.actual_total == exact == 15628
    assert node.extra["actual_total_range"] == [exact, exact]
    assert scan in _origin_ids(plan)
    assert [f.own_q_error for f in plan.findings if f.node == scan][0] == pytest.approx(est / exact, rel=1e-6)


@pytest.mark.pg
def test_rounded_rows_repaired_through_a_memoize(pg_servers):
    """Live PostgreSQL: an inner nested loop over a Memoize over an index scan, every per-loop
    count printed as 0. Keys 0..249 repeat 20 times; only multiples of 7 exist in the table
    (35 keys of 250), so the join emits 700 rows: the Memoize returned exactly 700, and the
    scan, run once per distinct key (250 misses), 35."""
    if pg_servers.version >= 18:
        pytest.skip("PostgreSQL 18 prints two-decimal rows; this is about integer rounding")
    db = pg_servers.create_database(f"memoize_{pg_servers.source}")
    db.execute("CREATE TABLE marks (id int PRIMARY KEY, v int); "
               "INSERT INTO marks SELECT g * 7, g FROM generate_series(1, 60000) g; ANALYZE marks;"
               "CREATE TABLE probes (k int); "
               "INSERT INTO probes SELECT g % 250 FROM generate_series(1, 5000) g; ANALYZE probes;")
    out = db.explain("SELECT * FROM probes p JOIN marks m ON m.id = p.k", "json",
                     settings={"enable_hashjoin": "off", "enable_mergejoin": "off"})
    raw = _walk_json(json.loads(out))
    kinds = [n["Node Type"] for n in raw]
    assert "Memoize" in kinds, kinds
    memo = raw[kinds.index("Memoize")]
    scan = raw[kinds.index("Memoize") + 1]
    assert raw[0]["Actual Rows"] == 700 and memo["Actual Rows"] == 0 == scan["Actual Rows"]
    assert memo["Cache Misses"] == scan["Actual Loops"] == 250
    plan = planview.load(out)
    m, s = plan.nodes[kinds.index("Memoize")], plan.nodes[kinds.index("Memoize") + 1]
    assert m.actual_total == 700
    assert s.actual_total == pytest.approx(35)


# -- 6. DuckDB run-time filters -----------------------------------------------------------

def test_runtime_filter_that_cut_nothing_does_not_shield_the_join():
    """DuckDB embedded: big.k is 1 on 90,000 of 100,000 rows, small.k is 1 on 1,000 of 11,000;
    every key of big is in small, so the run-time filter pushed into the scan of big cut
    nothing (it emitted all 100,000 rows). The join returns 90,000 x 1,000 + 10,000 rows;
    DuckDB's estimate from distinct counts is far below: the join is the origin."""
    con = duckdb.connect()
    con.execute("CREATE TABLE big AS SELECT CASE WHEN i < 90000 THEN 1 ELSE i - 89998 END AS k "
                "FROM range(100000) t(i)")
    con.execute("CREATE TABLE small AS SELECT CASE WHEN i < 1000 THEN 1 ELSE i - 998 END AS k "
                "FROM range(11000) t(i)")
    out = con.execute("EXPLAIN (ANALYZE, FORMAT json) SELECT count(*) FROM big JOIN small USING (k)"
                      ).fetchall()[0][1]
    plan = planview.load(out)
    join = next(n for n in plan.nodes if n.operator == "HASH_JOIN")
    probe = next(n for n in plan.nodes if n.relation == "big")
    assert join.actual_total == 90_000 * 1_000 + 10_000
    assert probe.actual_total == 100_000
    if not probe.extra.get("dynamic_filters"):
        pytest.skip(f"DuckDB {duckdb.__version__} pushed no run-time filter into the scan")
    assert join.origin and join.est_total * 10 < join.actual_total


# -- DuckDB's CTE node: its consumer reads the query after the CTE ------------------------

@pytest.mark.parametrize("query", ("q02", "q11", "q15", "q17"))
def test_consumer_of_a_duckdb_cte_is_judged_against_the_query_it_returns(query):
    """TPC-H on DuckDB: a materialised CTE node prints 0 rows and returns its last child's rows;
    the PROJECTION above it equals that child in estimate and rows, so it adds no error."""
    rel = f"duckdb/{query}.json"
    raw = _raw_duckdb(rel)
    cte = next(i for i, n in enumerate(raw) if n["name"] == "CTE")
    above, last = raw[cte - 1], raw[cte]["children"][-1]
    assert raw[cte]["intermediate_rows"] == 0
    assert above["intermediate_rows"] == last["intermediate_rows"]
    assert above["extra_info"]["Estimated Cardinality"] == last["extra_info"]["Estimated Cardinality"]
    assert cte - 1 not in _origin_ids(planview.load(TPCH / rel))


# -- 7. Parallel conventions --------------------------------------------------------------

@pytest.mark.parametrize("version", ("pg15", "pg16"))
def test_partial_aggregate_is_per_process(version):
    """TPC-H Q7 parallel (1 worker planned): the Partial GroupAggregate estimates the groups of
    one process's share (1,779/1,802) and each of its 2 loops emitted its own 4: est_total is
    est_rows x loops, not est_rows x the parallel divisor."""
    rel = f"{version}/q07.par.json"
    raw = _raw_pg(rel)
    partial = next(i for i, n in enumerate(raw) if n.get("Partial Mode") == "Partial")
    plan = planview.load(TPCH / rel)
    node = plan.nodes[partial]
    assert node.est_total == raw[partial]["Plan Rows"] * raw[partial]["Actual Loops"]
    assert partial in _origin_ids(plan)


def test_group_count_far_below_its_input_estimate_is_its_own():
    """Live DuckDB: late deliveries (every 1,000th) all belong to depot_0, so to one manager of
    twelve. DuckDB estimates the grouping from the managers' distinct count (about a dozen
    groups) far below its input's estimate (the LIKE default, 40,000 rows): a right input
    estimate (200 rows, still above a dozen) would not have changed that count, so the grouping's
    overestimate is its own (the filter correlates with the grouping key), not its input's."""
    con = duckdb.connect()
    con.execute("CREATE TABLE depots AS SELECT 'depot_' || i AS depot, 'manager_' || (i % 12) AS manager "
                "FROM range(40) t(i)")
    con.execute("CREATE TABLE deliveries AS SELECT i AS delivery_id, 'depot_' || (i % 40) AS depot, "
                "CASE WHEN i % 1000 = 0 THEN 'late' ELSE 'on time' END AS status FROM range(200000) t(i)")
    query = ("SELECT d.manager, count(*) FROM deliveries v JOIN depots d USING (depot) "
             "WHERE v.status LIKE '%late%' GROUP BY d.manager")
    profile = con.execute("EXPLAIN (ANALYZE, FORMAT json) " + query).fetchall()[0][1]
    raw = [n for n in _walk_raw(json.loads(profile)["operator"]) if "GROUP_BY" in str(n.get("type", n.get("name")))]
    assert len(raw) == 1
    est_groups = float(raw[0]["extra_info"]["Estimated Cardinality"])
    actual_groups = raw[0]["intermediate_rows"]
    assert actual_groups == 1 and est_groups >= 10  # the planted correlation, read from the raw profile
    plan = planview.load(profile)
    group = next(n for n in plan.nodes if "GROUP" in n.operator)
    assert group.origin and group.id in [f.node for f in plan.findings]
    assert round(10 ** abs(group.own_log10_ratio)) == round(est_groups)


def _walk_raw(doc):
    todo = [doc] if isinstance(doc, dict) else list(doc)
    while todo:
        node = todo.pop()
        yield node
        todo.extend(node.get("children", []))


@pytest.mark.parametrize("rel", ("pg15/q09.par.json", "pg16/q09.serial.json", "pg18/q09.serial.json"))
def test_clamped_inner_estimate_leaves_the_key_selectivity_with_the_join(rel):
    """TPC-H Q9: lineitem is looked up per partsupp row on (l_partkey, l_suppkey), printed at
    the planner's 1-row floor, and finds 7 a loop (a (part, supplier) pair has about 7 lines in
    TPC-H's data). The join's estimate over its outer estimate is far below one row a loop:
    the selectivity the planner gave the two keys together, which is the join's. Judged at the
    1 row printed, the scan is under x10; the join, with its outer input right, is the origin
    (figures read from the raw plan; which node carries the error: plans/tpch/*/q09.*.expected.json)."""
    raw = _raw_pg(rel)
    scan = next(i for i, n in enumerate(raw) if n.get("Relation Name") == "lineitem")
    join = next(i for i, n in enumerate(raw) if scan in
                [j for j, m in enumerate(raw) if m in n.get("Plans", [])])
    outer = next(j for j, m in enumerate(raw) if m is raw[join]["Plans"][0])
    assert raw[scan]["Plan Rows"] == 1 and raw[scan]["Actual Rows"] >= 1
    per_loop_planned = raw[join]["Plan Rows"] / raw[outer]["Plan Rows"]
    assert per_loop_planned < 0.01
    # the inner side of a nested loop without a join filter returned exactly the join's rows
    # (the printed 7 a loop is rounded): its rows a loop are the join's over the outer's
    join_rows = raw[join]["Actual Rows"] * raw[join]["Actual Loops"]
    outer_rows = raw[outer]["Actual Rows"] * raw[outer]["Actual Loops"]
    assert "Join Filter" not in raw[join]
    own = (join_rows / raw[join]["Plan Rows"]) / (outer_rows / raw[outer]["Plan Rows"]) / (join_rows / outer_rows)
    assert own > 100
    plan = planview.load(TPCH / rel)
    assert _origin_ids(plan) & {scan, join} == {join}
    finding = next(f for f in plan.findings if f.node == join)
    assert finding.own_q_error == pytest.approx(own, rel=0.05)
    assert finding.cause == "correlation"
