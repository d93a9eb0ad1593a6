"""Probes: test a finding's cause against a live database, read-only.

A probe never changes the database. Every statement runs in one READ ONLY transaction that
is rolled back, with a statement and a lock timeout; it reads the optimizer's statistics
(``pg_stats``, ``pg_class``, ``pg_stat_user_tables``) and asks the planner for estimates with
plain EXPLAIN, which plans a statement without running it. Clause text from a plan is only
sent after sqlglot has checked that it holds nothing but columns, constants, casts and
comparisons, so no function of the user's (and nothing a paste smuggles in) is called.

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
from dataclasses import dataclass, field
from typing import Any

from ..errors import ProbeError


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


def probe(plan, connection, finding=None, *, timeout_ms: int = 5000) -> list[ProbeResult]:
    """Probe each finding (or the one given) of `plan` on `connection` (a DB-API connection of
    the plan's engine, or a connection string). Read-only; raises ProbeError if it cannot."""
    try:
        module = importlib.import_module(f"{__name__}.{plan.engine}")
    except ModuleNotFoundError:
        raise ProbeError(f"no probe for {plan.engine} plans yet") from None
    findings = [finding] if finding is not None else list(plan.findings)
    own_connection = isinstance(connection, str)
    conn = module.connect(connection) if own_connection else connection
    try:
        return [module.probe_finding(plan, f, conn, timeout_ms=timeout_ms) for f in findings]
    finally:
        if own_connection:
            conn.close()
