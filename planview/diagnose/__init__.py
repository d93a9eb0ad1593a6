"""Diagnosis: for every origin, what the optimizer's statistics probably missed.

`RULES` is a tuple of small pure functions, one a module. Each takes a `Context` (the
origin with its clauses and numbers) and returns a `Candidate` (a cause, a score, the
evidence) or None. The best-scoring candidate becomes the finding's `cause`; the others that
also fit go to `also`. A rule can be switched off by leaving it out of `rules=`.
The fix SQL comes from the engine module (`suggest_fix`), so it speaks the engine's dialect.
"""

from __future__ import annotations

from .. import words
from ..inert import UnquotableName, refused_fix
from . import (
    correlation,
    default_selectivity,
    filter_combination,
    join_selectivity,
    planner_guess,
    range_gap,
    skew,
    stale_statistics,
)
from .context import Candidate, Context, build_context, fmt_rows, relation_map
from .impact import ImpactWalk

RULES = (
    ("correlation", correlation.rule),
    ("skew", skew.rule),
    ("range_gap", range_gap.rule),
    ("stale_statistics", stale_statistics.rule),
    ("default_selectivity", default_selectivity.rule),
    ("join_selectivity", join_selectivity.rule),
    ("filter_combination", filter_combination.rule),
    ("planner_guess", planner_guess.rule),
)
CAUSES = tuple(name for name, _ in RULES) + ("unexplained",)
"""What a finding's cause can be; `not_diagnosed` marks an origin past `MAX_DIAGNOSED`."""

__all__ = ["CAUSES", "RULES", "Candidate", "Context", "diagnose"]


MAX_DIAGNOSED = 500
"""Origins diagnosed in full, the largest impact first. Parsing an origin's clauses and running
the rules costs about 1.5 ms, so a generated or damaged plan with 100,000 origins would take
minutes. Past this many, the rest keep their numbers, impact and rank with the cause
`not_diagnosed`, and a plan note says so (the bundled real plans have at most a few dozen)."""


def diagnose(plan, rules=RULES, max_diagnosed: int = MAX_DIAGNOSED) -> None:
    """Fill cause, evidence, fix, caution and impact of every finding, then rank them.

    What every finding shares (the relation map, the walk up to the decisions) is made once
    here, so the work per finding stays local to its node."""
    if not plan.findings:
        return
    impact = ImpactWalk(plan)
    for finding in plan.findings:
        finding.impact = impact.of(plan.nodes[finding.node])
    plan.findings.sort(key=lambda f: (-(f.impact.get("ms") or 0.0), -(f.impact.get("rows") or 0.0),
                                      -f.own_q_error))
    relation_maps = relation_map(plan)
    names = table_parts(plan)
    for rank, finding in enumerate(plan.findings, 1):
        finding.rank = rank
        node = plan.nodes[finding.node]
        if rank > max_diagnosed:
            _fill_undiagnosed(plan, finding, node, max_diagnosed)
            continue
        ctx = build_context(plan, node, relation_maps)
        candidates: list[Candidate] = []
        checked: list[str] = []
        for name, rule in rules:
            try:
                candidate = rule(ctx)
            except Exception as exc:  # a rule's bug must not hide the others' answers
                checked.append(f"{name}: rule failed ({type(exc).__name__})")
                continue
            if candidate is None or candidate.score <= 0:
                checked.append(name)
            else:
                candidates.append(candidate)
        candidates.sort(key=lambda c: -c.score)
        _fill(plan, finding, node, ctx, candidates, checked, names)
    if len(plan.findings) > max_diagnosed:
        plan.notes.append(f"{len(plan.findings):,} origins: the {max_diagnosed:,} with the largest impact "
                          "are diagnosed; the rest keep their numbers and rank, cause not diagnosed")


def _head_line(node, finding) -> str:
    added = words.finding_error(finding.own_q_error, finding.direction)
    head = (f"Estimated {fmt_rows(node.est_total)} rows, found {fmt_rows(node.actual_total)}: "
            f"the estimate is {added} here"
            + (f", {words.finding_error(finding.q_error, finding.direction)} in all"
               if abs(finding.q_error - finding.own_q_error) > 0.05 else "")
            + ".")
    if node.starts and node.starts > 1:
        head += f" Over {words.rows(node.starts)} starts: {fmt_rows(node.est_rows)} estimated per start."
    return head


