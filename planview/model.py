"""The one normalised operator tree that every engine's parser produces.

Every engine module turns its output into `PlanNode`s; everything after parsing (the
check, the diagnosis, the widget, the exports) reads only these types. Engine-specific
keys that have no field here are kept, unchanged, in `PlanNode.extra`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import Enum
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .index import PlanIndex


class Relationship(str, Enum):
    """How a node feeds its parent. A `str`, so comparisons with the engine's spelling and the
    JSON report stay as they were."""

    OUTER = "Outer"
    INNER = "Inner"
    MEMBER = "Member"
    SUBQUERY = "Subquery"
    INIT_PLAN = "InitPlan"
    SUBPLAN = "SubPlan"

    def __str__(self) -> str:
        return self.value

    __format__ = str.__format__


RELATIONSHIPS = {r.value: r for r in Relationship}
NOT_INPUTS = frozenset({Relationship.INIT_PLAN, Relationship.SUBPLAN})
"""Relationships of nodes that do not feed rows to their parent (they are evaluated by it)."""



class FrozenEmpty(dict):
    """The one empty mapping every node without buffers or removed rows shares (a dict per
    node costs 64 bytes, on a million nodes 64 MB). Writing to it is a bug, so it raises:
    give the node its own dict first (``node.buffers = {}``)."""

    __slots__ = ()
    __hash__ = object.__hash__

    def _refuse(self, *args, **kwargs):
        raise TypeError("a node's shared empty mapping is read-only: assign a new dict first")

    __setitem__ = __delitem__ = setdefault = update = pop = popitem = clear = _refuse  # type: ignore[assignment]


NO_ENTRIES = FrozenEmpty()


@dataclass(slots=True)
class Condition:
    """One condition the engine printed on a node.

    `kind` is normalised (``filter``, ``index_cond``, ``recheck_cond``, ``join_filter``,
    ``hash_cond``, ``merge_cond``, ``one_time_filter``, ``tid_cond``, ``run_condition``, ...);
    `key` is the engine's own spelling (``"Index Cond"``).
    """

    kind: str
    text: str
    key: str = ""


@dataclass(slots=True)
class PlanNode:
    """One operator. Row counts are *per start*, exactly as the engine printed them.

    The check fills the fields from `est_total` on; a parser leaves them at their defaults.
    """

    id: int
    parent: int | None
    operator: str
    label: str
    children: list[int] = field(default_factory=list)
    statement: int = 0
    depth: int = 0
    # names
    relation: str | None = None
    alias: str | None = None
    schema: str | None = None
    index: str | None = None
    function_name: str | None = None
    cte_name: str | None = None
    subplan_name: str | None = None
    parent_relationship: Relationship | str | None = None
    """A `Relationship`; a spelling no engine documents is kept as printed."""
    # details of the operator
    join_type: str | None = None
    strategy: str | None = None
    partial_mode: str | None = None
    parallel_aware: bool | None = None
    operation: str | None = None
    scan_direction: str | None = None
    conditions: list[Condition] = field(default_factory=list)
    rows_removed: dict[str, float] = NO_ENTRIES  # shared until the reader gives the node its own
    # the numbers
    est_rows: float | None = None
    actual_rows: float | None = None
    starts: float | None = None
    executed: bool | None = None
    startup_cost: float | None = None
    total_cost: float | None = None
    width: float | None = None
    actual_startup_ms: float | None = None
    actual_total_ms: float | None = None
    workers_planned: int | None = None
    workers_launched: int | None = None
    buffers: dict[str, float] = NO_ENTRIES  # shared until the reader gives the node its own
    workers: list[dict[str, Any]] | tuple = ()  # a list once the reader finds a worker
    extra: dict[str, Any] = field(default_factory=dict)
    # filled by planview.check
    est_total: float | None = None
    actual_total: float | None = None
    q_error: float | None = None
    log10_ratio: float | None = None
    own_log10_ratio: float | None = None
    judged: bool = False
    not_judged_reason: str | None = None
    origin: bool = False
    inherits_from: list[int] | tuple = ()  # the check assigns a list
    own_rule: str | None = None
    derived: list[str] = field(default_factory=list)
    derivation: dict | None = None
    """A live session's re-derivation of the estimate from the statistics (planview/live)."""
    # the engine's facts for the diagnosis, copied by planview.check from the engine's role
    parallel_divisor: float | None = None
    """The estimate is per parallel process, with this divisor (None: it covers the whole)."""
    reads_whole_relation: bool = False
    rows_discarded: float = 0.0
    """Rows per start the node read and discarded (by a filter or a recheck)."""
    conditions_from: tuple[int, ...] = ()
    """Nodes below whose conditions restrict this node's rows (an index bitmap under a scan)."""
    group_keys: tuple[str, ...] = ()
    unprinted_condition: str | None = None
    """A condition the engine applied here but did not print (an output format that prints
    none): ``filter`` (rows filtered by a WHERE part), ``key_lookup`` (an equality lookup on
    the index `index` by each outer row's value), ``join_filter`` (a join condition)."""

    def condition_texts(self, *kinds: str) -> list[str]:
        """The texts of this node's conditions of the given kinds (all kinds if none given)."""
        return [c.text for c in self.conditions if not kinds or c.kind in kinds]

    @property
    def is_input_edge(self) -> bool:
        """True when this node feeds rows to its parent (not an InitPlan or SubPlan)."""
        return self.parent_relationship not in NOT_INPUTS


@dataclass(slots=True)
class Statement:
    """One statement of a paste: its root node and the statement-level figures."""

    root: int
    planning_ms: float | None = None
    execution_ms: float | None = None
    query_text: str | None = None
    triggers: list[dict[str, Any]] = field(default_factory=list)
    settings: dict[str, Any] = field(default_factory=dict)
    extra: dict[str, Any] = field(default_factory=dict)


@dataclass
class ParsedPlan:
    """What an engine module returns: nodes in pre-order (a forest, one tree a statement)."""

    engine: str
    format: str
    nodes: list[PlanNode]
    statements: list[Statement]
    engine_version: str | None = None
    has_actuals: bool = True
    notes: list[str] = field(default_factory=list)
    index: PlanIndex | None = field(default=None, repr=False, compare=False)
    """Built once by the check (`planview.index.index_of`); every later pass reads it."""
    engine_facts: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)
    """What an engine's hooks work out once for the whole plan (DuckDB: which join pushed
    each run-time filter), so that no hook walks the tree per node."""


@dataclass(slots=True)
class Finding:
    """One origin of a misestimate: where it was introduced, and what probably caused it.

    The check creates one per origin with the numbers; the diagnosis fills `cause`, `also`,
    `confidence`, `evidence`, `fix`, `caution` and `impact`.
    """

    node: int
    q_error: float
    own_q_error: float
    direction: str
    cause: str | None = None
    also: list[str] = field(default_factory=list)
    confidence: float | None = None
    confidence_reason: str | None = None
    evidence: dict[str, Any] = field(default_factory=dict)
    summary: str = ""
    fix: str | None = None
    caution: str | None = None
    impact: dict[str, Any] = field(default_factory=dict)
    rank: int = 0
    measured: dict[str, Any] | None = None
    """A live session's measurement of the cause (planview/live): fields and a sentence."""
    proof: dict[str, Any] | None = None
    """A live session's proven fix: the estimate with the fix applied in a rolled-back transaction."""
