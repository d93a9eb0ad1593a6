"""`connect` and `Session`: review a statement on a live database.

Caution: EXPLAIN ANALYZE really runs the statement, with all the time, I/O and locks it
takes. Run the live review on a replica or a copy, not on a busy primary. planview refuses a
statement that may change data (`planview.live.safety`) unless writes are allowed, runs it in
a transaction that is always rolled back (READ ONLY on PostgreSQL unless writes are allowed),
and stops it at the statement and lock timeouts.

>>> connect(42)
Traceback (most recent call last):
...
planview.errors.LiveError: connect() takes a PostgreSQL connection string, a psycopg 3 connection, a DuckDB connection or 'duckdb:///path', not int
"""

from __future__ import annotations

import importlib
import importlib.util
from typing import Any

from ..errors import LiveError, ProbeError
from ..model import Finding
from ..probe import Budget
from ..redact import redact
from .safety import refuse_unless_allowed

STATEMENT_TIMEOUT_MS = 60_000
LOCK_TIMEOUT_MS = 2_000
CAUTION = ("live review: EXPLAIN ANALYZE really ran this statement (its time, I/O and locks); "
           "run it on a replica or a copy. planview ran it in a transaction it rolled back")

WRITES_NOTE = ("live review: writes were allowed; whatever the statement changed inside the transaction "
               "was rolled back. What a transaction cannot undo stays: sequences it advanced "
               "(nextval is never rolled back), session locks, anything sent to another server")


def connect(target, *, statement_timeout_ms: int = STATEMENT_TIMEOUT_MS,
            lock_timeout_ms: int = LOCK_TIMEOUT_MS, allow_writes: bool = False,
            total_timeout_ms: int | None = None) -> Session:
    """A live session on `target`: a PostgreSQL connection string (``postgresql://...`` or
    ``host=... dbname=...``), a psycopg 3 connection, a DuckDB connection, or
    ``duckdb:///path`` (``duckdb:`` alone: in memory).

    EXPLAIN ANALYZE really runs the statement: use a replica or a copy. `statement_timeout_ms`
    stops the statement, `lock_timeout_ms` stops a wait for a lock; `total_timeout_ms`
    (default four times the statement timeout) bounds the catalogue reads of the evidence
    that follow a review. `allow_writes` lets INSERT, UPDATE, DELETE and MERGE run, still in a
    transaction that is rolled back (a sequence they advance stays advanced: nextval is never
    rolled back). A connection you pass stays yours (the session does not
    close it); a connection string's password never appears in any message."""
    for name, value in (("statement_timeout_ms", statement_timeout_ms), ("lock_timeout_ms", lock_timeout_ms),
                        ("total_timeout_ms", total_timeout_ms)):
        if value is not None and (isinstance(value, bool) or not isinstance(value, int) or value < 1):
            raise LiveError(f"{name} must be a whole number of milliseconds of at least 1, got {value!r}")
    options = dict(statement_timeout_ms=statement_timeout_ms, lock_timeout_ms=lock_timeout_ms,
                   allow_writes=bool(allow_writes), total_timeout_ms=total_timeout_ms)
    from . import duckdb as duck
    from . import postgresql as pg

    if isinstance(target, str):
        if target.strip().lower().startswith(duck.SCHEME):
            return Session(duck.Backend.open(target.strip(), allow_writes=bool(allow_writes)), **options)
        budget = Budget(statement_timeout_ms, max(statement_timeout_ms, 10_000))
        return Session(pg.Backend.open(target, budget), **options)
    if duck.is_connection(target):
        return Session(duck.Backend(target), **options)
    if pg.is_connection(target):
        return Session(pg.Backend(target), **options)
    if type(target).__module__.split(".")[0] == "psycopg2":
        raise LiveError("a psycopg2 connection cannot be used: pass a psycopg 3 connection or the "
                        "connection string")
    raise LiveError("connect() takes a PostgreSQL connection string, a psycopg 3 connection, a DuckDB "
                    f"connection or 'duckdb:///path', not {type(target).__name__}")


def _hook(module: str, name: str):
    """A function of a sibling module that may not be written yet (derive, measure, proof).

    This is the one place an absent module is tolerated: without it a review is the plan
    alone. A module that is there but fails to import still raises."""
    full = f"{__package__}.{module}"
    if importlib.util.find_spec(full) is None:
        return None
    return getattr(importlib.import_module(full), name, None)


