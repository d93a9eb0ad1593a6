"""The report: one walk over a checked plan, the data every view and export is made from."""

from __future__ import annotations

import math
from typing import Any

from . import words

REPORT_VERSION = 1
SOURCE_LIMIT = 2_000_000
"""The report carries the plan as pasted up to this many characters (a view says when it is cut)."""


def _clean(value: Any) -> Any:
    """JSON-safe: finite floats rounded for reading, everything else as it is."""
    if isinstance(value, float):
        if not math.isfinite(value):
            return None
        return round(value, 6)
    return value


def node_record(node, times=None) -> dict[str, Any]:
    record = {
        "id": node.id,
        "parent": node.parent,
        "children": list(node.children),
        "statement": node.statement,
        "depth": node.depth,
        "operator": node.operator,
        "label": node.label,
        "relation": node.relation,
        "alias": node.alias,
        "schema": node.schema,
        "index": node.index,
        "function_name": node.function_name,
        "cte_name": node.cte_name,
        "subplan_name": node.subplan_name,
        "parent_relationship": node.parent_relationship,
        "join_type": node.join_type,
        "strategy": node.strategy,
        "partial_mode": node.partial_mode,
        "parallel_aware": node.parallel_aware,
        "operation": node.operation,
        "conditions": [{"kind": c.kind, "key": c.key, "text": c.text} for c in node.conditions],
        "rows_removed": {k: _clean(v) for k, v in node.rows_removed.items()},
        "est_rows": _clean(node.est_rows),
        "actual_rows": _clean(node.actual_rows),
        "starts": _clean(node.starts),
        "est_total": _clean(node.est_total),
        "actual_total": _clean(node.actual_total),
        "q_error": _clean(node.q_error),
        "log10_ratio": _clean(node.log10_ratio),
        "own_log10_ratio": _clean(node.own_log10_ratio),
        "own_rule": node.own_rule,
        "executed": node.executed,
        "judged": node.judged,
        "not_judged_reason": node.not_judged_reason,
        "origin": node.origin,
        "inherits_from": list(node.inherits_from),
        "derived": list(node.derived),
        "startup_cost": _clean(node.startup_cost),
        "total_cost": _clean(node.total_cost),
        "actual_startup_ms": _clean(node.actual_startup_ms),
        "actual_total_ms": _clean(node.actual_total_ms),
        "workers_planned": node.workers_planned,
        "workers_launched": node.workers_launched,
        "buffers": {k: _clean(v) for k, v in node.buffers.items()},
        "text": node_text(node),
    }
    if node.derivation is not None:
        record["derivation"] = node.derivation
        record["text"]["derivation"] = words.derivation(node.derivation)
    if times is not None:
        i = node.id
        record["total_ms"] = _ms(times.total_ms[i])
        record["self_ms"] = _ms(times.self_ms[i])
        record["total_ms_per_start"] = _ms(times.total_ms_per_start[i])
        record["self_ms_per_start"] = _ms(times.self_ms_per_start[i])
        record["time_note"] = times.notes.get(i)
    return record


def _ms(value: float | None) -> float | None:
    """A time for reading: microseconds are the finest any engine prints."""
    return None if value is None else _clean(round(value, 4))


def slowest_records(plan) -> list[dict[str, Any]]:
    """The operators with the largest own time, with their share of the plan's operator time
    (the sum of every operator's own time)."""
    times = plan.times
    whole = times.operator_ms()
    out = []
    for rank, node_id in enumerate(times.slowest(), 1):
        node = plan.nodes[node_id]
        own = times.self_ms[node_id]
        out.append({"rank": rank, "node": node_id, "label": node.label,
                    "self_ms": _ms(own), "total_ms": _ms(times.total_ms[node_id]),
                    "self_ms_per_start": _ms(times.self_ms_per_start[node_id]),
                    "starts": _clean(node.starts),
                    "share": round(own / whole, 4) if whole else None,
                    "origin": node.origin})
    return out


