"""Time per operator: with its inputs (``total_ms``) and its own (``self_ms``), in all and per start.

Engines print time in two ways (each engine module's `TIME_PRINTED` and `time_of` say which):
a time per start that holds the inputs' time (PostgreSQL, MySQL), or an operator's own time
over all its starts (DuckDB, MariaDB's tables). Whichever is printed, the other is derived:

- printed with its inputs, per start: ``total = per start x starts / processes`` (processes:
  the concurrent processes that ran it, whose times overlap, one outside a parallel part);
  ``self = total - its inputs' totals`` (InitPlans and SubPlans count as inputs: they are
  evaluated by this node; a CTE is taken out of the scans that read it, not out of the node it
  is attached to);
- printed on its own, in all: ``self = printed``; ``total = self + its inputs' totals``.

Self time is never negative: where the inputs' times exceed the node's (overlapping processes,
rounding of per-start figures times many starts, an InitPlan used first by an input) it is
clamped at 0 and the node says so. Unknown stays unknown (None): no figure is guessed.

Two passes over the pre-order list from the plan index: totals bottom-up, own times top-down
(so a CTE, which comes before its readers, is shared out among them in order). No walk per node.
"""

from __future__ import annotations

import heapq
from dataclasses import dataclass, field

from .index import index_of
from .model import ParsedPlan

SLOWEST = 5
"""How many operators the slowest list holds."""

WITH_INPUTS_PER_START = "with_inputs_per_start"
WITH_INPUTS_IN_ALL = "with_inputs_in_all"
OWN_IN_ALL = "own_in_all"


@dataclass
class PlanTimes:
    """The figures per node id (None: unknown), and the notes that explain a clamp."""

    total_ms: list[float | None]
    self_ms: list[float | None]
    total_ms_per_start: list[float | None]
    self_ms_per_start: list[float | None]
    notes: dict[int, str] = field(default_factory=dict)
    processes: dict[int, float] = field(default_factory=dict)
    """Nodes that ran in more than one concurrent process, with that count."""

    def known(self) -> bool:
        return any(v is not None for v in self.total_ms)

    def slowest(self, count: int = SLOWEST) -> list[int]:
        """The node ids with the largest own time, largest first (ties: plan order)."""
        timed = [(ms, -i) for i, ms in enumerate(self.self_ms) if ms is not None and ms > 0]
        return [-i for _, i in heapq.nlargest(count, timed)]

    def operator_ms(self, ids=None) -> float | None:
        """The sum of own times (of `ids`, or of every node): what the shares are of."""
        values = self.self_ms if ids is None else [self.self_ms[i] for i in ids]
        known = [v for v in values if v is not None]
        return sum(known) if known else None


def time_of(engine, node, nodes) -> tuple[str, float] | None:
    """What the engine printed for a node: (kind, ms), None when it printed no time."""
    hook = getattr(engine, "time_of", None)
    return hook(node, nodes) if hook is not None else None