class Session:
    """A live connection that reviews statements: `review(sql)` runs EXPLAIN ANALYZE and
    returns the checked `Plan`; `prove(finding)` tries the finding's fix and rolls it back.

    Caution: EXPLAIN ANALYZE really runs the statement. Run it on a replica or a copy."""

    def __init__(self, backend, *, statement_timeout_ms: int = STATEMENT_TIMEOUT_MS,
                 lock_timeout_ms: int = LOCK_TIMEOUT_MS, allow_writes: bool = False,
                 total_timeout_ms: int | None = None):
        self.backend = backend
        self.statement_timeout_ms = int(statement_timeout_ms)
        self.lock_timeout_ms = int(lock_timeout_ms)
        self.allow_writes = bool(allow_writes)
        self.total_timeout_ms = int(total_timeout_ms or 4 * self.statement_timeout_ms)
        self.last_plan = None

    @property
    def engine(self) -> str:
        return self.backend.engine

    @property
    def connection(self):
        return self.backend.conn

    def __repr__(self) -> str:
        mode = "writes allowed, rolled back" if self.allow_writes else "read-only"
        return f"<planview.Session {self.backend.describe()}, {mode}, statement_timeout {self.statement_timeout_ms:,} ms>"

    def __enter__(self) -> Session:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Close the connection if the session opened it (from a connection string)."""
        self.backend.close()

    def _budget(self) -> Budget:
        return Budget(self.statement_timeout_ms, self.total_timeout_ms)

    def review(self, sql: str, params: Any = None, *, derive: bool = True, measure: bool = True,
               threshold: float = 10.0):
        """EXPLAIN ANALYZE `sql` (with `params`, the driver's placeholders) and return the
        checked `Plan`. EXPLAIN ANALYZE really runs the statement: on a replica or a copy.

        A statement that may change data is refused (`RefusedStatement`) unless the session
        allows writes; then it runs and is rolled back. `derive` and `measure` add the
        re-derived estimates and the measured evidence where this engine has them."""
        from ..plan import load

        verdict = refuse_unless_allowed(sql, self.backend.dialect, self.allow_writes)
        budget = Budget(self.statement_timeout_ms, self.statement_timeout_ms + 10_000)
        text = self.backend.explain(sql, params, verdict, budget=budget, lock_timeout_ms=self.lock_timeout_ms,
                                    allow_writes=self.allow_writes)
        plan = load(text, engine=self.backend.engine, fmt="json", threshold=threshold)
        plan.set_query_text(sql)
        plan.live = {"sql": sql, "params": params, "engine": self.backend.engine,
                     "server": self.backend.describe(), "writes": verdict.writes,
                     "allow_writes": self.allow_writes, "statement_timeout_ms": self.statement_timeout_ms,
                     "lock_timeout_ms": self.lock_timeout_ms}
        plan.notes.append(CAUTION)
        if self.allow_writes:  # a plain SELECT may write too, through a volatile function
            plan.notes.append(WRITES_NOTE)
        if self.backend.live_evidence:
            self._evidence(plan, derive=derive, measure=measure)
        plan._report = None
        self.last_plan = plan
        plan.live_session = self  # the notebook widget's "try the fix" button proves through it
        return plan

    def _evidence(self, plan, *, derive: bool, measure: bool) -> None:
        steps = []
        if derive:
            derive_plan = _hook("derive", "derive_plan")
            if derive_plan is not None:
                steps.append(("derivation", lambda: self._derive(plan, derive_plan)))
        if measure:
            measure_plan, apply = _hook("measure", "measure_plan"), _hook("measure", "apply")
            if measure_plan is not None and apply is not None:
                steps.append(("measured evidence",
                              lambda: apply(plan, measure_plan(plan, self.connection, budget=self._budget()))))
        for what, step in steps:
            failure = None
            try:
                step()
            except ProbeError as exc:  # a timeout or a refusal of the evidence: the review stands
                failure = redact(str(exc), self.backend.dsn)
            if failure is not None:
                plan.notes.append(f"live review: no {what}: {failure}")

    def _derive(self, plan, derive_plan) -> None:
        derived = derive_plan(plan, self.connection, budget=self._budget()) or {}
        for node_id, derivation in derived.items():
            plan.nodes[node_id].derivation = derivation

    def prove(self, finding: Finding | int, plan=None) -> dict:
        """Try the finding's fix in a transaction that is rolled back and plan the statement
        again with plain EXPLAIN (never ANALYZE): the estimate with the fix. The fix runs on a
        temporary copy of the table made inside that transaction (a rolled-back ANALYZE would
        still leave pg_class's row and page counts and the table's analyze counters changed), so
        the user's table is only read, with the lock a SELECT takes; the copy costs I/O and
        temporary space the size of the table. Run for real, the fix takes SHARE UPDATE
        EXCLUSIVE (ANALYZE, CREATE STATISTICS) and ANALYZE reads a sample. Nothing is kept.
        `plan` defaults to the last review's."""
        plan = plan if plan is not None else self.last_plan
        if plan is None or getattr(plan, "live", None) is None:
            raise LiveError("prove() needs a plan from this session's review(sql)")
        if isinstance(finding, int):
            found = next((f for f in plan.findings if f.node == finding), None)
            if found is None:
                raise LiveError(f"node #{finding} is not an origin of this plan")
            finding = found
        if not self.backend.live_evidence:
            raise LiveError(f"proving a fix needs PostgreSQL: {self.backend.describe()} keeps no "
                            "statistics a fix could change")
        prove_finding = _hook("proof", "prove_finding")
        if prove_finding is None:
            raise LiveError("proving a fix is not available in this version of planview "
                            "(planview.live.proof is missing)")
        result = prove_finding(plan, finding, self.connection, plan.live["sql"], plan.live["params"],
                               budget=self._budget(), allow_writes=self.allow_writes)
        if result is not None and finding.proof is None:
            finding.proof = result
        plan._report = None
        return result
