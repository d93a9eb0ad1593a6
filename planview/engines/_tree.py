"""What every reader shares: one number validator, one depth check, one tree builder.

Readers differ in how they find a node's figures in their format; what a figure may be (a
finite count of at least 0, unless it is a cost) and how a node joins the tree do not.
"""

from __future__ import annotations

import math
from typing import Any

from ..errors import PlanParseError
from ..model import RELATIONSHIPS, PlanNode, Relationship
from ..source import MAX_DEPTH
from ._dispatch import MAX_COUNT


def read_number(value: Any, *, engine: str, fmt: str, key: str | None = None, line: int | None = None,
           signed: bool = False, thousands: bool = False) -> float | None:
    """A figure as a float: None stays None; text is read as a number (``1,234`` too when
    `thousands`). A count is from 0 to `MAX_COUNT`; a cost (`signed`) any finite number.
    Anything else is refused naming the key or line."""
    if value is None:
        return None
    kind = value.__class__
    if kind is float or kind is int:
        result = float(value)
    elif isinstance(value, bool) or not isinstance(value, (int, float, str)):
        shown = repr(value) if isinstance(value, bool) else type(value).__name__
        raise PlanParseError(f"expected a number, got {shown}", key=key, line=line, engine=engine, fmt=fmt)
    elif isinstance(value, str):
        text = value.strip()
        try:
            result = float(text.replace(",", "") if thousands else text)
        except ValueError:
            raise PlanParseError(f"expected a number, got {value!r}", key=key, line=line, engine=engine,
                                 fmt=fmt) from None
    else:
        result = float(value)
    if signed:
        if not math.isfinite(result):
            raise PlanParseError(f"expected a finite number, got {value!r}", key=key, line=line,
                                 engine=engine, fmt=fmt)
    elif not 0 <= result <= MAX_COUNT:  # NaN fails this too
        raise PlanParseError(f"expected a count from 0 to 1e100, got {value!r}", key=key, line=line,
                             engine=engine, fmt=fmt)
    return result


def check_depth(depth: int, *, engine: str, fmt: str, key: str | None = None, line: int | None = None,
                limit: int = MAX_DEPTH, what: str = "plan") -> None:
    """Refuse a tree deeper than `limit` (every walk is iterative; the limit keeps output readable
    and the recursive JSON/XML/YAML decoders within theirs)."""
    if depth > limit:
        raise PlanParseError(f"{what} deeper than {limit} levels; refused", key=key, line=line,
                             engine=engine, fmt=fmt)


def append_node(nodes: list[PlanNode], node: PlanNode, parent: int | None) -> PlanNode:
    """Add a node in pre-order: its id, parent and depth, and its place among its parent's children."""
    node.id = len(nodes)
    node.parent = parent
    if parent is None:
        node.depth = 0
    else:
        above = nodes[parent]
        above.children.append(node.id)
        node.depth = above.depth + 1
    nodes.append(node)
    return node


def link_inputs(nodes: list[PlanNode], joins, members) -> None:
    """Name the inputs whose relationship the engine does not print: a join's first input is its
    outer side, the others its inner side; a union's inputs are its members.
    `joins(node)` and `members(node)` say which nodes are which."""
    for node in nodes:
        if not node.children:
            continue
        inputs = [c for c in node.children if nodes[c].parent_relationship is None]
        if joins(node):
            for i, child in enumerate(inputs):
                nodes[child].parent_relationship = Relationship.OUTER if i == 0 else Relationship.INNER
        elif members(node):
            for child in inputs:
                nodes[child].parent_relationship = Relationship.MEMBER


def typed_relationships(nodes: list[PlanNode]) -> None:
    """Each relationship as a `Relationship` (a spelling no engine documents is kept as printed)."""
    for node in nodes:
        value = node.parent_relationship
        if value is not None and value.__class__ is str:
            node.parent_relationship = RELATIONSHIPS.get(value, value)
