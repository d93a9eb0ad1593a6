"""Diagnosis: a cause, its evidence and a fix for every origin, from the plan alone.

Sources named beside each check:
- real plans of real PostgreSQL 15 and 16 with one planted defect per case (captured by
  plans/capture_postgresql.py; manifest.json names the planted node);
- the PostgreSQL manual, "Multivariate Statistics Examples" (functional dependencies and
  ndistinct on the table t(a, b) with a = b = i % 100), run live on a real server here;
- the PostgreSQL manual, "Row Estimation Examples" (the product of selectivities);
- common practice: 9 rows, 3 distinct values per column (run live).
"""

from __future__ import annotations

import pytest
from plan_files import is_capture, path

import planview
from planview.diagnose import CAUSES, RULES, diagnose
from planview.diagnose.correlation import implied_per_clause

VERSIONS = ("15", "16")

# case -> (cause, relation of the planted node or None for a join, words the fix must hold)
PLANTED = {
    "correlated": ("correlation", "owners", ["CREATE STATISTICS", "owners", "town", "postcode", "ANALYZE"]),
    "nested_loop_inherited": ("correlation", "owners", ["CREATE STATISTICS", "town", "postcode"]),
    "skewed": ("skew", "visits", ["SET STATISTICS", "visits", "reason", "ANALYZE"]),
    "range_gap": ("range_gap", "invoices", ["SET STATISTICS", "invoices", "invoice_no"]),
    "stale": ("stale_statistics", "appointments", ["ANALYZE", "appointments", "autovacuum_analyze"]),
    "stale_count": ("stale_statistics", "appointments", ["ANALYZE", "appointments"]),
    "function": ("default_selectivity", "invoices", ["CREATE STATISTICS", "date_part", "issued_at"]),
    "join_correlated": ("correlation", None, ["cannot", "pets", "visits"]),
}


@pytest.mark.parametrize("version", VERSIONS)
@pytest.mark.parametrize("case", sorted(PLANTED))
def test_planted_defect_is_found_at_its_node(version, case):
    """Real plan, one planted defect: one origin, at the planted node, with the planted cause."""
    cause, relation, words = PLANTED[case]
    for fmt in ("text", "json"):
        plan = planview.load(path(version, case, fmt))
        assert len(plan.findings) == 1, (case, fmt, [(f.node, f.cause) for f in plan.findings])
        finding = plan.findings[0]
        node = plan.nodes[finding.node]
        assert finding.cause == cause, (case, finding.cause, finding.evidence["lines"])
        if relation:
            assert node.relation == relation
        else:
            assert node.own_rule == "join"
        for word in words:
            assert word in finding.fix, (case, word, finding.fix)
        assert finding.caution and "lock" in finding.caution.lower() and "DBA" in finding.caution
        assert 0 < finding.confidence <= 1 and finding.confidence_reason
        assert finding.evidence["lines"] and finding.evidence["est_rows"] == node.est_total
        assert finding.impact["text"]


@pytest.mark.parametrize("version", VERSIONS)
@pytest.mark.parametrize("case", ["well_estimated", "limit", "parallel", "cte", "append", "bitmap",
                                  "semi_join", "subplan", "initplan", "never_executed"])
def test_no_false_alarms(version, case):
    """Real plans whose estimates are all within 10x (or stopped early): no finding at all."""
    for fmt in ("text", "json", "xml", "yaml"):
        assert planview.load(path(version, case, fmt)).findings == [], (case, fmt)


@pytest.mark.parametrize("version", VERSIONS)
def test_inherited_nodes_point_to_their_origin(version):
    """Real plan: nodes above the planted scan carry its error and name it, without a cause."""
    plan = planview.load(path(version, "nested_loop_inherited", "json"))
    origin = plan.findings[0].node
    carriers = [n for n in plan.nodes if n.q_error and n.q_error >= 10 and not n.origin]
    assert carriers and all(n.inherits_from == [origin] for n in carriers)
    report = plan.report()
    assert {f["node"] for f in report["findings"]} == {origin}


def test_findings_ranked_by_impact():
    """Real multi-statement paste with two planted defects: ranked by time above each."""
    plan = planview.load(path("16", "multi", "text").with_name("multi.text.txt"))
    assert len(plan.findings) == 2
    times = [f.impact["ms"] for f in plan.findings]
    assert times == sorted(times, reverse=True)
    assert [f.rank for f in plan.findings] == [1, 2]


