"""Stale statistics: the table changed since the last ANALYZE.

Four fingerprints, each from the plan's numbers alone:
- a scan with no restriction at all whose estimate is off: only a changed row count explains it;
- a scan that estimated more rows than it read in all (estimated selectivity above 1): the
  statistics count rows the table no longer holds (deleted since the last ANALYZE);
- an equality estimated at the one-row floor that found a large share of the rows read: the
  statistics know no such value, and a value that common would be in any sample of the table,
  so it was loaded after them (a partition filled after its ANALYZE);
- an open range (``>``/``>=``) on a timestamp, date or ever-growing key far underestimated,
  as when new values lie above the histogram's upper bound.

>>> looks_ever_growing("created_at", ["timestamp"])
True
>>> value_missed_by_sample(est_rows_per_start=1, actual_share=0.5, rows_read=100_000)
True
"""

from __future__ import annotations

import re

from .context import Candidate, Context, fmt_rows, fmt_sel

_GROWING_NAME = re.compile(r"(^id$|_id$|_at$|_on$|date|time|created|updated|inserted|seq|serial|ts$)", re.I)
_TIME_TYPES = ("timestamp", "timestamptz", "date", "datetime", "time")


def looks_ever_growing(column: str, constant_types: list[str]) -> bool:
    return any(t.startswith(_TIME_TYPES) for t in constant_types) or bool(_GROWING_NAME.search(column))


SAMPLED_SHARE = 0.01
"""A value holding this share of a table's rows is in any sample of it: PostgreSQL samples
300 x the statistics target (30,000 rows by default; ANALYZE in the manual), so such a value
appears about 300 times and lands in the most-common-values list."""
MIN_ROWS_READ = 1000


def value_missed_by_sample(est_rows_per_start: float, actual_share: float, rows_read: float) -> bool:
    return est_rows_per_start <= 1 and actual_share >= SAMPLED_SHARE and rows_read >= MIN_ROWS_READ


def rule(ctx: Context) -> Candidate | None:
    node = ctx.node
    restrictions = ctx.restriction_clauses()
    shrunk = _shrunk(ctx)
    if shrunk:
        return shrunk
    if ctx.is_scan and node.relation and not node.conditions and not ctx.clauses \
            and not node.unprinted_condition:
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
    unseen = _unseen_value(ctx, restrictions)
    if unseen:
        return unseen
    opens = [c for c in restrictions if c.op_class == "open_range" and c.bare and len(c.columns) == 1
             and not c.has_parameter and not c.has_subplan and not c.is_join]
    lower_bounds = [c for c in opens if re.search(r">=?", c.text)]
    if not lower_bounds:
        return None
    clause = lower_bounds[0]
    column = clause.columns[0].name
    growing = looks_ever_growing(column, clause.constant_types)
    known = "the histogram's upper bound" if ctx.keeps("histogram") else "the column's known maximum"
    lines = [f"Open range {clause.text} found {fmt_rows(ctx.actual_total)} rows where "
             f"{fmt_rows(ctx.est_total)} were estimated: values above {known} "
             "(rows added since the last ANALYZE) are estimated as almost none."]
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


def _shrunk(ctx: Context) -> Candidate | None:
    """More rows estimated than the whole-relation scan read: rows gone since the statistics."""
    if ctx.direction != "over" or not ctx.rows_read or not ctx.is_scan:
        return None
    if ctx.est_total <= 1.5 * ctx.rows_read:
        return None
    return Candidate(
        cause="stale_statistics", score=0.9,
        reason="the scan estimated more rows than it read in all: the table shrank since its "
               "statistics were taken",
        lines=[f"{ctx.node.label} read {fmt_rows(ctx.rows_read)} rows in all (kept and removed "
               f"by its filter) but estimated {fmt_rows(ctx.est_total)} after its filter: an "
               f"estimated selectivity of {fmt_sel(ctx.est_selectivity)}, above 1, which no "
               "filter can give. The statistics count rows the table no longer holds (deleted "
               "since the last ANALYZE; without VACUUM the pages remain, and the planner scales "
               "its old row count by them)."],
        fields={"rows_read": ctx.rows_read, "est_selectivity": ctx.est_selectivity,
                "table_rows_implied_at_least": ctx.est_total},
        table=ctx.relation_of.get(None), columns=[],
    )


def _unseen_value(ctx: Context, restrictions) -> Candidate | None:
    """An equality on the one-row floor that found a large share of the rows read."""
    if not ctx.keeps("most_common_values") or not ctx.rows_read or not ctx.is_scan:
        return None
    equalities = [c for c in restrictions if c.op_class == "equality" and c.bare
                  and len(c.columns) == 1 and not c.has_parameter and not c.has_subplan]
    share = ctx.actual_selectivity or 0.0
    if len(equalities) != 1 or not value_missed_by_sample(ctx.node.est_rows or 0.0, share, ctx.rows_read):
        return None
    clause = equalities[0]
    column = clause.columns[0].name
    return Candidate(
        cause="stale_statistics", score=0.8,
        reason="a value holding a large share of the rows is unknown to the statistics: it "
               "was loaded after the last ANALYZE",
        lines=[f"{clause.text} was estimated at {fmt_rows(ctx.node.est_rows)} row (the floor: the "
               f"statistics know no such value) but found {fmt_rows(ctx.actual_total)} of "
               f"{fmt_rows(ctx.rows_read)} rows read ({share:.0%}).",
               f"A value holding {share:.0%} of the rows is in any sample ANALYZE takes (one "
               f"above {SAMPLED_SHARE:.0%} appears hundreds of times in PostgreSQL's 30,000-row "
               "default sample), so it was loaded after the statistics were taken, not missed "
               "by them."],
        fields={"clause": clause.text, "column": column, "actual_share": share},
        table=ctx.table_of(clause) or ctx.relation_of.get(None), columns=[column],
    )
