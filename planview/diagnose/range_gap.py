"""A hole in a value range: a range clause estimated far above the rows it found.

The histogram assumes values spread evenly inside each bucket; a bucket that spans a gap
(no values between two dates, a retired id block) gets a share of rows that do not exist.
It fits less when the estimate equals a built-in default (no statistics were used) or exceeds
the rows the scan read (the row count itself is stale).

>>> overestimate(estimated=5000, actual=0)
5000.0
"""

from __future__ import annotations

from .context import Candidate, Context, fmt_rows, fmt_sel


def overestimate(estimated: float, actual: float) -> float:
    return max(estimated, 1.0) / max(actual, 1.0)


def rule(ctx: Context) -> Candidate | None:
    if ctx.direction != "over":
        return None
    ranges = [c for c in ctx.restriction_clauses()
              if c.op_class in ("closed_range", "open_range") and c.bare and len(c.columns) == 1
              and not c.is_join and not c.has_parameter and not c.has_subplan]
    if not ranges:
        return None
    columns = sorted({c.columns[0].name for c in ranges})
    others = [c for c in ctx.restriction_clauses() if c not in ranges]
    clause = ranges[0]
    lines = [f"Range on {', '.join(columns)}: {' AND '.join(c.text for c in ranges)}; estimated "
             f"{fmt_rows(ctx.est_total)} rows, found {fmt_rows(ctx.actual_total)}."]
    if ctx.actual_total == 0:
        lines.append("No row at all falls in the range: " + (
            "the histogram bucket spans a hole in the values." if ctx.keeps("histogram") else
            "the engine knows only the column's minimum and maximum, not the hole between them."))
    fields: dict = {"clauses": [c.text for c in ranges], "columns": columns}
    if ctx.est_selectivity is not None:
        fields.update(est_selectivity=ctx.est_selectivity, actual_selectivity=ctx.actual_selectivity)
        lines.append(f"Estimated selectivity {fmt_sel(ctx.est_selectivity)}, actual "
                     f"{fmt_sel(ctx.actual_selectivity)}.")
    score = 0.7 if clause.op_class == "closed_range" else 0.55
    if ctx.actual_total == 0:
        score += 0.1
    if others:
        score -= 0.2
    if ctx.est_selectivity is not None and ctx.est_selectivity > 1.5:
        score -= 0.3  # more rows estimated than the scan read: the row count is wrong, not a bucket
    match = ctx.default_match()
    if match and ctx.actual_total > 0:
        score -= 0.3  # the estimate is a built-in default, so no histogram was used
        lines.append(f"But the estimated selectivity equals the built-in {match[0]}: the range was "
                     "not estimated from the column's statistics.")
    return Candidate(cause="range_gap", score=score,
                     reason="a range clause found far fewer rows than the column's statistics promised",
                     lines=lines, fields=fields, table=ctx.table_of(clause) or ctx.relation_of.get(None),
                     columns=columns)
