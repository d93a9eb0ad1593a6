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
      inputs it stopped are not judged;
    - `limit_count`: a limit's row count per start, when the plan prints it (None: derived from
      the figures: a limit emits at most its count, so the count is at least its estimate and
      its actual rows);
    - `emits`: an input whose rows this node emits without counting them (DuckDB's CTE node
      returns what the query after its CTE returns): its consumer is judged against that input;
    - `exact_inputs`: inputs whose count before a cut is known to be their estimate (a scan of
      a whole table without a filter of its own, cut only by this node's run-time filter): they
      carry no error into this node, whatever the cut left of them;
    - `shared_error`: filled by the check, not the engine: the log ratio an error common to
      both inputs of a join adds to each (both read one CTE), counted once rather than twice.

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
    limit_count: float | None = None
    emits: int | None = None
    exact_inputs: tuple[int, ...] = ()
    shared_error: float = 0.0
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
        limit_met = role.limit and node.executed and node.est_total is not None \
            and node.actual_total is not None and node.actual_total >= node.est_total
        inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge] \
            if limit_met or (reason and not role.blocking) else []
        if limit_met:
            for child in inputs:
                cut.setdefault(child.id, "stopped early: the limit above had all the rows it needed")
        if reason and not role.blocking:
            for child in inputs:
                if child.id not in role.complete_inputs:
                    cut.setdefault(child.id, reason)
        for child_id, why in (role.stops_inputs or {}).items():
            cut.setdefault(child_id, why)
        if role.overestimate_unjudged:
            _merge_inputs(node, nodes, roles, role, cut)
    visited: set[int] = set()
    for node, role in zip(nodes, roles):
        if role.reads is not None and node.executed and node.not_judged_reason \
                and node.not_judged_reason.startswith("stopped early"):
            _cut_subtree(nodes, roles, nodes[role.reads],
                         "stopped early: the reader of this CTE stopped before its end", visited)


def _merge_inputs(node: PlanNode, nodes: list[PlanNode], roles: list[Role], role: Role,
                  cut: dict[int, str]) -> None:
    """A merge join stops reading one input once the other runs out, so an input that
    returned fewer rows than estimated may have stopped early, unless the figures prove it
    ran to its end. The join counts such an input with its printed figures, a lower bound,
    as it counts an input cut while running."""
    for child_id in role.overestimate_unjudged:
        child = nodes[child_id]
        if child.est_total is None or child.actual_total is None \
                or child.actual_total >= child.est_total or _ran_to_end(child, nodes, roles):
            continue
        cut.setdefault(child_id, "may have stopped early: a merge join stops reading one "
                                 "input once the other runs out")
        role.cut_inputs = dict(role.cut_inputs or {})
        role.cut_inputs[child_id] = (f"its input #{child_id} may have stopped early (a merge join "
                                     "stops reading one input once the other runs out), so that "
                                     "input's true count is at least what it shows")


def _ran_to_end(top: PlanNode, nodes: list[PlanNode], roles: list[Role]) -> bool:
    """True when a pass-through chain emitted every row of a blocking node below it that had
    read all its input (a Sort emits what it sorted): then nothing stopped it early."""
    current = top
    for _ in range(len(nodes)):
        inputs = [c for c in current.children if nodes[c].is_input_edge]
        if len(inputs) != 1 or roles[current.id].rule != "pass" or current.rows_removed:
            return False
        below = nodes[inputs[0]]
        if roles[current.id].blocking:
            return below.actual_total is not None and current.actual_total == below.actual_total \
                == top.actual_total
        current = below
    return False


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


def _carried(child: PlanNode, role: Role) -> float:
    """What an input carries in; an input cut while running counts with its printed figures,
    one whose uncut count is its estimate carries nothing."""
    if child.id in role.exact_inputs:
        return 0.0
    cut = role.cut_inputs
    if cut and child.id in cut and child.log10_ratio is not None:
        return child.log10_ratio
    return _judged_lr(child)


def _own_as_is(node: PlanNode, inputs: list[PlanNode], role: Role) -> float:
    """Its own log ratio (scans, leaves, aggregates without grouping)."""
    return node.log10_ratio


def _own_minus_first(node: PlanNode, inputs: list[PlanNode], role: Role) -> float:
    """Minus its input's log ratio: the one input of Hash, Sort, Materialize, Memoize, Gather...;
    the index bitmap under a heap scan; the outer input of a semi or anti join; the CTE a CTE
    scan reads."""
    return node.log10_ratio - _carried(inputs[0], role)


def _own_minus_last(node: PlanNode, inputs: list[PlanNode], role: Role) -> float:
    """Minus the inner input's log ratio (right semi and right anti joins)."""
    return node.log10_ratio - _carried(inputs[-1], role)


def _own_of_limit(node: PlanNode, inputs: list[PlanNode], role: Role) -> float:
    """Against min(count, input) for both the estimate and the actual rows: a limit emits
    what its input gave, up to its count, so only its own arithmetic can be off. The input
    counts with its printed figures even when the limit stopped it (that is the point)."""
    child = inputs[0]
    if child.est_total is None or child.actual_total is None:
        return node.log10_ratio
    if role.limit_count is not None:
        count = role.limit_count * (node.starts or 1)
    else:
        count = max(node.est_total or 0.0, node.actual_total or 0.0)
    return node.log10_ratio - log_ratio(min(count, child.est_total), min(count, child.actual_total))


