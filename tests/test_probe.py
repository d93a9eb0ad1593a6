"""Probes on a live server: the statistics behind each planted defect, read-only.

Source: real PostgreSQL 15 and 16 servers started by the tests (tests/pgharness.py), the
planted-defect scenario, and the PostgreSQL manual's multivariate example (a = b = i % 100).
"""

from __future__ import annotations

import pytest

import planview
from planview.errors import ProbeError
from planview.probe import probe
from planview.probe.clause_sql import UnsafeClause, quote_ident, quote_literal, render_clause
from planview.probe.postgresql import looks_secret, safe_clause

EXPECT = {"correlated": "supports", "nested_loop_inherited": "supports", "skewed": "supports",
          "range_gap": "supports", "stale": "supports"}


def test_only_plain_clauses_are_sent():
    """Clause text from a paste is planned on the server only when it is columns, constants,
    casts and comparisons: no function call, no second statement."""
    assert safe_clause("(o.town = 'Larkhollow'::text)")
    assert safe_clause("((invoice_no >= 300000) AND (invoice_no <= 800000))")
    assert safe_clause("(reason = ANY ('{a,b}'::text[]))")
    assert not safe_clause("(lower(o.email) = 'x'::text)")
    assert not safe_clause("(x = 1); DROP TABLE t")
    assert not safe_clause("(pg_sleep(10) IS NULL)")
    assert not safe_clause("((SELECT 1) = 1)")


@pytest.mark.pg
@pytest.mark.parametrize("case", sorted(EXPECT))
def test_probe_supports_the_planted_cause(scenario_db, case):
    plan = planview.load(scenario_db.explain_case(case, "json"))
    with scenario_db.connect() as conn:
        results = probe(plan, conn)
    assert len(results) == 1
    result = results[0]
    assert result.verdict == EXPECT[case], (case, result.summary, [c.says for c in result.checks])
    assert result.checks and all(c.says for c in result.checks)


@pytest.mark.pg
def test_probe_reads_only(scenario_db):
    """After probing every finding, the statistics and the objects are as they were, and the
    connection is usable and outside any transaction."""
    state_sql = ("SELECT (SELECT count(*) FROM pg_statistic_ext), (SELECT count(*) FROM pg_class), "
                 "(SELECT max(last_analyze)::text FROM pg_stat_user_tables)")
    with scenario_db.connect() as conn:
        conn.autocommit = True
        before = conn.execute(state_sql).fetchone()
        for case in ("correlated", "skewed", "range_gap", "stale", "function", "join_correlated"):
            plan = planview.load(scenario_db.explain_case(case, "json"))
            probe(plan, conn)
        after = conn.execute(state_sql).fetchone()
        assert conn.info.transaction_status == 0  # idle: nothing left open
    assert before == after


@pytest.mark.pg
def test_manual_example_independence(pg_servers):
    """PostgreSQL manual, Multivariate Statistics Examples: each clause alone is estimated at
    100 rows (1%), together at 1 row, which is exactly the product of the selectivities."""
    db = pg_servers.create_database(f"probe_mv_{pg_servers.source}")
    db.execute("CREATE TABLE t (a INT, b INT); "
               "INSERT INTO t SELECT i % 100, i % 100 FROM generate_series(1, 10000) s(i); ANALYZE t;")
    plan = planview.load(db.explain("SELECT * FROM t WHERE a = 1 AND b = 1", "json", ("ANALYZE",)))
    with db.connect() as conn:
        result = probe(plan, conn)[0]
    singles = [c.result["estimate"] for c in result.checks if c.what == "one clause alone"]
    assert singles == [100, 100]
    independence = next(c.result for c in result.checks if c.what == "independence")
    assert independence["combined_estimate"] == 1 and independence["product_of_selectivities"] == pytest.approx(1)
    assert result.verdict == "supports"


def test_probe_without_a_server_is_a_clear_error():
    plan = planview.load((__import__("plan_files").path("16", "correlated", "json")).read_text())
    with pytest.raises(ProbeError):
        probe(plan, "host=/nonexistent-socket-dir dbname=postgres connect_timeout=2")


def test_more_string_forms_are_not_sent():
    """String forms whose meaning depends on settings, or that hide a call (PostgreSQL manual,
    "Lexical Structure": escape strings, dollar quoting, adjacent literals, U& strings), and
    casts to types that are not built in."""
    for text in [r"(x = '\')", "(x = E'a')", "(x = $$a$$)", "(x = 'a' 'b')", r"(x = U&'d\0061')",
                 "(x = 'v'::mood)", "(x = '1'::regclass)", "(x = 'a'::text COLLATE \"C\")", "(1 = 1)",
                 "(x ~ 'a')", "(x = (SELECT 1))", "(a.b.c = 1)"]:
        assert not safe_clause(text), text


def test_clauses_are_rendered_bracketed_from_the_tree():
    """Each operator is bracketed, so an OR group joined with AND keeps its meaning."""
    rendered = render_clause("(a = 1) OR (b = 'x'::text)")
    assert rendered.sql == ('(("a" OPERATOR(pg_catalog.=) 1) OR '
                            "(\"b\" OPERATOR(pg_catalog.=) CAST('x' AS pg_catalog.text)))")
    assert [name for _, name in rendered.columns] == ["a", "b"]
    assert render_clause('(o."Town" = 1)', qualifiers={"o": "o"}).columns == (("o", "Town"),)
    with pytest.raises(UnsafeClause, match="not to the table probed"):
        render_clause("(p.town = 1)", qualifiers={"o": "o"})


@pytest.mark.pg
def test_quoting_survives_the_real_parser(pg_servers):
    """The server's own parser reads back each hostile value and name exactly as given, with
    the setting the probe pins (standard_conforming_strings = on)."""
    values = ["it's", "'; DROP TABLE t; --", "$$ $q$", "/* x", "line\nbreak", "tab\tand é ☃", "''''"]
    names = ['we"ird', "Mixed Case", "select", 'x"; DROP TABLE t; --']
    with pg_servers.connect(autocommit=True) as conn:
        conn.execute("SET standard_conforming_strings = on")
        for value in values:
            assert conn.execute(f"SELECT {quote_literal(value)}::text").fetchone()[0] == value
        for name in names:
            assert conn.execute(f"SELECT 1 AS {quote_ident(name)}").description[0].name == name


def test_secret_looking_columns():
    """common practice: names that hold credentials, and binary columns."""
    assert all(looks_secret(n) for n in ("rolpassword", "passwd", "api_key", "apiKey", "reset_token",
                                         "pw_hash", "salt", "key", "client_secret"))
    assert looks_secret("payload", "bytea")
    assert not any(looks_secret(n) for n in ("o_custkey", "town", "passenger_count", "created_at", "monkey"))