def _fill_undiagnosed(plan, finding, node, max_diagnosed: int) -> None:
    finding.cause = "not_diagnosed"
    finding.confidence_reason = f"ranked below the {max_diagnosed:,} origins diagnosed in full"
    finding.summary = f"not diagnosed: only the {max_diagnosed:,} origins with the largest impact are."
    finding.caution = _generic_caution(plan)
    finding.evidence = {"lines": [_head_line(node, finding)], "est_rows": node.est_total,
                        "actual_rows": node.actual_total, "starts": node.starts,
                        "est_rows_per_start": node.est_rows, "actual_rows_per_start": node.actual_rows}


def _fill(plan, finding, node, ctx: Context, candidates: list[Candidate], checked: list[str],
          names: dict[str, tuple[str | None, str]]) -> None:
    head = _head_line(node, finding)
    evidence: dict = {
        "lines": [head],
        "est_rows": node.est_total, "actual_rows": node.actual_total, "starts": node.starts,
        "est_rows_per_start": node.est_rows, "actual_rows_per_start": node.actual_rows,
        "rows_read": ctx.rows_read, "rows_removed": ctx.rows_removed or None,
        "est_selectivity": ctx.est_selectivity, "actual_selectivity": ctx.actual_selectivity,
        "clauses": [c.as_dict() for c in ctx.clauses],
    }
    unparsed = [c for c in ctx.clauses if c.op_class == "unparsed"]
    for clause in unparsed:
        evidence["lines"].append(f"Could not parse the condition {clause.text!r} ({clause.parse_error}); "
                                 "it was left out of the diagnosis.")
    if node.derived:
        evidence["lines"] += [f"Note: {d}." for d in node.derived]
    if candidates:
        best = candidates[0]
        finding.cause = best.cause
        finding.also = [c.cause for c in candidates[1:] if c.cause != best.cause]
        finding.confidence = round(best.score, 2)
        finding.confidence_reason = best.reason
        evidence["lines"] += best.lines
        evidence.update({k: v for k, v in best.fields.items() if k not in evidence or evidence[k] is None})
        evidence["also_fits"] = {c.cause: c.reason for c in candidates[1:]}
        evidence["table"] = best.table
        evidence["columns"] = evidence.get("columns") or list(best.columns)
        evidence["expressions"] = list(best.expressions)
        fix = _suggest(plan, best, names)
        finding.fix, finding.caution = fix if fix else (None, None)
        finding.summary = f"{best.cause.replace('_', ' ')}: {best.reason}."
    else:
        finding.cause = "unexplained"
        finding.confidence = 0.2
        finding.confidence_reason = "no rule fits the clauses and numbers of this node"
        if node.unprinted_condition and not ctx.clauses:
            evidence["lines"].append(
                "This output format prints no condition for this node, though one was applied "
                "here: without it no cause can be named. The same plan in a format that prints "
                "conditions can be diagnosed.")
        evidence["lines"].append("Checked and not fitting: " + ", ".join(checked) + ".")
        evidence["checked"] = checked
        finding.summary = "unexplained: no known statistics gap fits; read the evidence."
        finding.caution = _generic_caution(plan)
    finding.evidence = evidence


def table_parts(plan) -> dict[str, tuple[str | None, str]]:
    """Each table name a rule may hand on (``schema.table`` or ``table``) to the schema and
    name the plan gave apart, so that a fix quotes each and never splits a name at a dot."""
    parts: dict[str, tuple[str | None, str]] = {}
    clashes: set[str] = set()
    for node in plan.nodes:
        if node.relation:
            joined = f"{node.schema}.{node.relation}" if node.schema else node.relation
            if parts.setdefault(joined, (node.schema, node.relation)) != (node.schema, node.relation):
                clashes.add(joined)
    for joined in clashes:  # two different splits print alike: quote the whole as one name
        parts[joined] = (None, joined)
    return parts


def _suggest(plan, candidate: Candidate, names: dict[str, tuple[str | None, str]]):
    details = dict(candidate.details)
    details["table_parts"] = names.get(candidate.table or "")
    if details.get("other_table"):
        details["other_table_parts"] = names.get(details["other_table"])
    if details.get("tables"):
        details["tables_parts"] = [names.get(t) or (None, t) for t in details["tables"]]
    if details.get("columns_by_table"):
        details["columns_by_table_parts"] = [(names.get(t) or (None, t), cols)
                                             for t, cols in details["columns_by_table"].items()]
    try:
        return plan.engine_spec.suggest_fix(candidate.cause, candidate.table, candidate.columns,
                       expressions=candidate.expressions, **details)
    except UnquotableName as exc:
        return refused_fix(exc), _generic_caution(plan)
    except Exception:
        return None


def _generic_caution(plan) -> str:
    return ("EXPLAIN ANALYZE runs the statement it explains; any statistics change takes locks "
            "and I/O. Your change process and a DBA decide what runs where.")
