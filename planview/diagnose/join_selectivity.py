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
    flagged = _mark_join_below(ctx)
    if flagged is not None:
        return _flag_filter(ctx, flagged)
    keys = _keys_left_out(ctx)
    if keys is not None:
        return keys
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


def _mark_join_below(ctx: Context):
    """The mark join whose flag this filter tests: its one input, a join of a mark type (it
    emits every row of its probe side with a flag saying whether it found a match)."""
    node, nodes = ctx.node, ctx.plan.nodes
    if not ctx.engine.MARK_JOINS or node.join_type or not any(c.kind == "filter" for c in node.conditions):
        return None
    inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
    if len(inputs) != 1 or inputs[0].join_type not in ctx.engine.MARK_JOINS:
        return None
    return inputs[0]


def _flag_filter(ctx: Context, mark) -> Candidate:
    node, nodes = ctx.node, ctx.plan.nodes
    condition = next(c.text for c in node.conditions if c.kind == "filter")
    anti = condition.lstrip("( ").upper().startswith("NOT")
    kind = "anti" if anti else "semi"
    sides = [nodes[c] for c in mark.children if nodes[c].is_input_edge]
    other = sides[1].label if len(sides) > 1 else "the other side"
    lines = [f"{node.label} ({condition}) keeps the rows of {mark.label} whose flag says they "
             + ("found no" if anti else "found a") + f" match in {other}: together a {kind} join "
             "(IN, EXISTS or their negation, planned as a mark join and a filter on its flag)."]
    fields: dict = {"join_type": f"{mark.join_type} + filter"}
    if mark.est_total and mark.actual_total:
        estimated = matched_share(mark.est_total, ctx.est_total, False)
        found = matched_share(mark.actual_total, ctx.actual_total, False)
        lines.append(f"Its input of {fmt_rows(mark.actual_total)} rows was estimated at "
                     f"{fmt_rows(mark.est_total)}; the filter was estimated to keep {estimated:.2%} "
                     f"and kept {found:.2%}. The flag has no statistics: its share is a fixed guess, "
                     "not derived from what the other side holds.")
        fields.update(estimated_share=estimated, actual_share=found)
        default = next(((name, value) for name, value in ctx.defaults.items()
                        if abs(estimated - value) <= max(value * 0.01, 0.5 / mark.est_total)), None)
        if default:
            lines.append(f"The estimated share is {default[0]} = {default[1]:g}.")
            fields["default"] = {"name": default[0], "value": default[1]}
    return Candidate(cause="join_selectivity", score=0.7,
                     reason=f"a {kind} join's share of matches, tested as a flag with a fixed "
                            "estimate rather than derived from the other side",
                     lines=lines, fields=fields, table=ctx.relation_of.get(None), columns=[],
                     details={"anti": anti})


def _keys_left_out(ctx: Context) -> Candidate | None:
    """An inner join on several equalities between its inputs, estimated too high, where the
    engine estimates such a join from one of them (the one with the most distinct values): the
    others, which keep far fewer pairs here, never enter the estimate."""
    node = ctx.node
    combined = ctx.engine.JOIN_KEYS_COMBINED
    if combined is None or ctx.direction != "over" or node.own_rule != "join" \
            or node.join_type not in (None, "INNER"):
        return None
    keys = [c for c in ctx.clauses if c.source in ("hash_cond", "join_cond", "merge_cond")
            and c.op_class == "equality" and len(c.columns) == 2 and c.bare]
    if len(keys) < 2:
        return None
    how, source = combined
    texts = ", ".join(c.text for c in keys)
    lines = [f"The join matches on {len(keys)} equalities ({texts}). The engine estimates a join on "
             "several keys between the same inputs from the key with the most distinct values alone "
             f"and skips the others once the inputs are connected ({source}): the other keys do "
             "not lower the estimate, though here they keep far fewer pairs.",
             "No statistic on one table can say how the keys match together (customer and supplier in "
             "one nation, say); the join's output is what is left once all of them apply."]
    return Candidate(cause="join_selectivity", score=0.6,
                     reason="a join on several keys estimated from one of them; the others never "
                            "lowered the estimate",
                     lines=lines, fields={"join_keys": [c.text for c in keys], "keys_combined": how},
                     table=ctx.relation_of.get(None), columns=[],
                     details={"multi_key": True})
