"""No statistics for the clause: the optimizer fell back to a built-in default selectivity.

Fits when a column sits inside a function, a non-relabelling cast or an expression, when a
clause compares an aggregate (HAVING), uses LIKE with a leading wildcard or an operator
without selectivity support; and, as a fingerprint, when the estimated selectivity
(estimate / rows read) equals one of the engine's defaults or a product of two.

>>> from math import isclose; isclose(0.005 * 200_000, 1000)   # DEFAULT_EQ_SEL on 200,000 rows
True
"""

from __future__ import annotations

from ..index import relation_name
from .context import Candidate, Context, fmt_rows, fmt_sel

NO_STATS_CLASSES = ("like_leading_wildcard", "not_like_leading_wildcard", "other")


def rule(ctx: Context) -> Candidate | None:
    clauses = [c for c in ctx.clauses if c.op_class not in ("subplan", "unparsed")]
    opaque = [c for c in clauses if c.columns and not c.bare and c.op_class != "or"]
    aggregates = [c for c in ctx.clauses if c.aggregate]
    special = [c for c in clauses if c.op_class in NO_STATS_CLASSES and c not in opaque]
    non_constant = _non_constant(ctx, clauses)
    match = ctx.default_match()
    num_distinct = ctx.engine.DEFAULT_NUM_DISTINCT
    grouping_default = ctx.is_grouping and num_distinct is not None and ctx.est_total == num_distinct[1]
    unestimated = _unestimated_join_condition(ctx)
    if unestimated:
        return unestimated
    if not (opaque or aggregates or special or match or grouping_default or non_constant):
        return None
    lines: list[str] = []
    fields: dict = {}
    expressions: list[str] = []
    for clause in opaque:
        wraps = ", ".join(clause.wrappers) or "an expression"
        lines.append(f"{clause.text}: the column {', '.join(c.name for c in clause.columns)} sits "
                     f"inside {wraps}, so its statistics do not apply.")
        expressions.append(clause.column_side or _expression_of(clause))
    for clause in aggregates:
        lines.append(f"{clause.text} compares an aggregate (a HAVING clause): no statistics exist "
                     "for its values.")
    for clause in special:
        kind = "LIKE with a leading wildcard" if "like" in clause.op_class else "an operator without selectivity statistics"
        lines.append(f"{clause.text} uses {kind}.")
    for clause, name, value in non_constant:
        other = ("another column of the same table" if len(clause.columns) == 2 else
                 "a sub-plan's result" if clause.has_subplan else "a parameter")
        head = (f"{clause.text} compares a column with {other}, not a constant: the planner "
                "cannot look the value up in its statistics")
        if isinstance(value, str):  # a guess that is not one fixed number
            lines.append(f"{head}; {value}."
                         + (" A value chosen from the rows themselves (a correlated minimum or "
                            "maximum) matches far more often than that guess." if ctx.direction == "under" else ""))
            continue
        lines.append(f"{head} and uses its fixed {name} = {fmt_sel(value)} "
                     f"({ctx.engine.NON_CONSTANT_SOURCE}).")
        fields.setdefault("default", {"name": name, "value": value})
    if grouping_default:
        lines.append(f"Estimated exactly {fmt_rows(ctx.est_total)} groups: the default number of "
                     "distinct values when the grouping expression has no statistics.")
        fields["default"] = {"name": num_distinct[0], "value": num_distinct[1]}
    if match:
        name, value = match
        lines.append(f"Fingerprint: estimated selectivity {fmt_sel(ctx.est_selectivity)} "
                     f"({fmt_rows(ctx.est_total)} of {fmt_rows(ctx.rows_read)} rows read) equals "
                     f"{name} = {fmt_sel(value)}.")
        fields["default"] = {"name": name, "value": value, "observed": ctx.est_selectivity}
    if ctx.est_selectivity is not None:
        fields.update(est_selectivity=ctx.est_selectivity, actual_selectivity=ctx.actual_selectivity)
    score = 0.0
    if opaque or aggregates or special:
        score = 0.75
    if non_constant:
        score = max(score, 0.8)
    if match or grouping_default:
        score = min(0.95, score + 0.2) if score else 0.55
    table = None
    columns: list[str] = []
    by_table: dict[str, set[str]] = {}
    for clause in opaque + special + [c for c, _, _ in non_constant]:
        table = table or ctx.table_of(clause) or ctx.relation_of.get(None)
        columns += [c.name for c in clause.columns]
        for column in clause.columns:
            owner = ctx.relation_of.get(column.qualifier)
            if owner:
                by_table.setdefault(owner, set()).add(column.name)
    return Candidate(cause="default_selectivity", score=score,
                     reason="the optimizer had no statistics for the clause"
                     + (" (its estimate equals a built-in default)" if match or grouping_default else ""),
                     lines=lines, fields=fields, table=table or ctx.relation_of.get(None),
                     columns=sorted(set(columns)), expressions=[e for e in expressions if e],
                     details={"aggregate": bool(aggregates), "non_constant": bool(non_constant),
                              "subplan_value": any(c.has_subplan for c, _, _ in non_constant),
                              # a clause over two tables (a join's): each table with its own columns
                              "columns_by_table": {t: sorted(c) for t, c in sorted(by_table.items())}
                              if len(by_table) > 1 else None})


