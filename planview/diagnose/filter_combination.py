"""ANDed filters combined by the engine's own rule rather than as a product.

An engine that keeps the smallest of its filters' estimates (`Engine.AND_FILTERS` is
``minimum``) assumes the filters overlap completely: independent filters then keep far fewer
rows than the one filter it counted, and the scan is overestimated. When no filter is an
equality it applies its default selectivity once for all of them.

>>> round(product_of([0.04, 0.027]), 5)   # two independent equalities: 1/25 x 1/37
0.00108
"""

from __future__ import annotations

import math

from .context import Candidate, Context, fmt_rows, fmt_sel


def product_of(selectivities: list[float]) -> float:
    return math.prod(selectivities)


def rule(ctx: Context) -> Candidate | None:
    combination = ctx.engine.AND_FILTERS
    if not combination or ctx.direction != "over" or not ctx.is_scan:
        return None
    how, source = combination
    clauses = [c for c in ctx.restriction_clauses() if c.columns and c.op_class not in ("subplan", "unparsed")]
    columns = sorted({c.columns[0].name for c in clauses})
    if len(clauses) < 2 or len(columns) < 2:
        return None
    equalities = [c for c in clauses if c.op_class in ("equality", "in_list")]
    lines = [f"{len(clauses)} ANDed filters on {', '.join(columns)}: "
             + " AND ".join(c.text for c in clauses) + "."]
    fields: dict = {"clauses": [c.text for c in clauses], "columns": columns, "combination": how,
                    "source": source}
    match = ctx.default_match()
    if equalities:
        lines.append(f"The engine takes the {how} of its filters' estimates ({source}): an "
                     "equality counts as the rows divided by the column's distinct count, the "
                     "other filters leave the estimate as it was, so the scan was estimated "
                     "from its most selective equality alone, as if every other filter kept all "
                     "of those rows.")
    else:
        lines.append(f"No filter is an equality: the engine applies its default selectivity once "
                     f"for all {len(clauses)} filters together ({source}), not once per filter.")
    if match:
        lines.append(f"Estimated selectivity {fmt_sel(ctx.est_selectivity)} equals {match[0]} = "
                     f"{fmt_sel(match[1])}.")
        fields["default"] = {"name": match[0], "value": match[1], "observed": ctx.est_selectivity}
    lines.append(f"It found {fmt_rows(ctx.actual_total)} rows, not {fmt_rows(ctx.est_total)}: the "
                 "filters narrow one another's rows, as independent filters do.")
    score = 0.8 if equalities or match else 0.6
    if ctx.actual_total == 0:
        score = 0.45  # no row at all: an impossible combination (correlation) fits better
    return Candidate(cause="filter_combination", score=score,
                     reason=f"ANDed filters on one table combined by the engine's {how} rule, "
                            "not as a product",
                     lines=lines, fields=fields, table=ctx.relation_of.get(None), columns=columns)
