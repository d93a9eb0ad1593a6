"""The check: estimated against actual rows, per operator, and where each error was introduced.

Totals use the *actual* number of starts (``est_total = est_rows x starts``), so the inner
side of a nested loop is judged per start. The q-error is ``max(e/a, a/e)`` with both floored
at one row (Moerkotte, Neumann, Steidl, VLDB 2009); ``log10_ratio = log10(actual/est)`` with the
same floors, positive for an underestimate.

Errors multiply up the tree, so a node's own error is its log ratio minus what its inputs
carry in. How the inputs are taken out depends on the node's *input rule*, which its engine
module assigns (`RULES` below says what each rule does; each engine's table says which node
types take which rule).

Every walk here is an iterative pass over the pre-order list: parents come before their
children, so a reversed pass is bottom-up. Depth never costs recursion.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .model import Finding, ParsedPlan, PlanNode

RULES = {
    "source": "its own log ratio (scans, grouping, leaves)",
    "pass": "minus its input's log ratio (Hash, Sort, Materialize, Memoize, Gather, Limit...)",
    "join": "minus the log ratios of both inputs (outer joins: of the preserved input alone "
            "when that explains more, as they emit the preserved rows anyway)",
    "semi_outer": "minus the outer input's log ratio (semi and anti joins)",
    "semi_inner": "minus the inner input's log ratio (right semi and right anti joins)",
    "bitmap_heap": "minus its bitmap child's log ratio (Bitmap Heap Scan)",
    "sum": "against the sums of its inputs' estimated and actual rows (Append, Merge Append)",
    "cte": "minus the log ratio of the CTE it reads (CTE Scan)",
    "uncounted": "not judged: the engine does not count this node's rows (BitmapAnd, BitmapOr)",
}

# Node types that read all their input before they emit a row: a consumer that stops early
# does not cut their input short. Everything else streams, and passes the early stop down.
BLOCKING = {"Sort", "Hash", "Incremental Sort", "SetOp"}


@dataclass
class CheckOptions:
    threshold: float = 10.0
    """A node whose own q-error reaches this is an origin (common practice: one order of
    magnitude, "the same order of magnitude" rule)."""


def parallel_divisor(workers: int, leader_participates: bool = True) -> float:
    """PostgreSQL's divisor for per-process estimates (get_parallel_divisor, costsize.c)."""
    divisor = float(workers)
    if leader_participates:
        leader = 1.0 - 0.3 * workers
        if leader > 0:
            divisor += leader
    return divisor or 1.0


def log_ratio(est_total: float, actual_total: float) -> float:
    return math.log10(max(actual_total, 1.0) / max(est_total, 1.0))


def check(parsed: ParsedPlan, input_rule, options: CheckOptions | None = None) -> list[Finding]:
    """Fill the check fields of every node and return one finding per origin."""
    options = options or CheckOptions()
    nodes = parsed.nodes
    threshold = math.log10(options.threshold)
    leader = {s.root: str(s.settings.get("parallel_leader_participation", "on")).lower() != "off"
              for s in parsed.statements}
    _totals(nodes, leader)
    _bounds_from_parents(nodes, parsed.engine_version)
    _judge(nodes, input_rule)
    for node in nodes:
        if node.est_total is not None and node.actual_total is not None:
            node.log10_ratio = log_ratio(node.est_total, node.actual_total)
            node.q_error = 10 ** abs(node.log10_ratio)
    _own_errors(nodes, input_rule)
    findings: list[Finding] = []
    for node in nodes:
        if not node.judged or node.own_log10_ratio is None:
            continue
        own = node.own_log10_ratio
        charitable = _charitable_own(node)
        if abs(own) >= threshold - 1e-9 and abs(charitable) >= threshold - 1e-9:
            node.origin = True
            findings.append(Finding(
                node=node.id, q_error=round(node.q_error, 6), own_q_error=round(10 ** abs(own), 6),
                direction="under" if own > 0 else "over",
            ))
    _inheritance(nodes, threshold)
    return findings


def _is_partial(node: PlanNode, nodes: list[PlanNode]) -> bool:
    if node.parallel_aware:
        return True
    inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
    if node.operator in ("Gather", "Gather Merge") or not inputs:
        return False
    return bool(inputs[0].extra.get("__partial__"))


def _totals(nodes: list[PlanNode], leader: dict[int, bool]) -> None:
    gather_workers: dict[int, tuple[int, bool]] = {}
    stmt_root: dict[int, int] = {}
    for node in nodes:
        if node.parent is None:
            stmt_root[node.statement] = node.id
        parent = nodes[node.parent] if node.parent is not None else None
        if parent is not None and parent.operator in ("Gather", "Gather Merge") and parent.workers_planned:
            gather_workers[node.id] = (parent.workers_planned, leader.get(stmt_root[node.statement], True))
        elif parent is not None and parent.id in gather_workers:
            gather_workers[node.id] = gather_workers[parent.id]
    for node in reversed(nodes):
        partial = node.id in gather_workers and _is_partial(node, nodes)
        if partial:
            node.extra["__partial__"] = True
    for node in nodes:
        partial = bool(node.extra.pop("__partial__", False))
        if node.est_rows is None:
            continue
        if partial:
            workers, participates = gather_workers[node.id]
            divisor = parallel_divisor(workers, participates)
            node.est_total = node.est_rows * divisor
            node.derived.append(
                f"parallel: estimate is per process; total = {_fmt(node.est_rows)} x divisor "
                f"{divisor:g} ({workers} workers{' + leader' if participates else ''})"
            )
        elif node.starts is not None and node.executed:
            node.est_total = node.est_rows * node.starts
        else:
            node.est_total = node.est_rows
        if node.executed and node.actual_rows is not None and node.starts is not None:
            node.actual_total = node.actual_rows * node.starts