def _statement_times(plan, statement) -> dict[str, Any]:
    """The statement's operator time (its root's, with every input) and the time the review
    shows for it: the execution time the engine printed, else that operator time."""
    times = plan.times
    root = statement.root
    total = _ms(times.total_ms[root]) if root < len(times.total_ms) else None
    execution = _clean(statement.execution_ms)
    return {"total_ms": total,
            "time_ms": execution if execution is not None else total,
            "time_from": "execution" if execution is not None else ("operators" if total is not None else None)}


def _sum(values) -> float | None:
    """The sum of the figures present; None when none is."""
    present = [v for v in values if v is not None]
    return _clean(round(sum(present), 4)) if present else None


def plan_times(statements: list[dict[str, Any]]) -> dict[str, Any]:
    """The paste's times, summed over its statements: ``total_ms`` is what the review shows as
    the time (each statement's execution time, or its operator time where none was printed),
    ``execution_ms`` and ``planning_ms`` the sums of what the engine printed."""
    return {"total_ms": _sum(s.get("time_ms") for s in statements),
            "execution_ms": _sum(s.get("execution_ms") for s in statements),
            "planning_ms": _sum(s.get("planning_ms") for s in statements)}


def node_text(node) -> dict[str, str]:
    """The node's numbers as every view prints them (planview/words.py decides the words)."""
    own = node.own_log10_ratio if node.judged else None
    return {
        "id": f"#{node.id}",
        "est": words.rows(node.est_total),
        "actual": words.rows(node.actual_total),
        "starts": words.rows(node.starts),
        "error": words.error(node.log10_ratio, node.q_error),
        "direction": words.direction(node.log10_ratio),
        "added": words.added_words(own, node.own_rule == "join") if own is not None else "–",
        "state": words.STATE_WORDS[words.state(node.origin, bool(node.inherits_from), node.judged)],
    }


def finding_record(finding) -> dict[str, Any]:
    return {
        "node": finding.node,
        "rank": finding.rank,
        "q_error": _clean(finding.q_error),
        "own_q_error": _clean(finding.own_q_error),
        "direction": finding.direction,
        "cause": finding.cause,
        "also": list(finding.also),
        "confidence": _clean(finding.confidence),
        "confidence_reason": finding.confidence_reason,
        "summary": finding.summary,
        "evidence": finding.evidence,
        "fix": finding.fix,
        "caution": finding.caution,
        "impact": finding.impact,
        "measured": finding.measured,
        "proof": finding.proof,
        "text": {
            "rank": f"origin {finding.rank}",
            "cause": words.cause(finding.cause),
            "added": words.finding_error(finding.own_q_error, finding.direction),
            "in_all": words.finding_error(finding.q_error, finding.direction),
            "also": [words.cause(c) for c in finding.also],
            "measured": (finding.measured or {}).get("says"),
            "proof": words.proof(finding.proof),
        },
    }


def build_report(plan) -> dict[str, Any]:
    statements = [
        {"root": s.root, "planning_ms": _clean(s.planning_ms),
         "execution_ms": _clean(s.execution_ms), "query_text": s.query_text,
         **_statement_times(plan, s)}
        for s in plan.statements
    ]
    return {
        "report_version": REPORT_VERSION,
        "engine": plan.engine,
        "format": plan.format,
        "engine_version": plan.engine_version,
        "has_actuals": plan.has_actuals,
        "threshold": plan.options.threshold,
        "words": words.vocabulary(),
        "notes": list(plan.notes),
        "statements": statements,
        **plan_times(statements),
        "nodes": [node_record(n, plan.times) for n in plan.nodes],
        "findings": [finding_record(f) for f in plan.findings],
        "slowest": slowest_records(plan),
        "operator_ms": _ms(plan.times.operator_ms()),
        "time_rules": [list(rule) for rule in plan.engine_spec.TIME_RULES],
        "source": source_record(getattr(plan, "source", "") or ""),
    }


def source_record(text: str) -> dict[str, Any]:
    """The plan exactly as pasted, for the views' "as pasted" block: the first SOURCE_LIMIT
    characters, with the full length and whether it was cut."""
    return {"text": text[:SOURCE_LIMIT], "chars": len(text), "cut": len(text) > SOURCE_LIMIT}
