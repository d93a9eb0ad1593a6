"""The fix SQL holds only the statements intended, whatever names and expressions a plan carries.

Every fix template of every engine gets hostile names and expressions. Each result is read
by sqlglot's tokenizer in the engine's dialect (statements counted and named), and, where the
engine runs here, by the engine itself: psql -f on a throw-away PostgreSQL database (as a DBA
would paste it: no ON_ERROR_STOP), DuckDB's own parser and an in-memory database, the
mariadb client with --force on a throw-away MariaDB. A planted table must survive each run.

Sources: psql's and the server's comment and quoting rules (PostgreSQL manual, "Lexical
Structure", 4.1.1 and 4.1.5, and psql's "Meta-Commands"); MySQL/MariaDB manual, "Identifier
Names" and "Comment Syntax"; DuckDB manual, "Keywords and Identifiers". The statements each
template is meant to hold are written below from what each template is for, not read from
planview's output.
"""

from __future__ import annotations

import json
import os
import subprocess
import uuid
from pathlib import Path

import pytest
import sqlglot
from plan_files import with_payloads

import planview
from planview.diagnose import CAUSES
from planview.engines import duckdb as duck
from planview.engines import mariadb, mysql
from planview.engines import postgresql as pg
from planview.inert import UnquotableName, refused_fix

PWNED = Path(f"/tmp/planview-pwned-{uuid.uuid4().hex}")

# quotable: a real engine can hold each as a table, schema and column name
QUOTABLE = [
    '"; DROP TABLE planted; --',
    "`; DROP TABLE planted; -- x",
    "x'; DROP TABLE planted; --",
    f"\\! touch {PWNED}",
    "a */ DROP TABLE planted; /*",
    "back\\slash ; \\g",
    ":planted",
]
# refused: no name of a real table holds a line break, a control or a direction character,
# and none is longer than the engine's names
UNQUOTABLE = [
    "a\nDROP TABLE planted; --",
    "a\rDROP TABLE planted; --",
    "a\u2028DROP TABLE planted; --",
    "evil\u202edrop",
    "esc\x1b[2Jname",
    "x" * 5000,
]
EXPRESSIONS_AS_TEXT = [  # expressions that may only go into a comment
    'lower("code\nDROP TABLE planted; --")',
    f"lower(code) || '\n\\! touch {PWNED}'",
    "pg_sleep(10)",
    "(SELECT 1); DROP TABLE planted",
    "lower(code) */ DROP TABLE planted /*",
    "upper(code\u2028)",
    "lower('a\\'); DROP TABLE planted; --')",
    "lower(code)" + " || 'x'" * 2000,
]

ENGINES = {"postgresql": (pg, "postgres"), "mariadb": (mariadb, "mysql"),
           "mysql": (mysql, "mysql"), "duckdb": (duck, "duckdb")}


def intended(engine: str, cause: str, variant: str, n_columns: int) -> list[str] | None:
    """The statements a template is for, by its first word (None: the engine has no fix)."""
    if cause == "unexplained":
        return None
    if cause in ("join_selectivity", "filter_combination", "planner_guess"):
        # no statistic fixes these: options as comments, where the engine has the cause
        has = {"postgresql": ("join_selectivity", "planner_guess"),
               "duckdb": ("join_selectivity", "filter_combination")}.get(engine, ())
        return [] if cause in has else None
    if engine == "postgresql":
        if cause == "correlation" and variant == "cross_table":
            return []  # explanation and the heavy option, all commented out
        if cause == "correlation" and n_columns >= 2:
            return ["CREATE", "ANALYZE"]
        if cause in ("skew", "range_gap", "correlation"):
            return ["ALTER"] * n_columns + ["ANALYZE"]
        if cause == "stale_statistics":
            return ["ANALYZE", "ALTER"]
        return ["CREATE", "ANALYZE"] if variant == "expression" else []
    if engine == "mariadb":
        return {"skew": ["SET", "SET", "ANALYZE"], "range_gap": ["SET", "SET", "ANALYZE"],
                "correlation": ["SET", "SET", "ANALYZE"], "stale_statistics": ["SET", "ANALYZE"],
                "default_selectivity": ["ANALYZE"]}[cause]
    if engine == "mysql":
        return ["ANALYZE", "ANALYZE"] if cause == "stale_statistics" else ["ANALYZE"]
    return ["ANALYZE"] if cause == "stale_statistics" else []


def variants(name: str):
    """(variant, columns, details) for every branch of every template."""
    yield "one_column", [name], {}
    yield "two_columns", [name, "b"], {}
    yield "cross_table", [name, "b"], {"cross_table": True, "other_table": name,
                                       "other_table_parts": (name, name), "other_columns": [name, "b"]}
    yield "kinds", [name, "b"], {"kinds": ["ndistinct", "'; DROP TABLE planted; --"]}
    yield "expression", [name], {"expressions": ['lower("' + name.replace('"', '""') + '")']}
    yield "expression_as_text", [name], {"expressions": EXPRESSIONS_AS_TEXT}
    yield "aggregate", [], {"aggregate": True}
    yield "no_expression", [name], {}


