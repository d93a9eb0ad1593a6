"""Correlated columns: the optimizer multiplied selectivities that are not independent.

Fits when two or more ANDed restriction clauses on one relation (or two or more join clauses
between the same two relations, or a grouping on two or more columns) meet an
underestimate, or an overestimate that reaches zero rows (an impossible combination).

Plan-only product check: with k clauses that each keep selectivity s and independence
assumed, the estimate is s**k; if the columns move together, the real selectivity is s.
So an estimate near ``actual_selectivity ** k`` is the fingerprint of independence.

>>> round(implied_per_clause(1e-4, 2), 4)   # the manual's a = 1 AND b = 1: s = 1%
0.01
"""

from __future__ import annotations

import math

from ..index import relation_name
from .clauses import parse_condition
from .context import RESTRICTION_KINDS, Candidate, Context, fmt_rows, fmt_sel

JOIN_RULES = ("join", "semi_outer", "semi_inner")
CONSTANT_KINDS = ("equality", "in_list", "open_range", "closed_range", "like_prefix", "is_null",
                  "is_not_null", "boolean_column")


def implied_per_clause(est_selectivity: float, clauses: int) -> float:
    """The single-clause selectivity that, multiplied `clauses` times, gives the estimate."""
    return est_selectivity ** (1.0 / clauses)


def rule(ctx: Context) -> Candidate | None:
    if ctx.is_grouping and ctx.direction == "over":
        keys = ctx.group_keys()
        if len(keys) >= 2:
            columns = [k.split(".")[-1] for k in keys]
            table = _single_table(ctx, keys)
            return Candidate(
                cause="correlation", score=0.6,
                reason=f"grouping on {len(keys)} columns overestimated: the number of groups was "
                       "taken as the product of each column's distinct values",
                lines=[f"Estimated {fmt_rows(ctx.est_total)} groups of ({', '.join(keys)}), "
                       f"found {fmt_rows(ctx.actual_total)}: the columns' distinct values "
                       "do not combine freely."],
                fields={"group_keys": keys}, table=table, columns=columns,
                details={"kinds": ["ndistinct"]},
            )
    joins = [c for c in ctx.join_clauses() if c.op_class == "equality" and len(c.columns) == 2]
    pairs: dict[tuple[str, str], list] = {}
    for clause in joins:
        left, right = (ctx.relation_of.get(c.qualifier, c.qualifier or "?") for c in clause.columns)
        pairs.setdefault(tuple(sorted((str(left), str(right)))), []).append(clause)
    for (left, right), group in pairs.items():
        if len(group) >= 2 and left != right and ctx.direction == "under":
            return Candidate(
                cause="correlation", score=0.75,
                reason=f"{len(group)} join clauses between {left} and {right}, each estimated "
                       "as if independent of the others",
                lines=[f"The join matches on {' AND '.join(c.text for c in group)}; the optimizer "
                       "multiplied the clauses' selectivities, but the second key follows the "
                       f"first, so it returned {fmt_rows(ctx.actual_total)} rows, not "
                       f"{fmt_rows(ctx.est_total)}.",
                       f"The columns live in two tables ({left}, {right}): extended statistics are "
                       "per table and cannot fix a join estimate."],
                fields={"join_clauses": [c.text for c in group], "tables": [left, right]},
                table=left, columns=[c.columns[0].name for c in group],
                details={"cross_table": True, "other_table": right,
                         "other_columns": [c.columns[1].name for c in group]},
            )
    restrictions = _constant_restrictions(ctx.restriction_clauses())
    across = _across_the_join(ctx, restrictions)
    if across is not None:
        return across
    columns = sorted({c.columns[0].name for c in restrictions})
    if len(columns) < 2:
        return None
    impossible = ctx.direction == "over" and ctx.actual_total == 0
    if ctx.direction != "under" and not impossible:
        return None
    score = 0.6
    lines = [f"{len(restrictions)} ANDed clauses on {', '.join(columns)}: "
             + " AND ".join(c.text for c in restrictions) + "."]
    fields: dict = {"clauses": [c.text for c in restrictions], "columns": columns}
    est_sel, act_sel = ctx.est_selectivity, ctx.actual_selectivity
    if est_sel and act_sel and est_sel > 0 and act_sel > 0 and not impossible:
        k = len(columns)
        per_clause = implied_per_clause(est_sel, k)
        fields.update(est_selectivity=est_sel, actual_selectivity=act_sel,
                      implied_single_selectivity=per_clause)
        lines.append(f"Estimated selectivity {fmt_sel(est_sel)}, actual {fmt_sel(act_sel)} "
                     f"of {fmt_rows(ctx.rows_read)} rows read.")
        close = abs(math.log10(per_clause / act_sel)) <= math.log10(3)
        lines.append(
            f"Product check: {k} clauses of selectivity {fmt_sel(per_clause)} each multiply to "
            f"{fmt_sel(est_sel)} (the estimate); "
            + ("the real selectivity is about one clause's alone, as when the columns move "
               "together." if close else "the real selectivity is far from one clause's alone, "
               "so the dependency is partial.")
        )
        if close:
            score = 0.85
    elif impossible:
        lines.append("No row satisfies all the clauses together although each alone keeps rows: "
                     "the combination does not occur in the data.")
        score = 0.55
    return Candidate(cause="correlation", score=score,
                     reason=f"{len(columns)} restrictions on one relation, estimate as if independent",
                     lines=lines, fields=fields, table=_single_table(ctx, [str(c.columns[0]) for c in restrictions]),
                     columns=columns, details={"kinds": ["dependencies", "mcv"]})


