"""Semi and anti joins: inputs estimated right, output off.

A semi join (EXISTS, IN) keeps the outer rows that find a match, an anti join (NOT EXISTS)
those that find none. The optimizer estimates the share with a match from the join keys'
distinct counts alone, as if a filter on the inner side kept keys at random; when that filter
keeps exactly the keys that match (or that do not), the share is far off although both inputs
are estimated right. No single-table statistic describes the pairing.

>>> matched_share(outer_rows=100_000, emitted=101, anti=True)
0.99899
"""

from __future__ import annotations

from .context import Candidate, Context, fmt_rows

MAX_DEPTH = 4
"""Levels walked down the inner input to find its filter (a Hash over a scan is two)."""


def matched_share(outer_rows: float, emitted: float, anti: bool) -> float:
    share = emitted / outer_rows if outer_rows else 0.0
    return round(1.0 - share if anti else share, 5)


def rule(ctx: Context) -> Candidate | None:
    node, nodes = ctx.node, ctx.plan.nodes
    engine = ctx.engine
    semi_types = engine.SEMI_JOINS | engine.RIGHT_SEMI_JOINS
    if node.join_type not in semi_types or len(node.children) < 2:
        return None
    inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
    if len(inputs) < 2:
        return None
    right_side = node.join_type in engine.RIGHT_SEMI_JOINS
    kept, probe = (inputs[1], inputs[0]) if right_side else (inputs[0], inputs[1])
    anti = "anti" in node.join_type.lower()
    kind = "anti" if anti else "semi"
    lines = [f"A {kind} join: it emits the rows of {kept.label} that find "
             + ("no" if anti else "a") + f" match in {probe.label}."]
    if kept.est_total and kept.actual_total is not None:
        estimated = matched_share(kept.est_total, ctx.est_total, anti)
        found = matched_share(kept.actual_total, ctx.actual_total, anti)
        lines.append(f"Its input of {fmt_rows(kept.actual_total)} rows was estimated at "
                     f"{fmt_rows(kept.est_total)}; the share with a match was estimated at "
                     f"{estimated:.2%} and was {found:.2%}.")
    inner_filter = _filter_below(probe, nodes)
    if inner_filter is not None:
        holder, text = inner_filter
        lines.append(f"The other side is filtered ({text} on {holder.label}): the optimizer "
                     "assumes that filter keeps join keys at random, but the keys it keeps "
                     + ("are the ones that match." if ctx.direction == "over" and anti else
                        "follow the outer rows' keys."))
    else:
        lines.append("The match share comes from the join keys' distinct counts alone, assumed "
                     "independent of everything else in the query.")
    score = 0.65 if inner_filter is not None else 0.5
    return Candidate(cause="join_selectivity", score=score,
                     reason=f"a {kind} join's share of matches, estimated from distinct counts "
                            "as if independent of the other side's filter",
                     lines=lines,
                     fields={"join_type": node.join_type,
                             "inner_filter": inner_filter[1] if inner_filter else None},
                     table=ctx.relation_of.get(None), columns=[],
                     details={"anti": anti})


def _filter_below(node, nodes):
    """The first filter on the input's single-child chain (a bounded walk)."""
    for _ in range(MAX_DEPTH):
        filters = [c.text for c in node.conditions if c.kind in ("filter", "index_cond", "recheck_cond")]
        if filters:
            return node, filters[0]
        inputs = [c for c in node.children if nodes[c].is_input_edge]
        if len(inputs) != 1:
            return None
        node = nodes[inputs[0]]
    return None