def _bounds_from_parents(nodes: list[PlanNode], version: str | None) -> None:
    """Repair figures the engine printed too coarsely, and say so in `derived`.

    - Per-start actual rows printed as integers (PostgreSQL 17 and earlier) hide averages
      below 0.5: ``rows=0 loops=29780`` may be 6,000 rows. The inner side of an inner nested
      loop must have returned at least the rows the join emitted plus those its join filter
      removed, so the total is raised to that bound (within what the rounding allows).
    - The planner clamps a printed estimate to at least one row; for the inner side of an
      inner nested loop without a join filter, the join's estimate over the outer estimate
      gives the real per-start figure.
    """
    integer_rows = version != "18"
    for node in nodes:
        if node.operator != "Nested Loop" or node.join_type != "Inner" or not node.executed:
            continue
        inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
        if len(inputs) != 2:
            continue
        outer, inner = inputs
        if integer_rows and inner.executed and inner.starts and inner.starts > 1 \
                and node.actual_total is not None and inner.actual_rows is not None \
                and float(inner.actual_rows).is_integer():
            removed = node.rows_removed.get("Join Filter", 0.0) * (node.starts or 1)
            bound = node.actual_total + removed
            high = (inner.actual_rows + 0.5) * inner.starts
            low = max(0.0, (inner.actual_rows - 0.5) * inner.starts)
            inner.extra["actual_total_range"] = [low, high]
            if bound > inner.actual_total:
                inner.actual_total = min(bound, high)
                inner.derived.append(
                    f"actual total raised to {_fmt(inner.actual_total)}: the nested loop above "
                    f"emitted {_fmt(bound)} rows through it, and per-start rows are printed "
                    f"rounded ({_fmt(inner.actual_rows)} x {_fmt(inner.starts)} loops)"
                )
        has_join_filter = any(c.kind == "join_filter" for c in node.conditions)
        if (not has_join_filter and inner.est_rows == 1 and outer.est_rows and node.est_rows is not None
                and inner.est_total is not None):
            per_start = node.est_rows / outer.est_rows
            if per_start < 1:
                inner.est_total = per_start * (inner.starts or 1) if inner.executed else per_start
                inner.derived.append(
                    f"estimate printed as 1 row (the planner's floor); the join's estimate "
                    f"{_fmt(node.est_rows)} over the outer estimate {_fmt(outer.est_rows)} gives "
                    f"{per_start:.3g} per start"
                )


def _judge(nodes: list[PlanNode], input_rule) -> None:
    """Mark nodes that must not be judged, and why. Top-down: an early stop flows down."""
    cut: dict[int, str] = {}
    cte_cut: set[str] = set()
    for node in nodes:
        reason = cut.get(node.id)
        rule = input_rule(node, nodes)
        node.own_rule = rule
        if node.executed is None or node.actual_total is None:
            node.not_judged_reason = "no actuals" if node.executed is None else "never executed"
        elif node.est_total is None:
            node.not_judged_reason = "no estimate"
        elif rule == "uncounted":
            node.not_judged_reason = "the engine does not count this node's rows"
        elif reason:
            node.not_judged_reason = reason
        else:
            node.judged = True
        if reason and node.operator == "CTE Scan" and node.cte_name:
            cte_cut.add(node.cte_name)
        inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
        stops_children = bool(reason) and node.operator not in BLOCKING and not (
            node.operator == "Aggregate" and node.strategy in ("Plain", "Hashed", "Mixed"))
        if node.operator == "Limit" and node.executed and node.est_total is not None \
                and node.actual_total is not None and node.actual_total >= node.est_total:
            for child in inputs:
                cut.setdefault(child.id, "stopped early: the Limit above had all the rows it needed")
        if stops_children:
            for child in inputs:
                if node.operator in ("Hash Join",) and child.parent_relationship == "Inner":
                    continue
                if node.operator == "Nested Loop" and child.parent_relationship == "Inner" \
                        and node.join_type not in ("Semi", "Anti"):
                    continue
                cut.setdefault(child.id, reason)
        if node.operator in ("Nested Loop", "Merge Join") and node.join_type in ("Semi", "Anti"):
            for child in inputs:
                if child.parent_relationship == "Inner":
                    cut.setdefault(child.id, f"stopped early: a {node.join_type.lower()} join reads its "
                                             "inner input only up to the first match")
        if node.operator == "Merge Join":
            for child in inputs:
                if child.est_total is not None and child.actual_total is not None \
                        and child.actual_total < child.est_total:
                    cut.setdefault(child.id, "may have stopped early: a merge join stops reading "
                                             "one input once the other runs out")
        texts = " ".join(c.text for c in node.conditions)
        for child in nodes_children(node, nodes):
            if child.parent_relationship == "SubPlan" and child.subplan_name:
                name = child.subplan_name
                if f"EXISTS({name})" in texts or f"EXISTS ({name})" in texts or \
                        f"ANY ({name}" in texts or f"alternatives: {name}" in texts:
                    cut.setdefault(child.id, f"stopped early: {name} stops at its first match")
    if cte_cut:
        for node in nodes:
            if node.parent_relationship == "InitPlan" and node.subplan_name \
                    and node.subplan_name.startswith("CTE ") and node.subplan_name[4:] in cte_cut:
                _cut_subtree(nodes, node, "stopped early: the CTE's reader stopped before its end")