def _single_table(ctx: Context, names: list[str]) -> str | None:
    tables = set()
    for name in names:
        qualifier = name.rsplit(".", 1)[0] if "." in name else None
        tables.add(ctx.relation_of.get(qualifier))
    tables.discard(None)
    if len(tables) == 1:
        return tables.pop()
    return ctx.relation_of.get(None)


def _constant_restrictions(clauses) -> list:
    """Restrictions of one bare column against constants: the clauses per-column statistics answer."""
    return [c for c in clauses if c.bare and len(c.columns) == 1 and not c.is_join
            and not c.has_parameter and not c.has_subplan and c.op_class in CONSTANT_KINDS]


def _alias(node) -> str | None:
    return (node.alias or node.relation) if node.relation else None


def _across_the_join(ctx: Context, restrictions: list) -> Candidate | None:
    """A parameterised inner scan whose filter moves with a filter on the outer side.

    The scan is re-run per outer row with the join key as its parameter (an index condition
    naming the outer table's column), so its per-loop estimate is the table-wide share of its
    filter. When the outer side also filters a column that the inner filter depends on (an
    order date and its lines' ship date), the outer rows pick exactly the keys where the
    inner filter keeps more or fewer rows than its table-wide share. The evidence is in the
    plan: the join key, and a constant restriction on each side; what it cannot show is the
    dependency itself, so the evidence says what to check."""
    node, plan = ctx.node, ctx.plan
    if not restrictions or (node.starts or 0) <= 1 or node.relation is None:
        return None
    own = _alias(node)
    keys = [c for c in ctx.clauses if c.source in RESTRICTION_KINDS and c.is_join
            and c.op_class == "equality" and len(c.columns) == 2]
    join = next((a for a in plan.index.ancestors(node.id) if plan.nodes[a].own_rule in JOIN_RULES), None)
    if not keys or join is None:
        return None
    scans = plan.index.first_by(_alias)
    for key in keys:
        outer_alias = next((c.qualifier for c in key.columns if c.qualifier and c.qualifier != own), None)
        outer_id = scans.get(outer_alias)
        if outer_id is None or not plan.index.contains(join, outer_id) or plan.index.contains(node.id, outer_id):
            continue
        outer = plan.nodes[outer_id]
        outer_filters = _constant_restrictions(
            clause for cond in outer.conditions if cond.kind in RESTRICTION_KINDS
            for clause in parse_condition(cond.text, cond.kind, ctx.dialect))
        if not outer_filters:
            continue
        own_types = {t for c in restrictions for t in c.constant_types}
        same_type = [c for c in outer_filters if own_types & set(c.constant_types)]
        outer_filter = (same_type or outer_filters)[0]
        inner_filter = next((c for c in restrictions if set(c.constant_types) & set(outer_filter.constant_types)),
                            restrictions[0])
        outer_table = relation_name(outer) or outer.relation
        table = ctx.table_of(inner_filter) or ctx.relation_of.get(None)
        lines = [
            f"This scan runs once per outer row ({fmt_rows(node.starts)} loops), keyed by {key.text}; "
            f"its filter {inner_filter.text} was estimated with its share of the whole table, "
            f"{fmt_rows(node.est_rows)} rows per loop, {fmt_rows(ctx.est_total)} in all, and "
            f"found {fmt_rows(ctx.actual_total)}.",
            f"The outer side filters {outer_table} on {outer_filter.text}: the keys it passes are "
            f"not a random sample of {table}, so when {inner_filter.columns[0].name} moves with "
            f"{outer_filter.columns[0].name} the inner filter keeps "
            + ("far fewer" if ctx.direction == "over" else "far more")
            + " rows per key than its table-wide share.",
            "Check the dependency in the data (e.g. the spread of one column minus the other over "
            "the join); extended statistics are per table and cannot describe columns of two tables.",
        ]
        return Candidate(
            cause="correlation", score=0.75 + (0.05 if same_type else 0.0),
            reason=f"the filter on {inner_filter.columns[0].name} depends on the outer side's filter on "
                   f"{outer_filter.columns[0].name}, across the join",
            lines=lines,
            fields={"clauses": [inner_filter.text], "outer_clauses": [outer_filter.text],
                    "join_clause": key.text, "tables": [table, outer_table]},
            table=table, columns=[inner_filter.columns[0].name],
            details={"cross_filter": True, "other_table": outer_table,
                     "other_columns": [outer_filter.columns[0].name], "join_clause": key.text,
                     "inner_clause": inner_filter.text, "outer_clause": outer_filter.text})
    return None