def time_plan(parsed: ParsedPlan, engine) -> PlanTimes:
    """Every node's time, by its engine's rule (see the module docstring)."""
    nodes = parsed.nodes
    count = len(nodes)
    index = index_of(parsed)
    order = [node.id for node in index.walk()]
    total: list[float | None] = [None] * count
    own: list[float | None] = [None] * count
    printed: list[tuple[str, float] | None] = [None] * count
    procs = [1.0] * count
    times = PlanTimes(total, own, [None] * count, [None] * count)
    concurrent = getattr(engine, "time_processes", None)
    reads = getattr(engine, "time_reads", None)
    # top-down: the processes each node ran in; which subtrees are run by their readers
    read_by: dict[int, list[int]] = {}
    gate = list(range(count))
    """The node that starts each node's parallel part (a Gather), or the node itself."""
    wanted: list[tuple[int, int]] = []
    for node_id in order:
        node = nodes[node_id]
        if node.parent is not None:
            parent = nodes[node.parent]
            procs[node_id] = procs[parent.id] * ((concurrent(parent, nodes) if concurrent else None) or 1.0)
            gate[node_id] = parent.id if procs[node_id] > procs[parent.id] else gate[parent.id]
        if procs[node_id] > 1:
            times.processes[node_id] = procs[node_id]
        printed[node_id] = time_of(engine, node, nodes) if node.executed is not False else None
        wanted += ((target, node_id) for target in (reads(node, nodes, parsed) if reads is not None else ()))
    for target, node_id in wanted:
        # a value needed inside a parallel part is computed before it, by the node that starts it
        reader = gate[node_id] if procs[node_id] > procs[target] else node_id
        if reader != target and not index.contains(target, reader):
            readers = read_by.setdefault(target, [])
            if reader not in readers:
                readers.append(reader)
    # bottom-up: totals
    for node_id in reversed(order):
        node = nodes[node_id]
        if node.executed is False:
            total[node_id] = own[node_id] = 0.0
            continue
        found = printed[node_id]
        if found is None:
            continue
        kind, ms = found
        if kind == WITH_INPUTS_PER_START:
            total[node_id] = ms * (node.starts if node.starts is not None else 1.0) / procs[node_id]
        elif kind == WITH_INPUTS_IN_ALL:
            total[node_id] = ms
        else:
            below = _inputs_total(node, total, read_by)
            own[node_id] = ms
            total[node_id] = None if below is None else ms + below
    # top-down: own times where the total was printed, the CTEs shared out among their readers
    left = {cte: total[cte] for cte in read_by}
    reads_of: dict[int, list[int]] = {}
    for cte, readers in read_by.items():
        for reader in readers:
            reads_of.setdefault(reader, []).append(cte)
    for node_id in order:
        node = nodes[node_id]
        found = printed[node_id]
        if found is None or found[0] == OWN_IN_ALL or node.executed is False:
            continue
        below = _inputs_total(node, total, read_by)
        if total[node_id] is None or below is None:
            continue
        rest = total[node_id] - below
        for cte in reads_of.get(node_id, ()):
            if left.get(cte):
                taken = min(max(rest, 0.0), left[cte])
                left[cte] -= taken
                rest -= taken
        if rest < 0:
            own[node_id] = 0.0
            times.notes[node_id] = _clamp_reason(node, nodes, procs, rest, node_id in reads_of)
        else:
            own[node_id] = rest
    # per start: one process's share of the starts
    for node_id in order:
        starts = nodes[node_id].starts
        if not starts:
            continue
        share = starts / procs[node_id]
        if total[node_id] is not None:
            times.total_ms_per_start[node_id] = total[node_id] / share
        if own[node_id] is not None:
            times.self_ms_per_start[node_id] = own[node_id] / share
    return times


def _inputs_total(node, total, read_by) -> float | None:
    """The summed totals of the children whose time this node's holds (None: one unknown)."""
    found = 0.0
    for child in node.children:
        if child in read_by:
            continue  # a CTE or InitPlan: run, and counted, by the nodes that read it
        value = total[child]
        if value is None:
            return None
        found += value
    return found


def _clamp_reason(node, nodes, procs, rest, reads_cte: bool) -> str:
    over = f"its inputs' time exceeds its own by {-rest:,.3f} ms, so its own time is shown as 0"
    kids = [nodes[c] for c in node.children]
    if any(procs[c.id] > procs[node.id] for c in kids) or procs[node.id] > 1:
        return f"{over}: its inputs ran in parallel processes whose times overlap"
    if any(str(c.parent_relationship) == "InitPlan" for c in kids):
        return f"{over}: an InitPlan's time counts where its value is used, which may be an input of this node"
    if reads_cte:
        return f"{over}: the CTE it reads is counted once, in the scans that read it"
    return (f"{over}: the engine rounds per-start times, and over many starts the rounding adds up "
            "(or its inputs' runs overlapped its own)")