def fixes(engine: str, names=QUOTABLE):
    module, _ = ENGINES[engine]
    for name in names:
        for cause in CAUSES:
            for variant, columns, details in variants(name):
                if variant.startswith("expression") and cause != "default_selectivity":
                    continue
                try:
                    fix = module.suggest_fix(cause, name, columns, table_parts=(name, name), **details)
                    refused = False
                except UnquotableName as exc:  # the diagnosis writes this instead (diagnose.fix_for)
                    fix, refused = (refused_fix(exc), ""), True
                yield name, cause, variant, len(columns), fix, refused


def heads(sql: str, dialect: str) -> list[str]:
    """The first word of each statement, as the dialect's tokenizer splits them."""
    statements: list[list] = [[]]
    for token in sqlglot.tokenize(sql, read=dialect):
        if token.token_type == sqlglot.TokenType.SEMICOLON:
            statements.append([])
        else:
            statements[-1].append(token)
    return [s[0].text.upper() for s in statements if s]


LINE_STARTS = ("-- ", "ALTER TABLE ", "ANALYZE ", "CREATE STATISTICS ", "SET SESSION ", "    ON ",
               "                     autovacuum_analyze_threshold")


@pytest.mark.parametrize("engine", sorted(ENGINES))
def test_every_template_holds_only_its_statements(engine):
    _, dialect = ENGINES[engine]
    seen = 0
    for name, cause, variant, n_columns, fix, refused in fixes(engine, QUOTABLE + UNQUOTABLE):
        want = intended(engine, cause, variant, n_columns)
        if want is None:
            assert fix is None or refused, (cause, variant)
            continue
        if fix is None:  # a template the engine does not have for this variant
            assert variant in ("aggregate",), (engine, cause, variant)
            continue
        sql, caution = fix
        seen += 1
        assert heads(sql, dialect) == ([] if refused else want), (engine, cause, variant, name, sql)
        # no line begins with plan text, so none can be a psql meta-command or a client command
        assert all(line.startswith(LINE_STARTS) for line in sql.splitlines()), sql
        assert sql.isprintable() or set(sql) - set(sql.replace("\n", "")) == {"\n"}
        assert all(line.isprintable() for line in sql.splitlines()), sql
        assert len(sql) < 6000
        assert refused == (name in UNQUOTABLE)
    assert seen > 50


def test_the_two_published_attacks_are_inert():
    """The two payloads that ran DROP TABLE through psql -f before: a newline in the plan's
    expression (it ended the -- comment of the index hint) and a column name in ADD COLUMN."""
    sql, _ = pg.suggest_fix("default_selectivity", "t", ["code"],
                            expressions=['lower("code\nDROP TABLE planted; --")'])
    assert heads(sql, "postgres") == [] and "\nDROP" not in sql
    sql, _ = pg.suggest_fix("correlation", "t", ["a", "b text; DROP TABLE planted2; --"], cross_table=True,
                            other_table="u", other_columns=["a", "b"])
    assert heads(sql, "postgres") == [] and '"a_b_text_drop_table_planted2_key"' in sql
    assert all(line.startswith("-- ") for line in sql.splitlines())


def test_hostile_names_in_a_captured_plan_reach_the_fix_quoted():
    """Through the whole diagnosis: a real plan (PostgreSQL 16, captured) with hostile names."""
    root = Path(__file__).resolve().parent.parent / "plans" / "postgresql" / "pg16"
    for case in ("correlated", "skewed", "stale", "function"):
        for name in QUOTABLE + UNQUOTABLE:
            plan = planview.load(json.dumps(with_payloads(root / f"{case}.json", {"Relation Name": name})))
            fixes_seen = [f.fix for f in plan.findings if f.fix]
            assert fixes_seen, (case, name)
            for fix in fixes_seen:
                assert all(line.startswith(LINE_STARTS) for line in fix.splitlines()), fix
                if name in UNQUOTABLE:
                    assert heads(fix, "postgres") == [], fix
                else:
                    assert "DROP" not in heads(fix, "postgres")
                    assert '"' + name.replace('"', '""') + '"' in fix


# -- real engines ---------------------------------------------------------------------------

def _pg_setup(name: str) -> str:
    q = '"' + name.replace('"', '""') + '"'
    return (f"CREATE SCHEMA IF NOT EXISTS {q}; CREATE TABLE IF NOT EXISTS {q}.{q} "
            f"({q} text, b text, code text); INSERT INTO {q}.{q} SELECT i::text, i::text, 'c' "
            "FROM generate_series(1, 50) i;")


TAGS = {"CREATE": "CREATE STATISTICS", "ALTER": "ALTER TABLE", "ANALYZE": "ANALYZE"}


