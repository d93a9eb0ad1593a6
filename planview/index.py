"""One index over a plan's tree, built once, so that no pass walks the tree per node or per finding.

A node's subtree is a contiguous run of pre-order positions, so "is X below Y" is a range
test and "which of these nodes lie below Y" is a bisect over their sorted positions. The
index is built in one iterative pass over the pre-order list (readers emit nodes in
pre-order; a list that is not is put in pre-order by one explicit-stack walk instead).
Summaries of what lies below each node are filled bottom-up once, the first time a pass
asks for them. Parent and depth stay on the nodes, where the readers put them.
"""

from __future__ import annotations

from bisect import bisect_left
from collections.abc import Callable, Hashable, Iterable, Iterator

from .model import ParsedPlan, PlanNode

_MANY = object()
"""A subtree summary's value when more than one relation lies below."""


def relation_name(node: PlanNode) -> str | None:
    """The relation a node reads, schema-qualified when the plan names the schema."""
    if not node.relation:
        return None
    return f"{node.schema}.{node.relation}" if node.schema else node.relation


class PlanIndex:
    """Subtree ranges and lookups over one plan's nodes (a forest: one tree a statement)."""

    __slots__ = ("nodes", "order", "position", "end", "_sole_relation", "_first_by")

    def __init__(self, nodes: list[PlanNode]):
        self.nodes = nodes
        count = len(nodes)
        end = [0] * count
        in_preorder = all(node.id == i for i, node in enumerate(nodes))
        if in_preorder:
            # bottom-up: a node's subtree ends where its last child's does, and each child
            # must start where the one before it ended (else the list is not in pre-order)
            for i in range(count - 1, -1, -1):
                expect = i + 1
                for child in nodes[i].children:
                    if child != expect:
                        in_preorder = False
                        break
                    expect = end[child]
                if not in_preorder:
                    break
                end[i] = expect
        if in_preorder:
            self.order: list[int] | range = range(count)
            self.position: list[int] | range = range(count)
        else:
            self.order, self.position, end = _preorder(nodes)
        self.end = end
        self._sole_relation: list | None = None
        self._first_by: dict[Callable, dict] = {}

    # -- traversal ------------------------------------------------------------------------
    def walk(self, top: int | None = None) -> Iterator[PlanNode]:
        """Every node in pre-order, or those of `top`'s subtree (itself first)."""
        nodes = self.nodes
        if top is None:
            return (nodes[i] for i in self.order)
        start = self.position[top]
        return (nodes[i] for i in self.order[start:self.end[start]])

    def subtree(self, node_id: int) -> list[PlanNode]:
        """The node and everything below it, in pre-order."""
        return list(self.walk(node_id))

    def contains(self, top: int, node_id: int) -> bool:
        """True when `node_id` is `top` or lies below it: one range test."""
        start = self.position[top]
        return start <= self.position[node_id] < self.end[start]

    def ancestors(self, node_id: int) -> list[int]:
        """The ids above a node, nearest first, by its parent links (O(depth))."""
        nodes = self.nodes
        out: list[int] = []
        parent = nodes[node_id].parent
        while parent is not None and len(out) < len(nodes):
            out.append(parent)
            parent = nodes[parent].parent
        return out

    def below(self, top: int, marked: NodeSet) -> list[int]:
        """The ids of `marked` that lie strictly below `top`, in pre-order (a bisect)."""
        start = self.position[top]
        positions = marked.positions
        low = bisect_left(positions, start + 1)
        high = bisect_left(positions, self.end[start])
        order = self.order
        return [order[p] for p in positions[low:high]]

    def node_set(self, ids: Iterable[int]) -> NodeSet:
        """A set of nodes (the origins, say) ready for `below` range queries."""
        position = self.position
        return NodeSet(sorted(position[i] for i in ids))

    # -- what lies below ------------------------------------------------------------------
    def relations_below(self, node_id: int) -> set[str]:
        """The relations read strictly below a node."""
        return {name for node in self.walk(node_id) if node.id != node_id
                and (name := relation_name(node)) is not None}

    def sole_relation_below(self, node_id: int) -> str | None:
        """The one relation read strictly below a node, or None (none, or more than one).

        Summaries are filled bottom-up for every node on the first call: O(n) once."""
        if self._sole_relation is None:
            self._sole_relation = self._summarise_relations()
        found = self._sole_relation[node_id]
        return None if found is _MANY else found

    def _summarise_relations(self) -> list:
        nodes = self.nodes
        below: list = [None] * len(nodes)
        for pos in range(len(nodes) - 1, -1, -1):
            node = nodes[self.order[pos]]
            found = None
            for child_id in node.children:
                for name in (relation_name(nodes[child_id]), below[child_id]):
                    if name is None or name == found:
                        continue
                    if found is None and name is not _MANY:
                        found = name
                    else:
                        found = _MANY
                        break
                if found is _MANY:
                    break
            below[node.id] = found
        return below

    # -- lookups --------------------------------------------------------------------------
    def first_by(self, key: Callable[[PlanNode], Hashable | None]) -> dict[Hashable, int]:
        """The first node in pre-order for each value of `key` (None: left out).

        Built once per key function, so a lookup per node (a CTE scan finding its CTE) costs
        one dictionary access, not a scan of all nodes."""
        table = self._first_by.get(key)
        if table is None:
            table = {}
            for node in self.walk():
                value = key(node)
                if value is not None and value not in table:
                    table[value] = node.id
            self._first_by[key] = table
        return table


class NodeSet:
    """Nodes as sorted pre-order positions, for `PlanIndex.below`."""

    __slots__ = ("positions",)

    def __init__(self, positions: list[int]):
        self.positions = positions


def _preorder(nodes: list[PlanNode]) -> tuple[list[int], list[int], list[int]]:
    """Pre-order ids, each id's position, and each position's subtree end (explicit stack)."""
    order: list[int] = []
    position = [-1] * len(nodes)
    todo = [node.id for node in reversed(nodes) if node.parent is None]
    while todo:
        current = todo.pop()
        if position[current] != -1:
            continue
        position[current] = len(order)
        order.append(current)
        todo.extend(reversed(nodes[current].children))
    for node in nodes:  # nodes no root reaches still get a place
        if position[node.id] == -1:
            position[node.id] = len(order)
            order.append(node.id)
    end = [0] * len(order)
    for pos in range(len(order) - 1, -1, -1):
        stop = pos + 1
        for child in nodes[order[pos]].children:
            child_pos = position[child]
            if child_pos > pos:
                stop = max(stop, end[child_pos])
        end[pos] = stop
    return order, position, end


def index_of(parsed: ParsedPlan) -> PlanIndex:
    """The plan's index, built on first use and kept on the parsed plan."""
    if parsed.index is None:
        parsed.index = PlanIndex(parsed.nodes)
    return parsed.index
