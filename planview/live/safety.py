"""Which statements a live review may run: EXPLAIN ANALYZE really runs the statement.

The first line of defence is this classifier, which reads the statement with sqlglot before
anything reaches the server. Only one statement that only reads is run: a query (SELECT,
VALUES, set operations, WITH of queries) with no locking clause (FOR UPDATE / SHARE / NO KEY
UPDATE / KEY SHARE), no INTO, no data-modifying CTE, and no call of a function that is not
known to leave the database alone. A statement that cannot be parsed is refused, as are
several statements in one string (always, writes allowed or not). With ``allow_writes`` the
data-modifying statements EXPLAIN ANALYZE accepts (INSERT, UPDATE, DELETE, MERGE, CREATE
TABLE ... AS) are run too, in a transaction that is still rolled back.

Functions: sqlglot gives the names called; the engine's catalogue says how volatile each is
(PostgreSQL's ``pg_proc.provolatile``, DuckDB's ``duckdb_functions().stability``), asked
inside the review's own read-only transaction. A volatile function may write, so it is
refused, except the built-ins in the engine's list of harmless volatile functions (random
numbers, clocks, sleeps: they change nothing). Names are matched without their argument
types, so one volatile overload of a name refuses every call of that name.

The second line of defence is the engine: PostgreSQL's READ ONLY transaction (a write fails
there) and its extended query protocol (one statement per message); DuckDB's own statement
splitter and type. What neither sees is a write hidden behind a view or an operator of the
user's: that is why EXPLAIN ANALYZE belongs on a replica or a copy.

>>> classify("SELECT count(*) FROM t WHERE a = 1", "postgres").allowed
True
>>> classify("DELETE FROM t", "postgres").reason
'DELETE changes data; EXPLAIN ANALYZE would really run it (pass allow_writes to run it in a transaction that is rolled back)'
>>> classify("SELECT 1; SELECT 2", "postgres", allow_writes=True).reason
'2 statements in one string: give one statement'
"""

from __future__ import annotations

import logging
from contextlib import contextmanager
from dataclasses import dataclass, field

import sqlglot
from sqlglot import exp

from ..errors import LiveError

ALLOW_HINT = "pass allow_writes to run it in a transaction that is rolled back"
SQL_SHOWN = 60

# Statement classes EXPLAIN ANALYZE accepts that change data (PostgreSQL manual, EXPLAIN:
# "Any SELECT, INSERT, UPDATE, DELETE, MERGE, VALUES, EXECUTE, DECLARE, CREATE TABLE AS, or
# CREATE MATERIALIZED VIEW AS statement"); EXECUTE and DECLARE hide what they run.
_WRITES = {exp.Insert: "INSERT", exp.Update: "UPDATE", exp.Delete: "DELETE", exp.Merge: "MERGE"}
_QUERIES = (exp.Select, exp.SetOperation, exp.Values, exp.Subquery)


_STATEMENTS = tuple(getattr(exp, name) for name in (
    "Query", "DML", "DDL", "Command", "Copy", "TruncateTable", "Alter", "Drop", "Grant", "Revoke",
    "Set", "Pragma", "Use", "Transaction", "Commit", "Rollback", "Describe", "Merge", "Create",
    "Insert", "Update", "Delete", "Values", "Attach", "Detach", "Install", "Summarize", "Pivot",
    "Export", "Kill", "Analyze", "Comment", "Cache", "Uncache", "Refresh", "Show", "Lock", "Execute",
    "Declare") if hasattr(exp, name))


class RefusedStatement(LiveError):
    """The statement was not run: it may change data, or it could not be read."""


@dataclass
class Verdict:
    allowed: bool
    reason: str = ""
    writes: bool = False
    """True when the statement changes data (run only with allow_writes, then rolled back)."""
    functions: list[tuple[str | None, str]] = field(default_factory=list)
    """(schema or None, name) of every function called, lower-cased as the engine folds them."""


def _shown(sql: str) -> str:
    line = " ".join(sql.split())
    return line if len(line) <= SQL_SHOWN else line[:SQL_SHOWN] + "..."