def nodes_children(node: PlanNode, nodes: list[PlanNode]) -> list[PlanNode]:
    return [nodes[c] for c in node.children]


def _cut_subtree(nodes: list[PlanNode], top: PlanNode, reason: str) -> None:
    todo = [top]
    while todo:
        node = todo.pop()
        if node.judged:
            node.judged = False
            node.not_judged_reason = reason
        if node.operator in BLOCKING:
            continue
        todo.extend(nodes[c] for c in node.children if nodes[c].is_input_edge)


def _input_lr(node: PlanNode) -> float:
    """What an input carries into its consumer: its log ratio, or nothing if not judged."""
    return node.log10_ratio if node.judged and node.log10_ratio is not None else 0.0


def _own_errors(nodes: list[PlanNode], input_rule) -> None:
    cte_roots = {n.subplan_name[4:]: n for n in nodes
                 if n.subplan_name and n.subplan_name.startswith("CTE ")}
    for node in nodes:
        if not node.judged or node.log10_ratio is None:
            continue
        lr = node.log10_ratio
        inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
        rule = node.own_rule
        if rule == "source" or not inputs and rule not in ("cte",):
            own = lr
        elif rule == "pass":
            own = lr - _input_lr(inputs[0])
        elif rule == "bitmap_heap":
            own = lr - _input_lr(inputs[0])
        elif rule == "join":
            outer = _input_lr(inputs[0])
            inner = _input_lr(inputs[1]) if len(inputs) > 1 else 0.0
            candidates = [lr - outer - inner]
            if node.join_type in ("Left", "Full"):
                candidates.append(lr - outer)
            if node.join_type in ("Right", "Full"):
                candidates.append(lr - inner)
            own = min(candidates, key=abs)
        elif rule == "semi_outer":
            own = lr - _input_lr(inputs[0])
        elif rule == "semi_inner":
            own = lr - _input_lr(inputs[-1])
        elif rule == "sum":
            counted = [c for c in inputs if c.judged]
            if counted:
                est = sum(c.est_total or 0.0 for c in counted)
                act = sum(c.actual_total or 0.0 for c in counted)
                own = lr - log_ratio(est, act)
            else:
                own = lr
        elif rule == "cte":
            root = cte_roots.get(node.cte_name or "")
            own = lr - _input_lr(root) if root is not None else lr
        else:
            own = lr
        node.own_log10_ratio = own


def _charitable_own(node: PlanNode) -> float:
    """The own error at the end of the rounding range nearest to the estimate."""
    span = node.extra.get("actual_total_range")
    if not span or node.est_total is None or node.own_log10_ratio is None:
        return node.own_log10_ratio or 0.0
    low, high = span
    nearest = min(max(node.est_total, low), high)
    shift = log_ratio(node.est_total, nearest) - (node.log10_ratio or 0.0)
    return node.own_log10_ratio + shift


def _inheritance(nodes: list[PlanNode], threshold: float) -> None:
    """For each node with a large error but no own origin, the origins below that explain it."""
    below: dict[int, list[int]] = {}
    cte_roots = {n.subplan_name[4:]: n.id for n in nodes
                 if n.subplan_name and n.subplan_name.startswith("CTE ")}
    for node in reversed(nodes):
        found: list[int] = []
        feeds = [c for c in node.children if nodes[c].is_input_edge]
        if node.operator == "CTE Scan" and node.cte_name in cte_roots:
            feeds.append(cte_roots[node.cte_name])
        for child in feeds:
            for origin in below.get(child, ()):
                if origin not in found:
                    found.append(origin)
        if node.origin:
            found = [node.id] + found
        below[node.id] = found[:50]
        if node.origin or node.log10_ratio is None or abs(node.log10_ratio) < threshold - 1e-9:
            continue
        sign = 1 if node.log10_ratio > 0 else -1
        node.inherits_from = [o for o in found
                              if o != node.id and (nodes[o].own_log10_ratio or 0) * sign > 0]


def _fmt(value: float) -> str:
    return f"{value:,.0f}" if float(value).is_integer() else f"{value:,.2f}"
