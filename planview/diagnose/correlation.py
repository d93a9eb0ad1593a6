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

from .context import Candidate, Context, fmt_rows, fmt_sel


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
    restrictions = [c for c in ctx.restriction_clauses()
                    if c.bare and len(c.columns) == 1 and not c.is_join and not c.has_parameter
                    and c.op_class in ("equality", "in_list", "open_range", "closed_range",
                                       "like_prefix", "is_null", "is_not_null", "boolean_column")]
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
