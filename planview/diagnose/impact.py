"""Impact: how much of the query's time ran above a mistake, so findings can be ranked.

The nearest ancestor whose plan choice depended on the estimate is the first join (or a
node sized on it: a hash, a sort, a grouping) that inherits the error; its time, inclusive
of everything below it, is the time that rode on the wrong number.
"""

from __future__ import annotations

from .. import words
from .context import fmt_rows


def node_ms(plan, node) -> float | None:
    """Its time with its inputs, in all, by its engine's rule (`planview.timing`)."""
    times = getattr(plan, "times", None)
    return times.total_ms[node.id] if times is not None else None


JOIN_RULES = ("join", "semi_outer", "semi_inner")


class ImpactWalk:
    """The walk from each origin up to the decision that rode on it, for one plan.

    Made once per plan: runs of pass-through parents (which carry every error) are skipped in
    one step, and each node's `inherits_from` is a set, so a finding's walk costs one step per
    ancestor that inherits from it, never a scan of the tree or of a list."""

    def __init__(self, plan):
        self.plan = plan
        nodes = plan.nodes
        climb = list(range(len(nodes)))
        for node in plan.index.walk():  # pre-order: a parent's entry is final before its children's
            if node.parent is not None and node.is_input_edge and nodes[node.parent].own_rule == "pass":
                climb[node.id] = climb[node.parent]
        self._climb = climb
        self._inherits: dict[int, set[int]] = {}

    def _inherits_from(self, node) -> set[int]:
        found = self._inherits.get(node.id)
        if found is None:
            found = self._inherits[node.id] = set(node.inherits_from)
        return found

    def of(self, origin) -> dict:
        plan = self.plan
        nodes = plan.nodes
        statement = plan.statements[origin.statement] if origin.statement < len(plan.statements) else None
        query_ms = statement.execution_ms if statement else None
        decision = None
        walker = origin
        while True:
            walker = nodes[self._climb[walker.id]]
            if walker.parent is None:
                break
            parent = nodes[walker.parent]
            if not walker.is_input_edge or origin.id not in self._inherits_from(parent):
                break
            if parent.own_rule in JOIN_RULES:
                decision = parent
                break
            walker = parent
        return _impact(plan, origin, decision, walker, query_ms)


def _impact(plan, origin, decision, walker, query_ms) -> dict:
    nodes = plan.nodes
    target = decision or origin
    ms = node_ms(plan, target)
    origin_ms = node_ms(plan, origin)
    text = ""
    if decision is not None:
        inner = [nodes[c] for c in decision.children if nodes[c].parent_relationship == "Inner"]
        outer = [nodes[c] for c in decision.children if nodes[c].parent_relationship == "Outer"]
        side = inner[0] if inner else None
        in_inner = side is not None and plan.index.contains(side.id, origin.id)
        if side is not None and not in_inner and side.starts and side.starts > 1 and outer:
            text = (f"{decision.label} (#{decision.id}) ran its inner side {side.starts:,.0f} times "
                    f"where {fmt_rows(outer[0].est_total)} were expected")
        elif in_inner and side.starts and side.starts > 1:
            text = (f"{decision.label} (#{decision.id}) got {fmt_rows(side.actual_rows)} rows per "
                    f"start of its inner side where {fmt_rows(side.est_rows)} were expected, "
                    f"over {side.starts:,.0f} starts")
        elif in_inner:
            text = (f"{decision.label} (#{decision.id}) was built for {fmt_rows(side.est_total)} rows "
                    f"of its inner input and got {fmt_rows(side.actual_total)}")
        else:
            text = (f"{decision.label} (#{decision.id}) was chosen for {fmt_rows(walker.est_total)} "
                    f"input rows and got {fmt_rows(walker.actual_total)}")
    else:
        text = f"the error stays at {origin.label} (#{origin.id})"
    if ms is not None:
        text += f": {words.ms(ms)}"
        if query_ms:
            text += f", {min(100.0, 100 * ms / query_ms):.0f}% of the {words.ms(query_ms)} statement"
    rows = abs((origin.actual_total or 0) - (origin.est_total or 0))
    return {"ms": round(ms, 3) if ms is not None else None,
            "share": round(min(1.0, ms / query_ms), 4) if ms is not None and query_ms else None,
            "origin_ms": round(origin_ms, 3) if origin_ms is not None else None,
            "origin_share": round(min(1.0, origin_ms / query_ms), 4)
            if origin_ms is not None and query_ms else None,
            "node": target.id, "text": text, "rows": rows}