GROUPS_CAPPED_AT = 0.5
"""A group estimate at least this share of its input's estimate is taken as capped by, and
scaling with, that input. Below it the count came from the keys' distinct values, which a right
input estimate would not have changed unless the input really held fewer rows than that count."""


ROUNDING_ROWS = 1.0
"""Engines print whole rows: half of an odd estimate (1,573) prints rounded down (786), which is
still half of it, not a count from the keys' distinct values."""


def _own_of_group(node: PlanNode, inputs: list[PlanNode], role: Role) -> float:
    """A group count far below its input estimate came from the keys' distinct values: its own
    error is against that count, or against the input's real rows where they are fewer. A
    count capped by (or scaling with) its input estimate lies between its own log ratio and
    that ratio minus its input's: the end nearest no error, and none when they lie either side
    of it, since its own error cannot then be told from its input's."""
    lr = node.log10_ratio
    child = inputs[0]
    if node.est_total is not None and child.est_total is not None and child.actual_total is not None \
            and node.est_total < GROUPS_CAPPED_AT * child.est_total - ROUNDING_ROWS and child.judged:
        return log_ratio(min(node.est_total, max(child.actual_total, 1.0)), node.actual_total)
    carried = _carried(child, role)
    scaled = lr - carried
    if lr * scaled <= 0:
        if abs(lr) >= 0.3 and abs(carried) >= 0.3:
            node.derived.append(
                f"group count follows its input: its input's error (x{10 ** abs(carried):,.1f} "
                f"{_direction(carried)}) explains its own (x{10 ** abs(lr):,.1f} {_direction(lr)}) "
                "as well as none at all, so no error of its own is counted")
        return 0.0
    return min((lr, scaled), key=abs)


def _own_of_join(node: PlanNode, inputs: list[PlanNode], role: Role) -> float:
    """Minus the log ratios of both inputs (outer joins: of the preserved input alone when
    that explains more, as they emit the preserved rows anyway)."""
    lr = node.log10_ratio
    outer = _carried(inputs[0], role)
    inner = _carried(inputs[1], role) if len(inputs) > 1 else 0.0
    candidates = [lr - outer - inner + role.shared_error]
    if role.preserved in ("outer", "both"):
        candidates.append(lr - outer)
    if role.preserved in ("inner", "both"):
        candidates.append(lr - inner)
    return min(candidates, key=abs)


def _own_of_sum(node: PlanNode, inputs: list[PlanNode], role: Role) -> float:
    """Against the sums of its inputs' estimated and actual rows (a concatenation of inputs)."""
    counted = [c for c in inputs if c.judged]
    if not counted:
        return node.log10_ratio
    est = sum(c.est_total or 0.0 for c in counted)
    act = sum(c.actual_total or 0.0 for c in counted)
    return node.log10_ratio - log_ratio(est, act)


OwnErrorRule = Callable[[PlanNode, list[PlanNode], Role], float]

RULES: dict[str, OwnErrorRule] = {
    "source": _own_as_is,
    "group": _own_of_group,
    "pass": _own_minus_first,
    "limit": _own_of_limit,
    "join": _own_of_join,
    "semi_outer": _own_minus_first,
    "semi_inner": _own_minus_last,
    "bitmap_heap": _own_minus_first,
    "sum": _own_of_sum,
    "cte": _own_minus_first,
    "last": _own_minus_last,
    # not judged: the engine does not count this node's rows (a combination of index bitmaps)
    "uncounted": _own_as_is,
}
"""How each input rule separates a node's own error from what its inputs carry in: the rule's
name (what an engine's table assigns) to the function that applies it. Each function gets the
node (its log ratio and totals set), its inputs (never empty: a node without inputs keeps its
own log ratio) and its `Role`."""


def _direction(log10: float) -> str:
    return "under" if log10 > 0 else "over"


def _inputs(node: PlanNode, role: Role, nodes: list[PlanNode], roles: list[Role]) -> list[PlanNode]:
    """The nodes whose rows feed this one: a CTE scan's CTE; through a node that emits an
    input's rows uncounted, that input."""
    if node.own_rule == "cte":  # a CTE scan's input is the CTE it reads, not a child
        return [nodes[role.reads]] if role.reads is not None else []
    found = []
    for c in node.children:
        if nodes[c].is_input_edge:
            emits = roles[c].emits
            found.append(nodes[emits] if emits is not None else nodes[c])
    return found


def _own_error(node: PlanNode, role: Role, nodes: list[PlanNode], roles: list[Role]) -> float | None:
    """Its own log ratio by its rule, or None when the one-row floors make it unmeasurable
    (then it is marked not judged, with the reason)."""
    apply = RULES.get(node.own_rule or "", _own_as_is)
    if apply is _own_as_is:
        return node.log10_ratio
    inputs = _inputs(node, role, nodes, roles)
    if not inputs:
        return node.log10_ratio
    own = apply(node, inputs, role)
    reason = _unmeasurable(node, inputs, own)
    if reason:
        node.judged = False
        node.not_judged_reason = reason
        return None
    return own