def _non_constant(ctx: Context, clauses) -> list:
    """(clause, default name, value) for each comparison with no constant the engine answers
    with a fixed default; (clause, None, how it guesses) where the guess is not one number."""
    found = []
    for clause in clauses:
        kind = ctx.non_constant_kind(clause) or ""
        name = ctx.engine.NON_CONSTANT_DEFAULTS.get(kind)
        if name and name in ctx.defaults:
            found.append((clause, name, ctx.defaults[name]))
        elif kind in ctx.engine.NON_CONSTANT_GUESSES:
            found.append((clause, None, ctx.engine.NON_CONSTANT_GUESSES[kind]))
    return found


def _expression_of(clause) -> str:
    """The expression side of the clause (``lower(code)``), for statistics on it."""
    text = clause.text
    for op in (" = ", " <> ", " >= ", " <= ", " > ", " < ", " LIKE ", " ILIKE ", " IN "):
        if op in text:
            left = text.split(op, 1)[0].strip()
            if any(c.name in left for c in clause.columns):
                return left
            return text.split(op, 1)[1].strip()
    return text


UNESTIMATED_SHARE = 100.0
"""A join condition the optimizer gave no selectivity keeps, by its estimate, every pair."""


def _unestimated_join_condition(ctx: Context) -> Candidate | None:
    """A join condition the engine applied but did not print, estimated to keep every pair
    while it kept a small share of them: the optimizer put no selectivity on it."""
    shares = ctx.condition_shares
    if ctx.node.unprinted_condition != "join_filter" or shares is None or ctx.clauses:
        return None
    estimated, actual = shares
    if estimated < UNESTIMATED_SHARE or actual * 10 > estimated:
        return None
    return Candidate(
        cause="default_selectivity", score=0.7,
        reason="the join condition was estimated to keep every pair: no selectivity was put on it",
        lines=[f"The join condition was estimated to keep {estimated:g}% of the pairs and kept "
               f"{actual:g}%: an estimate of all pairs means the optimizer had no selectivity for "
               "the condition (no index or statistics it could use, e.g. a column inside an "
               "expression).",
               "This output format prints no condition, so the condition is not named here; "
               "the same plan in a format that prints conditions names it."],
        fields={"estimated_share": estimated, "actual_share": actual},
        table=ctx.relation_of.get(None), columns=[],
        # the condition is not printed, so its columns are unknown; the tables the join reads are not
        details={"tables": [name for child in ctx.node.children
                            if (name := relation_name(ctx.plan.nodes[child])) is not None]})