def test_clauses_are_parsed_not_grepped():
    """Real plans' conditions: casts, ANY arrays, InitPlan references, sub-plans and qualified
    names are read by sqlglot; every clause of every captured plan is classified or reported."""
    from planview.diagnose.clauses import merge_ranges, parse_condition

    seen = set()
    for version in VERSIONS:
        for plan_path in filter(is_capture, path(version, "correlated", "text").parent.glob("*.json")):
            plan = planview.load(plan_path)
            for node in plan.nodes:
                for cond in node.conditions:
                    for clause in merge_ranges(parse_condition(cond.text, cond.kind, "postgres")):
                        seen.add(clause.op_class)
                        assert clause.op_class != "unparsed", (plan_path.name, cond.text, clause.parse_error)
    assert {"equality", "open_range", "closed_range"} <= seen
    clause = parse_condition("(v.pet_id = ANY ('{1,2,3}'::integer[]))", "filter", "postgres")[0]
    assert clause.op_class == "in_list" and clause.bare
    clause = parse_condition("(i.total_cents > (InitPlan 1).col1)", "filter", "postgres")[0]
    assert clause.op_class == "open_range" and clause.has_parameter
    clause = parse_condition("((lower(o.email))::text ~~ '%@example.org'::text)", "filter", "postgres")[0]
    assert clause.op_class == "like_leading_wildcard" and not clause.bare
    broken = parse_condition("(a = ", "filter", "postgres")[0]
    assert broken.op_class == "unparsed" and broken.parse_error


def test_rules_can_be_switched_off():
    """Real plan: without the skew rule, the skewed case is no longer called skew."""
    plan = planview.load(path("16", "skewed", "text"))
    assert plan.findings[0].cause == "skew"
    diagnose(plan, rules=tuple(r for r in RULES if r[0] != "skew"))
    assert plan.findings[0].cause != "skew" and plan.findings[0].cause in CAUSES


def test_manual_product_of_selectivities():
    """PostgreSQL manual, Row Estimation Examples: unique1 < 1000 AND stringu1 = 'xxx' on
    tenk1 (10,000 rows): 0.100697 x 0.0014559 x 10,000 = 1.47, printed as 1 row; and the
    multivariate example's a = 1 AND b = 1: 1% x 1% -> 0.01% (1 row of 10,000)."""
    assert round(10_000 * 0.100697 * 0.0014559) == 1
    assert implied_per_clause(1e-4, 2) == pytest.approx(0.01)


@pytest.mark.pg
def test_manual_multivariate_example_live(pg_servers):
    """PostgreSQL manual, Multivariate Statistics Examples, run on a real server: a = 1 AND
    b = 1 is estimated at 1 row and returns 100; planview calls it correlation, proposes
    extended statistics; running that fix makes the estimate 100, as the manual says."""
    db = pg_servers.create_database(f"manual_mv_{pg_servers.source}")
    db.execute("CREATE TABLE t (a INT, b INT); "
               "INSERT INTO t SELECT i % 100, i % 100 FROM generate_series(1, 10000) s(i); ANALYZE t;")
    single = planview.load(db.explain("SELECT * FROM t WHERE a = 1", "text", ("ANALYZE", "TIMING OFF")))
    assert single.nodes[0].est_rows == 100 and single.nodes[0].actual_rows == 100
    assert single.findings == []
    query = "SELECT * FROM t WHERE a = 1 AND b = 1"
    plan = planview.load(db.explain(query, "text", ("ANALYZE", "TIMING OFF")))
    node = plan.nodes[0]
    assert (node.est_rows, node.actual_rows) == (1, 100)
    finding = plan.findings[0]
    assert finding.cause == "correlation" and finding.direction == "under"
    assert finding.evidence["implied_single_selectivity"] == pytest.approx(0.01, rel=0.01)
    assert finding.confidence >= 0.8
    # prove the fix: run exactly the suggested SQL in the throw-away database
    db.execute(finding.fix)
    fixed = planview.load(db.explain(query, "text", ("ANALYZE", "TIMING OFF")))
    assert fixed.nodes[0].est_rows == 100 and fixed.findings == []
    # ndistinct: GROUP BY a, b estimated 1000 groups without statistics (manual), 100 with
    db.execute("DROP STATISTICS IF EXISTS " + finding.fix.split()[5] + "; ANALYZE t;")
    group = planview.load(db.explain("SELECT COUNT(*) FROM t GROUP BY a, b", "json", ("ANALYZE",)))
    agg = next(n for n in group.nodes if n.operator == "Aggregate")
    assert (agg.est_rows, agg.actual_rows) == (1000, 100)
    assert group.findings and group.findings[0].node == agg.id
    assert group.findings[0].cause == "correlation"
    db.execute(group.findings[0].fix)
    regrouped = planview.load(db.explain("SELECT COUNT(*) FROM t GROUP BY a, b", "json", ("ANALYZE",)))
    assert next(n for n in regrouped.nodes if n.operator == "Aggregate").est_rows == 100


@pytest.mark.pg
def test_nine_rows_three_values_live(pg_servers):
    """Common practice: 9 rows, 3 distinct values: an equality is 1/3 -> 3 rows; two
    independent columns 1/9 -> 1 row; correlated columns really give 3 rows (or none)."""
    db = pg_servers.create_database(f"nine_{pg_servers.source}")
    db.execute("CREATE TABLE nine (a int, b int); "
               "INSERT INTO nine SELECT i % 3, i % 3 FROM generate_series(1, 9) i; ANALYZE nine;")
    one = planview.load(db.explain("SELECT * FROM nine WHERE a = 1", "text"))
    assert (one.nodes[0].est_rows, one.nodes[0].actual_rows) == (3, 3)
    both = planview.load(db.explain("SELECT * FROM nine WHERE a = 1 AND b = 1", "text"), threshold=2)
    assert (both.nodes[0].est_rows, both.nodes[0].actual_rows) == (1, 3)
    assert both.findings and both.findings[0].cause == "correlation"
    never = planview.load(db.explain("SELECT * FROM nine WHERE a = 1 AND b = 2", "text"))
    assert (never.nodes[0].est_rows, never.nodes[0].actual_rows) == (1, 0)
    assert never.findings == []  # 1 row vs none: within the default tenfold


