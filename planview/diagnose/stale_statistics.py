"""Stale statistics: the table changed since the last ANALYZE.

Two fingerprints: an open range (``>``/``>=``) on a timestamp, date or ever-growing key far
underestimated, as when new values lie above the histogram's upper bound; and a scan with
no restriction at all whose estimate is off, which only a changed row count explains.

>>> looks_ever_growing("created_at", ["timestamp"])
True
"""

from __future__ import annotations

import re

from .context import Candidate, Context, fmt_rows

_GROWING_NAME = re.compile(r"(^id$|_id$|_at$|_on$|date|time|created|updated|inserted|seq|serial|ts$)", re.I)
_TIME_TYPES = ("timestamp", "timestamptz", "date", "datetime", "time")


def looks_ever_growing(column: str, constant_types: list[str]) -> bool:
    return any(t.startswith(_TIME_TYPES) for t in constant_types) or bool(_GROWING_NAME.search(column))


def rule(ctx: Context) -> Candidate | None:
    node = ctx.node
    restrictions = ctx.restriction_clauses()
    if ctx.is_scan and node.relation and not node.conditions and not ctx.clauses:
        return Candidate(
            cause="stale_statistics", score=0.9,
            reason="a scan with no restriction cannot be misestimated unless the row count changed",
            lines=[f"{node.label} reads the whole table with no condition: estimated "
                   f"{fmt_rows(ctx.est_total)} rows, found {fmt_rows(ctx.actual_total)}. "
                   "The table's row count changed since its statistics were taken."],
            fields={"table_rows_estimated": ctx.est_total, "table_rows_found": ctx.actual_total},
            table=ctx.relation_of.get(None), columns=[],
        )
    if ctx.direction != "under":
        return None
    opens = [c for c in restrictions if c.op_class == "open_range" and c.bare and len(c.columns) == 1
             and not c.has_parameter and not c.is_join]
    lower_bounds = [c for c in opens if re.search(r">=?", c.text)]
    if not lower_bounds:
        return None
    clause = lower_bounds[0]
    column = clause.columns[0].name
    growing = looks_ever_growing(column, clause.constant_types)
    lines = [f"Open range {clause.text} found {fmt_rows(ctx.actual_total)} rows where "
             f"{fmt_rows(ctx.est_total)} were estimated: values above the histogram's upper "
             "bound (rows added since the last ANALYZE) are estimated as almost none."]
    if growing:
        lines.append(f"{column} looks like a timestamp, date or ever-growing key.")
    score = 0.75 if growing else 0.45
    if len(restrictions) > len(lower_bounds):
        score -= 0.15
    return Candidate(cause="stale_statistics", score=score,
                     reason="an open range above the known values, far underestimated",
                     lines=lines, fields={"clause": clause.text, "column": column,
                                          "ever_growing": growing},
                     table=ctx.table_of(clause) or ctx.relation_of.get(None), columns=[column])
