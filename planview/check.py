"""The check: estimated against actual rows, per operator, and where each error was introduced.

Totals use the *actual* number of starts (``est_total = est_rows x starts``), so the inner
side of a nested loop is judged per start. The q-error is ``max(e/a, a/e)`` with both floored
at one row (Moerkotte, Neumann, Steidl, VLDB 2009); ``log10_ratio = log10(actual/est)`` with the
same floors, positive for an underestimate.

Errors multiply up the tree, so a node's own error is its log ratio minus what its inputs
carry in. How the inputs are taken out depends on the node's *input rule*, which its engine
module assigns (`RULES` below maps each rule's name to the function that applies it; each
engine's table says which node types take which rule).

Every walk here is an iterative pass over the pre-order list: parents come before their
children, so a reversed pass is bottom-up. Depth never costs recursion.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

from .index import index_of
from .model import Finding, ParsedPlan, PlanNode


@dataclass
class CheckOptions:
    threshold: float = 10.0
    """A node whose own q-error reaches this is an origin (common practice: one order of
    magnitude, "the same order of magnitude" rule)."""


def log_ratio(est_total: float, actual_total: float) -> float:
    return math.log10(max(actual_total, 1.0) / max(est_total, 1.0))


@dataclass(slots=True)
class Role:
    """What an engine module says about one node, so the check needs no operator names.

    - `rule`: how its own error is separated from its inputs' (a key of `RULES`);
    - `blocking`: it reads all its input before it emits (Sort, Hash, hashed grouping), so a
      consumer that stops early does not cut its input short;
    - `limit`: it stops asking for rows once it has enough (Limit, Top-N);
    - `complete_inputs`: inputs that run to the end even when this node is cut short (the
      inner side of a nested loop, the build side of a hash join);
    - `stops_inputs`: inputs it always stops reading early, with the reason (the inner side of
      a nested-loop semi join, an EXISTS sub-plan);
    - `overestimate_unjudged`: inputs whose overestimate cannot be told from an early stop
      (both sides of a merge join);
    - `partial`: its estimate is per parallel process, with this divisor (None: not partial);
    - `preserved`: for an outer join, which input it emits whole (``outer``, ``inner``, ``both``);
    - `reads`: the id of a node whose output this one re-reads (a CTE scan's CTE);
    - `cut_inputs`: inputs whose rows were cut while running by a filter their estimate
      leaves out (a filter pushed down from a join at run time), with the reason. Their actual
      count is only a lower bound, so this node's own error is taken against their printed
      counts (judged or not), which bounds it from above: an underestimate of its own cannot
      be told from theirs and does not make it an origin; an overestimate still does;
    - `stopped`: the node itself stopped before its end, with the reason (a scan that read
      far fewer rows than its table holds, under a LIMIT the plan does not show): it and the
      inputs it stopped are not judged.

    The facts below are not the check's: it copies them onto the node for the diagnosis.

    - `reads_whole_relation`: a scan that reads every row of its relation;
    - `rows_discarded`: rows per start it read and then discarded (by a filter or a recheck);
    - `conditions_from`: nodes below whose conditions restrict its rows (an index bitmap);
    - `group_keys`: its grouping keys, as printed.
    """

    rule: str = "source"
    blocking: bool = False
    limit: bool = False
    complete_inputs: tuple[int, ...] = ()
    stops_inputs: dict[int, str] | None = None
    overestimate_unjudged: tuple[int, ...] = ()
    partial: float | None = None
    preserved: str | None = None
    reads: int | None = None
    cut_inputs: dict[int, str] | None = None
    stopped: str | None = None
    reads_whole_relation: bool = False
    rows_discarded: float = 0.0
    conditions_from: tuple[int, ...] = ()
    group_keys: tuple[str, ...] = ()


def check(parsed: ParsedPlan, engine, options: CheckOptions | None = None) -> list[Finding]:
    """Fill the check fields of every node and return one finding per origin.

    `engine` is the engine module: its `role(node, nodes, parsed)` describes each node and
    its optional `repair(parsed)` fixes figures the engine printed too coarsely.
    """
    options = options or CheckOptions()
    nodes = parsed.nodes
    threshold = math.log10(options.threshold)
    index_of(parsed)
    roles = [engine.role(node, nodes, parsed) for node in nodes]
    _facts(nodes, roles)
    _totals(nodes, roles)
    if hasattr(engine, "repair"):
        engine.repair(parsed)
    _judge(nodes, roles)
    return _own_errors_and_origins(nodes, roles, threshold)


def _facts(nodes: list[PlanNode], roles: list[Role]) -> None:
    """The engine's facts onto each node, typed, for the diagnosis."""
    for node, role in zip(nodes, roles):
        node.parallel_divisor = role.partial or None
        node.reads_whole_relation = role.reads_whole_relation
        node.rows_discarded = role.rows_discarded
        node.conditions_from = role.conditions_from
        node.group_keys = role.group_keys


def _totals(nodes: list[PlanNode], roles: list[Role]) -> None:
    for node, role in zip(nodes, roles):
        if node.executed and node.actual_rows is not None and node.starts is not None:
            node.actual_total = node.actual_rows * node.starts
        if node.est_rows is None:
            continue
        if role.partial:
            node.est_total = node.est_rows * role.partial
            node.derived.append(
                f"parallel: the estimate is per process; total = {_fmt(node.est_rows)} x the "
                f"parallel divisor {role.partial:g}"
            )
        elif node.starts is not None and node.executed:
            node.est_total = node.est_rows * node.starts
        else:
            node.est_total = node.est_rows


def _judge(nodes: list[PlanNode], roles: list[Role]) -> None:
    """Mark nodes that must not be judged, and why, and take each node's log ratio.
    Top-down: an early stop flows down."""
    cut: dict[int, str] = {}
    for node, role in zip(nodes, roles):
        reason = cut.get(node.id) or role.stopped
        node.own_rule = role.rule
        if node.executed is None or node.actual_total is None:
            node.not_judged_reason = "no actuals" if node.executed is None else "never executed"
        elif node.est_total is None:
            node.not_judged_reason = "no estimate"
        elif role.rule == "uncounted":
            node.not_judged_reason = "no rows to judge: the engine does not count them, or the node emits none"
        elif reason:
            node.not_judged_reason = reason
        else:
            node.judged = True
        if node.est_total is not None and node.actual_total is not None:
            node.log10_ratio = log_ratio(node.est_total, node.actual_total)
            node.q_error = 10 ** abs(node.log10_ratio)
        if not node.children:
            continue
        inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
        if role.limit and node.executed and node.est_total is not None \
                and node.actual_total is not None and node.actual_total >= node.est_total:
            for child in inputs:
                cut.setdefault(child.id, "stopped early: the limit above had all the rows it needed")
        if reason and not role.blocking:
            for child in inputs:
                if child.id not in role.complete_inputs:
                    cut.setdefault(child.id, reason)
        for child_id, why in (role.stops_inputs or {}).items():
            cut.setdefault(child_id, why)
        for child_id in role.overestimate_unjudged:
            child = nodes[child_id]
            if child.est_total is not None and child.actual_total is not None \
                    and child.actual_total < child.est_total:
                cut.setdefault(child_id, "may have stopped early: a merge join stops reading one "
                                         "input once the other runs out")
    visited: set[int] = set()
    for node, role in zip(nodes, roles):
        if role.reads is not None and node.executed and node.not_judged_reason \
                and node.not_judged_reason.startswith("stopped early"):
            _cut_subtree(nodes, roles, nodes[role.reads],
                         "stopped early: the reader of this CTE stopped before its end", visited)


def _cut_subtree(nodes: list[PlanNode], roles: list[Role], top: PlanNode, reason: str,
                 visited: set[int]) -> None:
    """Unjudge what a stopped reader cut short. A node already `visited` by an earlier cut
    (same reason, same walk below it) is skipped, so many readers of one CTE cost one walk."""
    todo = [top]
    while todo:
        node = todo.pop()
        if node.id in visited:
            continue
        visited.add(node.id)
        if node.judged:
            node.judged = False
            node.not_judged_reason = reason
        if roles[node.id].blocking:
            continue
        todo.extend(nodes[c] for c in node.children
                    if nodes[c].is_input_edge and c not in roles[node.id].complete_inputs)


def _judged_lr(node: PlanNode) -> float:
    """What an input carries into its consumer: its log ratio, or nothing if not judged."""
    return node.log10_ratio if node.judged and node.log10_ratio is not None else 0.0


def _carried(child: PlanNode, cut: dict[int, str] | None) -> float:
    """What an input carries in; an input cut while running counts with its printed figures."""
    if cut and child.id in cut and child.log10_ratio is not None:
        return child.log10_ratio
    return _judged_lr(child)


def _own_as_is(lr: float, inputs: list[PlanNode], role: Role) -> float:
    """Its own log ratio (scans, leaves, aggregates without grouping)."""
    return lr


def _own_minus_first(lr: float, inputs: list[PlanNode], role: Role) -> float:
    """Minus its input's log ratio: the one input of Hash, Sort, Materialize, Memoize, Gather,
    Limit...; the index bitmap under a heap scan; the outer input of a semi or anti join;
    the CTE a CTE scan reads."""
    return lr - _carried(inputs[0], role.cut_inputs)


def _own_minus_last(lr: float, inputs: list[PlanNode], role: Role) -> float:
    """Minus the inner input's log ratio (right semi and right anti joins)."""
    return lr - _carried(inputs[-1], role.cut_inputs)


def _own_of_group(lr: float, inputs: list[PlanNode], role: Role) -> float:
    """Its own log ratio, or minus its input's when that explains more: a group count is
    capped by, and scales with, the input estimate (grouping nodes)."""
    return min((lr, lr - _carried(inputs[0], role.cut_inputs)), key=abs)


def _own_of_join(lr: float, inputs: list[PlanNode], role: Role) -> float:
    """Minus the log ratios of both inputs (outer joins: of the preserved input alone when
    that explains more, as they emit the preserved rows anyway)."""
    outer = _carried(inputs[0], role.cut_inputs)
    inner = _carried(inputs[1], role.cut_inputs) if len(inputs) > 1 else 0.0
    candidates = [lr - outer - inner]
    if role.preserved in ("outer", "both"):
        candidates.append(lr - outer)
    if role.preserved in ("inner", "both"):
        candidates.append(lr - inner)
    return min(candidates, key=abs)


def _own_of_sum(lr: float, inputs: list[PlanNode], role: Role) -> float:
    """Against the sums of its inputs' estimated and actual rows (a concatenation of inputs)."""
    counted = [c for c in inputs if c.judged]
    if not counted:
        return lr
    est = sum(c.est_total or 0.0 for c in counted)
    act = sum(c.actual_total or 0.0 for c in counted)
    return lr - log_ratio(est, act)


OwnErrorRule = Callable[[float, list[PlanNode], Role], float]

RULES: dict[str, OwnErrorRule] = {
    "source": _own_as_is,
    "group": _own_of_group,
    "pass": _own_minus_first,
    "join": _own_of_join,
    "semi_outer": _own_minus_first,
    "semi_inner": _own_minus_last,
    "bitmap_heap": _own_minus_first,
    "sum": _own_of_sum,
    "cte": _own_minus_first,
    # not judged: the engine does not count this node's rows (a combination of index bitmaps)
    "uncounted": _own_as_is,
}
"""How each input rule separates a node's own error from what its inputs carry in: the rule's
name (what an engine's table assigns) to the function that applies it. Each function gets the
node's log ratio, its inputs (never empty: a node without inputs keeps its own log ratio) and
its `Role`."""


def _own_error(node: PlanNode, role: Role, nodes: list[PlanNode]) -> float:
    lr = node.log10_ratio
    apply = RULES.get(node.own_rule or "", _own_as_is)
    if apply is _own_as_is:
        return lr
    if node.own_rule == "cte":  # a CTE scan's input is the CTE it reads, not a child
        inputs = [nodes[role.reads]] if role.reads is not None else []
    else:
        inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
    return apply(lr, inputs, role) if inputs else lr


def _own_errors_and_origins(nodes: list[PlanNode], roles: list[Role], threshold: float) -> list[Finding]:
    """One bottom-up pass: each judged node's own error, whether it is an origin, and the
    origins below that explain the error of a node that is not one (`inherits_from`).

    A node that re-reads another (a CTE scan) may come after what it reads in pre-order, so
    a second pass picks those links up."""
    findings: list[Finding] = []
    below: dict[int, list[int]] = {}
    for node in reversed(nodes):
        role = roles[node.id]
        if node.judged and node.log10_ratio is not None:
            node.own_log10_ratio = _own_error(node, role, nodes)
            finding = _origin(node, role, threshold)
            if finding is not None:
                findings.append(finding)
        _collect(node, nodes, roles, below, threshold)
    if findings and any(r.reads is not None for r in roles):
        for node in reversed(nodes):
            _collect(node, nodes, roles, below, threshold)
    findings.reverse()
    return findings


def _origin(node: PlanNode, role: Role, threshold: float) -> Finding | None:
    own = node.own_log10_ratio
    if abs(own) < threshold - 1e-9 or abs(_charitable_own(node)) < threshold - 1e-9:
        return None
    if own > 0 and role.cut_inputs:
        node.derived.append("own underestimate not separable from its inputs': "
                            + "; ".join(role.cut_inputs.values()))
        return None
    node.origin = True
    return Finding(node=node.id, q_error=round(node.q_error, 6), own_q_error=round(10 ** abs(own), 6),
                   direction="under" if own > 0 else "over")


def _charitable_own(node: PlanNode) -> float:
    """The own error at the end of the rounding range nearest to the estimate."""
    span = node.extra.get("actual_total_range")
    if not span or node.est_total is None or node.own_log10_ratio is None:
        return node.own_log10_ratio or 0.0
    low, high = span
    nearest = min(max(node.est_total, low), high)
    shift = log_ratio(node.est_total, nearest) - (node.log10_ratio or 0.0)
    return node.own_log10_ratio + shift


def _collect(node: PlanNode, nodes: list[PlanNode], roles: list[Role], below: dict[int, list[int]],
             threshold: float) -> None:
    found: list[int] = []
    seen: set[int] = set()
    feeds = [c for c in node.children if c in below and nodes[c].is_input_edge]
    if roles[node.id].reads is not None and roles[node.id].reads in below:
        feeds.append(roles[node.id].reads)
    for child in feeds:
        for origin in below[child]:
            if origin not in seen:
                seen.add(origin)
                found.append(origin)
    if not found and not node.origin:
        return
    if node.origin:
        found = [node.id] + found
    below[node.id] = found[:50]
    if node.origin or node.log10_ratio is None or abs(node.log10_ratio) < threshold - 1e-9:
        return
    sign = 1 if node.log10_ratio > 0 else -1
    node.inherits_from = [o for o in found
                          if o != node.id and (nodes[o].own_log10_ratio or 0) * sign > 0]


def _fmt(value: float) -> str:
    return f"{value:,.0f}" if float(value).is_integer() else f"{value:,.2f}"
