"""Skewed values: one equality or IN clause on one column, estimated from the average.

A value much more (or less) common than ``1/n_distinct`` that is missing from the
most-common-values list is estimated at the average frequency of the values not listed.
Either direction fits. The inner side of a nested loop, whose index condition compares the
column with each outer row's value, shows the same defect for a join key.

>>> round(frequency_ratio(estimated=0.0014559, actual=0.3), 1)  # a heavy value: 206x
206.1
"""

from __future__ import annotations

from .context import Candidate, Context, fmt_rows, fmt_sel


def _own_names(ctx: Context) -> set:
    """The names this scan's own columns may be qualified with (alias, relation, none)."""
    node = ctx.node
    return {None, node.alias, node.relation}


def frequency_ratio(estimated: float, actual: float) -> float:
    return actual / estimated if estimated else float("inf")


def rule(ctx: Context) -> Candidate | None:
    restrictions = [c for c in ctx.restriction_clauses() if c.op_class in ("equality", "in_list")
                    and c.bare and c.columns]
    own = _own_names(ctx)
    single = [c for c in restrictions if len(c.columns) == 1
              or (c.is_join and ctx.is_scan and sum(1 for x in c.columns if x.qualifier in own) == 1)]
    others = [c for c in ctx.restriction_clauses() if c not in single and not c.has_parameter
              and c.op_class not in ("subplan",)]
    if not ctx.clauses and ctx.node.unprinted_condition == "key_lookup":
        return _key_lookup(ctx)
    if len(single) != 1 or others:
        return None
    clause = single[0]
    mine = [x for x in clause.columns if len(clause.columns) == 1 or x.qualifier in own]
    column = mine[0].name
    parameterised = clause.has_parameter or clause.is_join
    lines = [f"One {'IN list' if clause.op_class == 'in_list' else 'equality'} on {column}: "
             f"{clause.text}."]
    fields: dict = {"clause": clause.text, "column": column}
    est_sel, act_sel = ctx.est_selectivity, ctx.actual_selectivity
    if est_sel is not None and act_sel is not None:
        fields.update(est_selectivity=est_sel, actual_selectivity=act_sel)
        lines.append(f"Estimated selectivity {fmt_sel(est_sel)}, actual {fmt_sel(act_sel)} "
                     f"({fmt_rows(ctx.actual_total)} of {fmt_rows(ctx.rows_read)} rows read).")
    if parameterised:
        lines.append("The value comes from each outer row (a join key): the estimate is the "
                     "average rows per key, and the keys really used are "
                     + ("more" if ctx.direction == "under" else "less") + " common than average.")
    elif not ctx.keeps("most_common_values"):
        lines.append("The engine keeps no list of frequent values, only a distinct count: every "
                     "value is estimated at the average rows per value, and this one is far "
                     + ("more" if ctx.direction == "under" else "less") + " common.")
    else:
        lines.append(("The value is far more common than the optimizer's average for values not "
                      "in its most-common-values list" if ctx.direction == "under" else
                      "The value is far rarer than the optimizer thought: it is probably in the "
                      "most-common-values list from an old sample, or its frequency was "
                      "averaged with common ones") + ".")
    score = 0.7 if not parameterised else 0.5
    if clause.op_class == "in_list":
        score -= 0.1
    return Candidate(cause="skew", score=score,
                     reason="a single equality on one column, off by more than tenfold",
                     lines=lines, fields=fields,
                     table=ctx.relation_of.get(mine[0].qualifier) or ctx.relation_of.get(None),
                     columns=[column])


def _key_lookup(ctx: Context) -> Candidate:
    """A lookup by index key per outer row whose output format prints no condition: its
    estimate is the index's average rows per key, so a gap is the keys used being uncommon."""
    node = ctx.node
    more = ctx.direction == "under"
    lines = [f"{node.label} looks rows up by an equality on the key of index {node.index or '?'} "
             "with each outer row's value: its estimate "
             f"({fmt_rows(node.est_rows)} a lookup) is the index's average rows per key, and the "
             f"keys really used are {'more' if more else 'less'} common than average "
             f"({fmt_rows(node.actual_rows)} a lookup).",
             "This output format prints no condition, so the key's column is not named here; "
             "the same plan in a format that prints conditions names it."]
    return Candidate(cause="skew", score=0.5,
                     reason="a lookup by index key, estimated from the average rows per key",
                     lines=lines, fields={"index": node.index},
                     table=ctx.relation_of.get(None), columns=[])