@pytest.mark.pg
def test_postgresql_fixes_through_psql_run_only_what_they_say(pg_servers, tmp_path):
    db = pg_servers.create_database(f"fix_injection_{pg_servers.source}")
    db.execute("CREATE TABLE planted (x int); CREATE TABLE planted2 (x int); "
               + " ".join(_pg_setup(name) for name in QUOTABLE))
    srv = db.server
    ran = 0
    for name, cause, variant, n_columns, fix, _refused in fixes("postgresql", QUOTABLE + UNQUOTABLE):
        if fix is None:
            continue
        script = tmp_path / "fix.sql"
        script.write_text(fix[0])
        done = subprocess.run(
            [str(srv.client_bindir / "psql"), "-X", "-h", str(srv.socket_dir), "-p", str(srv_port()),
             "-U", db_user(), "-d", db.dbname, "-f", str(script)],
            capture_output=True, text=True, timeout=120, env={**os.environ, "PSQLRC": os.devnull})
        tags = [line for line in done.stdout.splitlines() if line.strip()]
        want = intended("postgresql", cause, variant, n_columns) or []
        if name in UNQUOTABLE:
            want = []
        # the server ran exactly the intended statements, each on the hostile-named table
        assert tags == [TAGS[w] for w in want], (cause, variant, name, fix[0], done.stderr)
        assert "ERROR" not in done.stderr, (cause, variant, name, fix[0], done.stderr)
        ran += len(tags)
    left = db.execute("SELECT count(*) FROM pg_class WHERE relname IN ('planted', 'planted2')")
    assert left == [(2,)] and not PWNED.exists()
    assert ran > 30


def srv_port() -> int:
    from pgharness import PORT
    return PORT


def db_user() -> str:
    from pgharness import DB_SUPERUSER
    return DB_SUPERUSER


def test_duckdb_fixes_run_only_what_they_say():
    duckdb = pytest.importorskip("duckdb")
    con = duckdb.connect()
    con.execute("CREATE TABLE planted (x int)")
    for name in QUOTABLE:
        q = '"' + name.replace('"', '""') + '"'
        con.execute(f"CREATE SCHEMA IF NOT EXISTS {q}; CREATE TABLE IF NOT EXISTS {q}.{q} ({q} text, b text)")
    for name, cause, variant, n_columns, fix, refused in fixes("duckdb", QUOTABLE + UNQUOTABLE):
        if fix is None:
            continue
        # source: DuckDB's own parser splits the script into its statements
        statements = duckdb.extract_statements(fix[0])
        want = [] if refused else intended("duckdb", cause, variant, n_columns)
        # DuckDB's parser types ANALYZE as a VACUUM statement (real run, duckdb 2.0.1)
        assert [s.type.name for s in statements] == ["VACUUM"] * len(want), (name, cause, fix[0])
        con.execute(fix[0]) if statements else None
        commented = fix[0].splitlines()[-1].removeprefix("-- ")
        if not refused and commented.startswith("ANALYZE"):
            assert [s.type.name for s in duckdb.extract_statements(commented)] == ["VACUUM"]
            con.execute(commented)
    assert con.execute("SELECT count(*) FROM information_schema.tables WHERE table_name = 'planted'"
                       ).fetchone() == (1,)


@pytest.fixture(scope="module")
def bare_mariadb():
    import mariadb_harness as h

    why = h.available()
    if why:
        if os.environ.get("CI") == "true":
            pytest.fail(f"CI needs MariaDB: {why}")
        pytest.skip(why)
    server = h.MariaDBServer()
    try:
        server.start()
        yield server
    finally:
        server.stop()


def test_mariadb_fixes_through_the_client_run_only_what_they_say(bare_mariadb):
    def q(name):
        return "`" + name.replace("`", "``") + "`"

    setup = ["CREATE DATABASE fixinj;", "USE fixinj;", "CREATE TABLE planted (x int);"]
    setup += [f"CREATE TABLE {q(n)} ({q(n)} varchar(20), b varchar(20));"
              f"INSERT INTO {q(n)} VALUES ('1', '1'), ('2', '2');" for n in QUOTABLE]
    bare_mariadb.execute_script("\n".join(setup))
    for *_, fix, _refused in fixes("mariadb", QUOTABLE + UNQUOTABLE):
        if fix is None:
            continue
        # --force: go on after an error, as a paste into the client does
        bare_mariadb._client("--force", sql=fix[0], database="fixinj", timeout=120)
    tables = bare_mariadb.query("SELECT table_name FROM information_schema.tables "
                                "WHERE table_schema = 'fixinj'").split("\n")
    assert "planted" in tables and not PWNED.exists()
    # the histograms were built on the hostile-named tables: the statements reached them
    stats = bare_mariadb.query("SELECT DISTINCT table_name FROM mysql.column_stats "
                               "WHERE db_name = 'fixinj'").split("\n")
    assert {n for n in QUOTABLE} <= set(stats)


def test_mysql_fixes_parse_as_histogram_statements_only():
    # no MySQL server installs here: sqlglot's MySQL tokenizer (backtick and comment rules)
    for name, *_, fix, refused in fixes("mysql", QUOTABLE + UNQUOTABLE):
        if fix is None:
            continue
        tokens = sqlglot.tokenize(fix[0], read="mysql")
        idents = {t.text for t in tokens if t.token_type == sqlglot.TokenType.IDENTIFIER}
        if not refused:
            assert idents <= {name, "b"}, (idents, fix[0])
