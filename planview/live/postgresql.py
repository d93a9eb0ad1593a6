"""The live review on PostgreSQL, through psycopg 3.

One statement runs as ``EXPLAIN (ANALYZE, BUFFERS, VERBOSE, SETTINGS, FORMAT JSON)`` (SETTINGS
from PostgreSQL 12) inside the probe's transaction (`planview.probe.postgresql._read_only`):
READ ONLY unless the caller allowed writes, always rolled back, with ``SET LOCAL
statement_timeout`` and ``lock_timeout``. The user's own ``search_path`` and string settings
are kept: the statement is theirs, not SQL planview wrote. It goes through the extended query
protocol (psycopg's binary results), which takes one statement a message, so a second
statement a parser missed is refused by the server too.
"""

from __future__ import annotations

import importlib.util
from typing import Any

from ..engines.postgresql import NAME, SQL_DIALECT
from ..errors import LiveError, ProbeError
from ..probe import Budget
from ..probe.postgresql import _message, _read_only
from ..probe.postgresql import connect as _connect
from ..redact import redact
from . import backend
from .safety import RefusedStatement, Verdict, check_functions

ENGINE = NAME
DIALECT = SQL_DIALECT
LIVE_EVIDENCE = True
"""The catalogue holds the optimizer's statistics (pg_stats...), which derive and measure read."""

# Volatile built-ins that change nothing (PostgreSQL manual, "Mathematical Functions",
# "Date/Time Functions", "Delaying Execution", "UUID Functions"): random numbers, clocks,
# sleeps (bounded by the statement timeout). nextval, setval, setseed, set_config and
# pg_advisory_lock are volatile and do change state, so they are not here.
HARMLESS_VOLATILE = frozenset({
    "random", "random_normal", "clock_timestamp", "timeofday", "pg_sleep", "pg_sleep_for",
    "pg_sleep_until", "gen_random_uuid", "uuidv4", "uuidv7",
})
BUILTIN_SCHEMAS = frozenset({"pg_catalog"})
VOLATILE_MARKS = frozenset({"v"})  # pg_proc.provolatile: i immutable, s stable, v volatile

FUNCTIONS_SQL = """SELECT n.nspname::pg_catalog.text, p.proname::pg_catalog.text,
       pg_catalog.array_agg(DISTINCT p.provolatile::pg_catalog.text)
FROM pg_catalog.pg_proc p JOIN pg_catalog.pg_namespace n ON n.oid = p.pronamespace
WHERE p.proname::pg_catalog.text OPERATOR(pg_catalog.=) ANY (%s::pg_catalog.text[])
GROUP BY 1, 2"""

# SQLSTATEs (PostgreSQL manual, Appendix A)
_QUERY_CANCELED = "57014"
_LOCK_NOT_AVAILABLE = "55P03"
_READ_ONLY_TRANSACTION = "25006"


def is_connection(obj: Any) -> bool:
    """A psycopg 3 connection (its ``info.transaction_status`` is libpq's)."""
    return type(obj).__module__.split(".")[0] == "psycopg" and hasattr(getattr(obj, "info", None),
                                                                       "transaction_status")


class Backend(backend.Backend):
    """One PostgreSQL connection of a session."""

    engine = ENGINE
    dialect = DIALECT
    live_evidence = LIVE_EVIDENCE

    def __init__(self, conn, *, dsn: str | None = None):
        super().__init__(conn, owns=dsn is not None, dsn=dsn)

    @classmethod
    def open(cls, dsn: str, budget: Budget) -> Backend:
        if importlib.util.find_spec("psycopg") is None:
            raise LiveError("a live review of PostgreSQL needs psycopg 3: pip install 'planview[live]'")
        return cls(_connect(dsn, budget), dsn=dsn)

    @property
    def version_num(self) -> int:
        return int(self.conn.info.server_version)

    def describe(self) -> str:
        try:
            version = self.version_num
        except Exception:  # a closed connection
            return "PostgreSQL"
        return f"PostgreSQL {version // 10000}.{version % 10000}" if version >= 100000 else \
            f"PostgreSQL {version // 10000}.{version // 100 % 100}"

    def explain_options(self) -> str:
        options = ["ANALYZE", "BUFFERS", "VERBOSE"]
        if self.version_num >= 120000:  # SETTINGS came with PostgreSQL 12
            options.append("SETTINGS")
        return ", ".join(options + ["FORMAT JSON"])

    def explain(self, sql: str, params, verdict: Verdict, *, budget: Budget, lock_timeout_ms: int,
                allow_writes: bool) -> str:
        """The JSON text of EXPLAIN ANALYZE of `sql`, in a transaction that is rolled back."""
        from psycopg.types.string import TextBinaryLoader

        statement = f"EXPLAIN ({self.explain_options()})\n{sql.strip().rstrip(';')}\n"
        failure = None
        text = None
        with _read_only(self.conn, budget, writable=allow_writes, pin_settings=False) as session:
            cur = session.cur
            cur.execute(f"SET LOCAL lock_timeout = {int(lock_timeout_ms)}")
            if verdict.functions and not allow_writes:
                names = sorted({name for _, name in verdict.functions})
                rows = session.run(FUNCTIONS_SQL, (names,)).fetchall()
                catalogue = {(schema, name): set(marks or ()) for schema, name, marks in rows}
                check_functions(verdict, catalogue, HARMLESS_VOLATILE, BUILTIN_SCHEMAS, VOLATILE_MARKS,
                                allow_writes)
            limit_ms = budget.next_statement_ms()
            cur.execute(f"SET LOCAL statement_timeout = {int(limit_ms)}")
            cur.adapters.register_loader("json", TextBinaryLoader)  # the server's own text
            try:
                cur.execute(statement, params, binary=True)
                rows = cur.fetchall()
                text = "\n".join(str(row[0]) for row in rows)
            except Exception as exc:  # the driver's errors, some of them quoting the statement
                failure = self._failure(exc, limit_ms, lock_timeout_ms)
            if failure is not None:
                raise failure[0](failure[1])
        if not text:
            raise LiveError("the server returned no plan")
        return text

    def _failure(self, exc: BaseException, limit_ms: int, lock_timeout_ms: int) -> tuple[type, str]:
        state = getattr(exc, "sqlstate", None)
        line = redact(_message(exc), self.dsn)
        if state == _QUERY_CANCELED and "statement timeout" in line:
            return LiveError, f"stopped after {limit_ms:,} ms (statement_timeout); nothing was kept"
        if state == _LOCK_NOT_AVAILABLE:
            return LiveError, (f"stopped after waiting {lock_timeout_ms:,} ms for a lock (lock_timeout); "
                               "nothing was kept")
        if state == _READ_ONLY_TRANSACTION:
            return RefusedStatement, (f"refused by the server's read-only transaction: {line} "
                                      "(nothing was changed)")
        if state is None and not isinstance(exc, ProbeError):
            return LiveError, f"the review failed: {line}"
        return LiveError, f"the statement failed: {line}"