@pytest.mark.pg
@pytest.mark.parametrize("case", sorted(PLANTED) + ["well_estimated", "limit"])
def test_planted_defects_live(scenario_db, case):
    """Live: each planted case run now on each real server gives its cause at its node
    (and the well-estimated and LIMIT plans give no finding at all)."""
    plan = planview.load(scenario_db.explain_case(case, "json"))
    if case in ("well_estimated", "limit"):
        assert plan.findings == []
        return
    cause, relation, words = PLANTED[case]
    assert [f.cause for f in plan.findings] == [cause], (case, scenario_db.version)
    node = plan.nodes[plan.findings[0].node]
    assert node.relation == relation if relation else node.own_rule == "join"
    assert all(word in plan.findings[0].fix for word in words)


def test_past_the_diagnosis_cap_origins_keep_rank_and_numbers():
    """A plan with more origins than the cap diagnoses the largest-impact ones in full; the rest
    keep their rank and numbers, marked not diagnosed, and the plan says so. Source: the real
    PG 16 capture `multi.json` (two origins, from two statements), with the cap set to one."""
    plan = planview.load(path("16", "multi", "json").read_text())
    full = [(f.node, f.rank, f.cause) for f in plan.findings]
    assert len(full) == 2 and "not_diagnosed" not in {c for _, _, c in full}
    diagnose(plan, max_diagnosed=1)
    capped = [(f.node, f.rank, f.cause) for f in plan.findings]
    assert capped[0] == full[0]
    assert capped[1][:2] == full[1][:2] and capped[1][2] == "not_diagnosed"
    assert plan.findings[1].evidence["lines"] and plan.findings[1].caution
    assert any("diagnosed" in note for note in plan.notes)


def test_a_dollar_in_a_literal_is_kept_and_a_parameter_still_read():
    """PostgreSQL prints a query parameter as $n outside quotes (the manual, "PREPARE"); inside
    a string literal a $ is a character of the value: a SCRAM verifier begins
    'SCRAM-SHA-256$4096:' (RFC 5803). The real range_gap capture (PostgreSQL 16), its origin's
    condition replaced: the evidence holds the literals exactly as the plan wrote them."""
    import json

    from plan_files import with_payloads

    literal_low, literal_high = "SCRAM-SHA-256$4096:aa", "SCRAM-SHA-256$4096:zz"
    condition = (f"((invoice_no >= '{literal_low}'::text) AND (invoice_no <= '{literal_high}'::text) "
                 "AND (invoice_no > $1))")
    doc = with_payloads(path("16", "range_gap", "json"), {"Index Cond": condition})
    plan = planview.load(json.dumps(doc))
    assert plan.findings
    evidence = plan.findings[0].evidence
    said = json.dumps(evidence, ensure_ascii=False)
    assert "__pv_" not in said and "$param:" not in said
    constants = [c for clause in evidence["clauses"] for c in clause["constants"]]
    assert literal_low in constants and literal_high in constants
    assert any(clause["has_parameter"] for clause in evidence["clauses"])
    assert f"'{literal_low}'" in plan.to_markdown().replace("\\", "")


def test_an_alias_names_a_table_of_its_own_statement_only():
    """A paste of two real PostgreSQL 16 captures, the first's scan of owners aliased ``p``
    (an alias is the statement's own: the manual, "Table and Column Aliases"); in the second,
    join_correlated, ``p`` is pets. The second statement's join origin names pets, as its raw
    plan says, never the first statement's owners."""
    import json

    from plan_files import with_payloads

    first = with_payloads(path("16", "correlated", "json"), {"Alias": "p"})
    second = json.loads(path("16", "join_correlated", "json").read_text(encoding="utf-8"))
    scans, todo = {}, [second[0]["Plan"]]
    while todo:  # the second statement's own aliases, read from its raw JSON
        node = todo.pop()
        if "Alias" in node:
            scans[node["Alias"]] = node["Relation Name"]
        todo += node.get("Plans", [])
    assert scans["p"] == "pets"
    plan = planview.load(json.dumps(first) + "\n" + json.dumps(second))
    assert len(plan.statements) == 2
    join = next(f for f in plan.findings if plan.nodes[f.node].statement == 1 and plan.nodes[f.node].relation is None)
    assert join.cause == "correlation"
    assert join.evidence["table"].split(".")[-1] == "pets"
    assert "owners" not in join.fix and "pets" in join.fix
