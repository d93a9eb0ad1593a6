"""Probes: test a finding's cause against a live database, read-only.

A probe never changes the database. Every statement runs in one READ ONLY transaction that
is rolled back (or, on a connection already inside a transaction, a read-only savepoint that
is rolled back to), with a statement timeout, a lock timeout and a time limit for the whole
probe; it reads the optimizer's statistics (``pg_stats``, ``pg_class``,
``pg_stat_user_tables``) and asks the planner for estimates with plain EXPLAIN, which plans a
statement without running it. A plan is untrusted text: its conditions are parsed, checked to
hold nothing but columns, constants, casts and comparisons, and written again by planview
(``clause_sql``), so no function of the user's and nothing a paste smuggles in is called.
System catalogues, columns the role may not read and statistics of columns that look secret
are never shown, and every message is cleaned of passwords (``planview.redact``).

What a probe can show: that independence reproduces the estimate (correlation), that a value
is missing from the most-common-values list (skew), that a range falls inside one histogram
bucket (range gap), how old the statistics are and where the histogram ends (stale
statistics). It cannot prove that a fix works: that needs ANALYZE, which takes locks and
writes statistics, so it stays the user's decision (the finding's `fix` and `caution`).

>>> from planview.probe import ProbeCheck
>>> ProbeCheck("table", "SELECT 1", {"rows": 1}, "one row").says
'one row'
"""

from __future__ import annotations

import importlib
import time
from dataclasses import dataclass, field
from typing import Any

from ..errors import ProbeError
from ..redact import redact


@dataclass
class ProbeCheck:
    what: str
    sql: str
    result: Any
    says: str


@dataclass
class ProbeResult:
    node: int
    cause: str | None
    verdict: str = "inconclusive"
    """``supports``, ``contradicts`` or ``inconclusive``."""
    summary: str = ""
    checks: list[ProbeCheck] = field(default_factory=list)

    def as_dict(self) -> dict:
        return {"node": self.node, "cause": self.cause, "verdict": self.verdict,
                "summary": self.summary,
                "checks": [{"what": c.what, "sql": c.sql, "result": c.result, "says": c.says}
                           for c in self.checks]}


@dataclass
class Budget:
    """The probe's time: a limit per statement, and one for the whole probe."""

    statement_ms: int
    total_ms: int
    started: float = field(default_factory=time.monotonic)

    def remaining_ms(self) -> int:
        return int(self.total_ms - (time.monotonic() - self.started) * 1000)

    def next_statement_ms(self) -> int:
        """The timeout for the next statement, or ProbeError when the whole probe is out of time."""
        remaining = self.remaining_ms()
        if remaining <= 0:
            raise ProbeError(f"the probe ran out of its total time limit of {self.total_ms:,} ms "
                             "(total_timeout_ms)")
        return max(1, min(self.statement_ms, remaining))


def probe(plan, connection, finding=None, *, timeout_ms: int = 5000,
          total_timeout_ms: int | None = None) -> list[ProbeResult]:
    """Probe each finding (or the one given) of `plan` on `connection` (a DB-API connection of
    the plan's engine, or a connection string). Read-only; raises ProbeError if it cannot.

    `timeout_ms` bounds each statement, `total_timeout_ms` (default four times that) the whole
    probe, connecting included. A connection inside a transaction keeps its transaction and
    its uncommitted work: the probe runs in a savepoint it rolls back to."""
    try:
        module = importlib.import_module(f"{__name__}.{plan.engine}")
    except ModuleNotFoundError:
        raise ProbeError(f"no probe for {plan.engine} plans yet") from None
    budget = Budget(int(timeout_ms), int(total_timeout_ms if total_timeout_ms is not None else 4 * timeout_ms))
    findings = [finding] if finding is not None else list(plan.findings)
    dsn = connection if isinstance(connection, str) else None
    failure = None
    conn = None
    try:
        conn = module.connect(dsn, budget) if dsn is not None else connection
        scans = module.scans_by_table(plan)
        return [module.probe_finding(plan, f, conn, budget=budget, scans=scans) for f in findings]
    except ProbeError as exc:
        failure = redact(str(exc), dsn)
    finally:
        if dsn is not None and conn is not None:
            conn.close()
    raise ProbeError(failure)  # raised here, so no driver error rides along as its context