def _unmeasurable(node: PlanNode, inputs: list[PlanNode], own: float) -> str | None:
    """Why the error added here cannot be read from the figures, if it cannot: q-errors floor
    both counts at one row, so taking an input's error out of a node that returned nothing,
    or out of one whose estimate and actual both sit on the floor, measures the floors."""
    if abs(own - node.log10_ratio) < 1e-9:
        return None
    if node.actual_total == 0:
        empty = next((c for c in inputs if c.actual_total == 0), None)
        if empty is not None:
            return (f"not measurable: its input #{empty.id} returned no rows, so it could return "
                    "none whatever its own estimate")
        if own > 0:
            return ("not measurable: it returned no rows, so its own error can only be an "
                    "overestimate; the underestimate its inputs' figures leave is an artefact of "
                    "the one-row floor")
    if (node.est_total or 0.0) <= 1.0 and (node.actual_total or 0.0) <= 1.0 and abs(own) > 1e-9:
        return ("not measurable: its estimate and its actual rows both sit on the one-row floor, "
                "so what its inputs carry in cannot be taken out")
    return None


def _own_errors_and_origins(nodes: list[PlanNode], roles: list[Role], threshold: float) -> list[Finding]:
    """One bottom-up pass: each judged node's own error, whether it is an origin, and the
    origins below that explain the error of a node that is not one (`inherits_from`).

    A node that re-reads another (a CTE scan) may come after what it reads in pre-order, so
    a second pass picks those links up."""
    findings: list[Finding] = []
    below: dict[int, list[int]] = {}
    reads_below: dict[int, frozenset[int]] | None = {} if any(r.reads is not None for r in roles) else None
    for node in reversed(nodes):
        role = roles[node.id]
        if reads_below is not None:
            _shared_reads(node, role, nodes, reads_below)
        if node.judged and node.log10_ratio is not None:
            node.own_log10_ratio = _own_error(node, role, nodes, roles)
            if node.own_log10_ratio is not None and not abs(node.own_log10_ratio) <= MAX_LOG10_ERROR:
                node.own_log10_ratio = None  # figures near the count limit: no error can be told
                node.derived.append("own error not computed: its figures and its inputs' are too "
                                    "far apart to compare")
            finding = _origin(node, role, threshold) if node.own_log10_ratio is not None else None
            if finding is not None:
                findings.append(finding)
        _collect(node, nodes, roles, below, threshold)
    if findings and any(r.reads is not None for r in roles):
        for node in reversed(nodes):
            _collect(node, nodes, roles, below, threshold)
    findings.reverse()
    return findings


MAX_SHARED_READS = 16
"""The re-read nodes (CTEs) a node's summary keeps; past it the summary is cut (a plan with
more CTEs under one join than this is not one a reader needs this refinement for)."""


def _shared_reads(node: PlanNode, role: Role, nodes: list[PlanNode],
                  reads_below: dict[int, frozenset[int]]) -> None:
    """Which re-read nodes (a CTE's output) lie below a node, bottom-up; for a join whose two
    inputs both read one, that node's error reaches the join through both inputs although it
    is one error: `shared_error` gives it back once (taken out twice, it would make the join
    look like the opposite error of its own)."""
    found: set[int] = set()
    for child in node.children:
        found |= reads_below.get(child, frozenset())
    if role.reads is not None:
        found.add(role.reads)
    if found:
        reads_below[node.id] = frozenset(sorted(found)[:MAX_SHARED_READS])
    if role.rule != "join" or not node.judged:
        return
    inputs = [c for c in node.children if nodes[c].is_input_edge]
    if len(inputs) != 2:
        return
    common = reads_below.get(inputs[0], frozenset()) & reads_below.get(inputs[1], frozenset())
    if not common:
        return
    carried = [_carried(nodes[c], role) for c in inputs]
    best, best_id = 0.0, None
    for shared_id in common:
        error = _judged_lr(nodes[shared_id])
        if error * carried[0] > 0 and error * carried[1] > 0:
            capped = math.copysign(min(abs(error), abs(carried[0]), abs(carried[1])), error)
            if abs(capped) > abs(best):
                best, best_id = capped, shared_id
    if abs(best) < 1e-9:
        return
    role.shared_error = best
    node.derived.append(
        f"both inputs read #{best_id} (a CTE), so its error (x{10 ** abs(best):,.1f} "
        f"{_direction(best)}) reaches this join through each of them; it is taken out once")


MAX_LOG10_ERROR = 300.0
"""The largest own error (as a power of ten) the check reports; beyond it, or NaN, the figures
are damage, and a q-error would overflow a float."""


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
    feeds = [c for c in node.children if c in below and nodes[c].is_input_edge]
    if roles[node.id].reads is not None and roles[node.id].reads in below:
        feeds.append(roles[node.id].reads)
    if not feeds and not node.origin:
        return
    found: list[int] = []
    seen: set[int] = set()
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