def classify(sql: str, dialect: str | None, *, allow_writes: bool = False) -> Verdict:
    """Read `sql` and say whether a live review may run it (functions are checked later, by
    `check_functions`, against the engine's catalogue)."""
    if not isinstance(sql, str) or not sql.strip():
        return Verdict(False, "no statement given")
    try:
        with _quiet_parser():
            statements = [s for s in sqlglot.parse(sql, read=dialect) if s is not None]
    except (sqlglot.errors.ParseError, sqlglot.errors.TokenError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        return _unreadable(first, allow_writes)
    except RecursionError:
        return _unreadable("nested too deeply to read", allow_writes)
    if len(statements) != 1:
        return Verdict(False, f"{len(statements)} statements in one string: give one statement"
                       if statements else "no statement given")
    tree = statements[0]
    if not isinstance(tree, _STATEMENTS):  # sqlglot read an expression, not a statement
        return _unreadable(f"it reads as a bare {type(tree).__name__.lower()}, not a statement",
                           allow_writes)
    writes = _writes(tree)
    functions = _functions(tree, dialect)
    if writes is None:
        return Verdict(True, "", False, functions)
    if allow_writes and writes[1]:
        return Verdict(True, writes[0], True, functions)
    if allow_writes:
        return Verdict(False, f"{writes[0]}: EXPLAIN ANALYZE cannot run it")
    hint = f" ({ALLOW_HINT})" if writes[1] else ""
    return Verdict(False, writes[0] + hint)


def _unreadable(why: str, allow_writes: bool) -> Verdict:
    if allow_writes:
        return Verdict(True, f"planview could not read the statement ({why}); run as given", writes=True)
    return Verdict(False, f"planview could not read the statement, so it is not run ({why}); "
                          f"{ALLOW_HINT} if you know it only reads")


def _writes(tree: exp.Expression) -> tuple[str, bool] | None:
    """Why the statement is not a plain read, and whether EXPLAIN ANALYZE can run it at all
    (so allow_writes may let it through); None for a plain read."""
    if isinstance(tree, exp.Create):
        kind = str(tree.args.get("kind") or "").upper()
        if kind in ("TABLE", "VIEW") and isinstance(tree.expression, _QUERIES):
            return f"CREATE {kind} ... AS creates an object", True
        return f"CREATE {kind} changes the schema".replace("  ", " "), False
    for node_type, word in _WRITES.items():
        if isinstance(tree, node_type):
            return (f"{word} changes data; EXPLAIN ANALYZE would really run it", True)
    if not isinstance(tree, _QUERIES):
        word = _statement_word(tree)
        return f"{word} is not a query; only one SELECT (or VALUES) is run", False
    for node in tree.walk():
        for node_type, word in _WRITES.items():
            if isinstance(node, node_type):
                return (f"a {word} inside the statement (a data-modifying WITH) changes data; "
                        "EXPLAIN ANALYZE would really run it", True)
        if isinstance(node, exp.Lock):
            return ("a locking clause (FOR UPDATE / SHARE) takes row locks, which is a write; "
                    "EXPLAIN ANALYZE would really take them", True)
        if isinstance(node, exp.Select) and node.args.get("into") is not None:
            return "SELECT ... INTO creates a table", False
    return None


def _statement_word(tree: exp.Expression) -> str:
    if isinstance(tree, exp.Command):
        return str(tree.this or "the statement").upper()
    name = type(tree).__name__
    return {"TruncateTable": "TRUNCATE", "Copy": "COPY", "Alter": "ALTER", "Drop": "DROP",
            "Grant": "GRANT", "Set": "SET", "Pragma": "PRAGMA", "Use": "USE"}.get(name, name.upper())


@contextmanager
def _quiet_parser():
    """sqlglot logs a warning when it falls back to a bare command (CALL, DO, LOCK); the
    refusal says it instead, in one line."""
    logger = logging.getLogger("sqlglot")
    level = logger.level
    logger.setLevel(logging.ERROR)
    try:
        yield
    finally:
        logger.setLevel(level)


def _functions(tree: exp.Expression, dialect: str | None) -> list[tuple[str | None, str]]:
    found: list[tuple[str | None, str]] = []
    for node in tree.find_all(exp.Func):
        name = _function_name(node, dialect)
        if name is None:
            continue
        schema = None
        parent = node.parent
        if isinstance(parent, exp.Dot) and parent.expression is node:
            schema = parent.this.name if isinstance(parent.this, (exp.Identifier, exp.Column)) else None
            schema = schema.lower() if schema and not _quoted(parent.this) else schema
        entry = (schema, name)
        if entry not in found:
            found.append(entry)
    return found


def _quoted(node: exp.Expression) -> bool:
    ident = node if isinstance(node, exp.Identifier) else node.find(exp.Identifier)
    return bool(ident is not None and ident.args.get("quoted"))


def _function_name(node: exp.Func, dialect: str | None) -> str | None:
    """The name the engine will look up: as written for a function sqlglot does not know,
    its usual spelling for one it does (``POSITION`` for ``strpos``)."""
    if isinstance(node, exp.Anonymous):
        this = node.this
        if isinstance(this, exp.Identifier):
            return this.name if this.args.get("quoted") else this.name.lower()
        return str(this).lower() if this else None
    try:
        with _quiet_parser():
            text = node.sql(dialect=dialect)
    except Exception:  # a node sqlglot cannot print is no function name
        return None
    head = text.split("(", 1)
    if len(head) != 2:
        return None  # a keyword (CURRENT_TIMESTAMP), no call
    name = head[0].strip()
    return name.lower() if name.replace("_", "").isalnum() else None


def check_functions(verdict: Verdict, catalogue: dict[tuple[str, str], set[str]],
                    harmless: frozenset[str], builtin_schemas: frozenset[str],
                    volatile_marks: frozenset[str], allow_writes: bool) -> None:
    """Refuse the statement when it calls a volatile function that is not a harmless built-in.

    `catalogue` maps (schema, name) to the engine's volatility marks of that name's
    overloads. Raises RefusedStatement; a name the catalogue does not hold is syntax
    (COALESCE, CAST) or an error the engine will report itself."""
    if allow_writes:
        return
    for schema, name in verdict.functions:
        for (found_schema, found_name), marks in catalogue.items():
            if found_name != name or (schema is not None and found_schema != schema):
                continue
            if not marks & volatile_marks:
                continue
            if found_schema in builtin_schemas and name in harmless:
                continue
            raise RefusedStatement(
                f"refused, not run: the statement calls {found_schema}.{name}(), a volatile function "
                f"that may change "
                f"data; EXPLAIN ANALYZE would really call it ({ALLOW_HINT})")


def refuse_unless_allowed(sql: str, dialect: str | None, allow_writes: bool) -> Verdict:
    """`classify`, raising RefusedStatement with its reason when the statement is refused."""
    verdict = classify(sql, dialect, allow_writes=allow_writes)
    if not verdict.allowed:
        raise RefusedStatement(f"refused, not run: {verdict.reason} [{_shown(sql)}]")
    return verdict
