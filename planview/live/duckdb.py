"""The live review on DuckDB (embedded): ``EXPLAIN (ANALYZE, FORMAT json)``, DuckDB's JSON
profile of one run, between ``BEGIN TRANSACTION`` and ``ROLLBACK``.

DuckDB has no read-only transaction to put one statement in, so the guards are: the
classifier (`planview.live.safety`), then DuckDB's own statement splitter and statement type
(``extract_statements``: exactly one, and a SELECT unless writes are allowed), then a
database opened through ``connect("duckdb:///path")`` is opened read-only unless writes are
allowed. The statement timeout is a timer that interrupts the connection. DuckDB takes no
row locks, so there is no lock timeout to set.
"""

from __future__ import annotations

import threading
from typing import Any

from ..engines.duckdb import NAME, SQL_DIALECT
from ..errors import LiveError
from ..probe import Budget
from ..probe.postgresql import _message
from . import backend
from .safety import RefusedStatement, Verdict, check_functions

ENGINE = NAME
DIALECT = SQL_DIALECT
LIVE_EVIDENCE = False
"""DuckDB keeps no per-column statistics of the kind derive and measure read."""

SCHEME = "duckdb:"

# Volatile built-ins that change nothing (duckdb_functions() marks them VOLATILE, with side
# effects): random numbers and ids, sleeps, the session's own ids. nextval, setval, setseed
# and write_log change state and are not here.
HARMLESS_VOLATILE = frozenset({
    "random", "gen_random_uuid", "uuid", "uuidv4", "uuidv7", "sleep_ms", "error", "currval",
    "current_query", "current_query_id", "current_transaction_id", "current_connection_id",
    "stats", "vector_type",
})
BUILTIN_SCHEMAS = frozenset({"main", "pg_catalog", "system"})
VOLATILE_MARKS = frozenset({"VOLATILE", "MACRO"})
"""A macro of the user's is refused like a volatile function: planview does not read into it."""

FUNCTIONS_SQL = """SELECT schema_name, function_name,
       list(DISTINCT CASE WHEN NOT internal AND function_type LIKE '%macro' THEN 'MACRO'
                          ELSE coalesce(stability, '') END),
       bool_and(internal)
FROM duckdb_functions() WHERE function_name IN (SELECT unnest(?::VARCHAR[]))
GROUP BY ALL"""

_READS = ("SELECT",)
_WRITES = ("INSERT", "UPDATE", "DELETE", "MERGE_INTO", "CREATE")


def is_connection(obj: Any) -> bool:
    return type(obj).__module__.split(".")[0] in ("duckdb", "_duckdb") and hasattr(obj, "execute")


def path_of(dsn: str) -> str:
    """``duckdb:///data/x.duckdb`` -> ``/data/x.duckdb``; ``duckdb://`` or ``duckdb:`` alone is
    an in-memory database.

    >>> path_of("duckdb:///tmp/a.duckdb"), path_of("duckdb:"), path_of("duckdb:rel/b.db")
    ('/tmp/a.duckdb', ':memory:', 'rel/b.db')
    """
    rest = dsn[len(SCHEME):]
    if rest.startswith("//"):
        rest = rest[2:]
    return rest or ":memory:"


class Backend(backend.Backend):
    """One DuckDB connection of a session."""

    engine = ENGINE
    dialect = DIALECT
    live_evidence = LIVE_EVIDENCE

    def __init__(self, conn, *, owns: bool = False):
        super().__init__(conn, owns=owns)

    @classmethod
    def open(cls, dsn: str, *, allow_writes: bool) -> Backend:
        try:
            import duckdb
        except ImportError:
            raise LiveError("a DuckDB session needs duckdb: pip install duckdb") from None
        path = path_of(dsn)
        failure = None
        try:
            read_only = path != ":memory:" and not allow_writes
            return cls(duckdb.connect(path, read_only=read_only), owns=True)
        except Exception as exc:
            failure = _message(exc)
        raise LiveError(f"cannot open the DuckDB database: {failure}")

    def describe(self) -> str:
        import duckdb

        return f"DuckDB {duckdb.__version__}"

    def _one_statement(self, sql: str, allow_writes: bool) -> str:
        failure = None
        try:
            statements = self.conn.extract_statements(sql)
        except Exception as exc:
            failure = _message(exc)
        if failure is not None:
            raise LiveError(f"the statement failed: {failure}")
        if len(statements) != 1:
            raise RefusedStatement(f"refused, not run: DuckDB reads {len(statements)} statements in "
                                   "this string: give one statement")
        kind = str(statements[0].type).rsplit(".", 1)[-1]
        if kind not in _READS and not (allow_writes and kind in _WRITES):
            raise RefusedStatement(f"refused, not run: DuckDB reads a {kind} statement; only one "
                                   "SELECT is run" + ("" if allow_writes else
                                                      " (pass allow_writes for INSERT, UPDATE, DELETE, "
                                                      "MERGE in a transaction that is rolled back)"))
        return statements[0].query.strip().rstrip(";")

    def explain(self, sql: str, params, verdict: Verdict, *, budget: Budget, lock_timeout_ms: int,
                allow_writes: bool) -> str:
        statement = self._one_statement(sql, allow_writes)
        if verdict.functions and not allow_writes:
            names = sorted({name for _, name in verdict.functions})
            rows = self.conn.execute(FUNCTIONS_SQL, [names]).fetchall()
            catalogue = {(schema, name): set(marks or ()) for schema, name, marks, _ in rows}
            check_functions(verdict, catalogue, HARMLESS_VOLATILE, BUILTIN_SCHEMAS, VOLATILE_MARKS,
                            allow_writes)
        limit_ms = budget.next_statement_ms()
        failure = None
        try:
            self.conn.execute("BEGIN TRANSACTION")
        except Exception as exc:
            failure = _message(exc)
        if failure is not None:
            raise LiveError(f"cannot start the review's transaction ({failure}): end the "
                            "connection's open transaction first")
        timer = threading.Timer(limit_ms / 1000, self.conn.interrupt)
        text = None
        timed_out = False
        try:
            timer.start()
            rows = self.conn.execute(f"EXPLAIN (ANALYZE, FORMAT json) {statement}", params).fetchall()
            text = rows[0][1] if rows else None
        except Exception as exc:
            timed_out = type(exc).__name__ == "InterruptException"
            failure = _message(exc)
        finally:
            timer.cancel()
            timer.join()
            ended = self._rollback()
        if timed_out:
            raise LiveError(f"stopped after {limit_ms:,} ms (statement_timeout); nothing was kept")
        if failure is not None:
            raise LiveError(f"the statement failed: {failure}")
        if ended is not None:
            raise LiveError(ended)
        if not text or '"result": "error"' in text[:80]:
            # DuckDB answers some statements without running operators (a count(*) of a stored
            # table from its metadata) and then profiles nothing
            raise LiveError("DuckDB returned no profile of this statement (it printed "
                            f"{' '.join((text or 'nothing').split())[:60]}); nothing to review")
        return text

    def _rollback(self) -> str | None:
        failure = None
        for _ in range(2):  # an interrupt that came just as the statement ended lands here once
            try:
                self.conn.execute("ROLLBACK")
                return None
            except Exception as exc:
                failure = _message(exc)
                if "no transaction is active" in failure:
                    return None
        return f"could not roll the review's transaction back: {failure}"

