"""The base engine: one `role()` that reads each engine's tables.

An engine is a subclass that sets tables (which operators join, block, limit, read a whole
relation; which join types are semi joins; which side an outer join preserves) and overrides
a hook only where the engine does something no table can say (PostgreSQL's parallel divisor,
DuckDB's dynamic filter, MariaDB's stopped full scan). The check asks `role` once a node, in
pre-order; the diagnosis reads the typed facts the check copies from the role onto the node.

A module registers an engine by exposing ``ENGINE = MyEngine()`` with ``NAME``, ``FORMATS``,
``detect`` and ``parse`` beside it (see `planview.engines`).
"""

from __future__ import annotations

from collections.abc import Callable, Hashable, Mapping
from typing import Any

from ..check import Role
from ..index import index_of
from ..model import ParsedPlan, PlanNode

JOIN_RULES = ("join", "semi_outer", "semi_inner")

SuggestFix = Callable[..., "tuple[str, str] | None"]


class Engine:
    """An engine's tables, and the default reading of them."""

    NAME: str = ""
    FORMATS: tuple[str, ...] = ()
    SQL_DIALECT: str | None = None
    """sqlglot's name for the dialect its conditions are printed in."""

    INPUT_RULES: Mapping[str, str] = {}
    """Operator to input rule (a key of `planview.check.RULES`); unlisted operators pass their
    input through when they have one, else they are sources."""
    JOINS: frozenset[str] = frozenset()
    """Operators that join two inputs (their first input is the outer one)."""
    SEMI_JOINS: frozenset[str] = frozenset()
    """Join types that emit outer rows only (semi, anti): judged against the outer input."""
    RIGHT_SEMI_JOINS: frozenset[str] = frozenset()
    """Join types that emit inner rows only: judged against the inner input."""
    MARK_JOINS: frozenset[str] = frozenset()
    """Join types that emit every outer row with a flag saying whether it found a match (a
    filter on the flag above makes the semi or anti join)."""
    PRESERVED: Mapping[str, str] = {}
    """Join type to the input an outer join emits whole (``outer``, ``inner``, ``both``)."""
    COMPLETE_INNER: frozenset[str] = frozenset()
    """Join operators whose inner input runs to its end even when the join is cut short."""
    LOOP_JOINS: frozenset[str] = frozenset()
    """Join operators that, as semi or anti joins, read their inner input up to the first match."""
    STOP_INNER_REASON = "stopped early: a {join_type} join reads its inner input only up to the first match"
    MERGE_JOINS: frozenset[str] = frozenset()
    """Join operators that stop reading one input once the other runs out."""
    BLOCKING: frozenset[str] = frozenset()
    """Operators that read all their input before they emit a row."""
    BLOCKING_STRATEGIES: Mapping[str, frozenset[str]] = {}
    """Operators that block only under some strategies (hashed grouping)."""
    LIMITS: frozenset[str] = frozenset()
    """Operators that stop asking for rows once they have enough."""
    WHOLE_RELATION_SCANS: frozenset[str] = frozenset()
    """Scans that read every row of their relation, so their rows read are their selectivity's base."""
    ROWS_DISCARDED_KEYS: tuple[str, ...] = ("Filter",)
    """Keys of `PlanNode.rows_removed` that count rows a node read and then discarded."""
    CONDITION_PROVIDERS: frozenset[str] = frozenset()
    """Operators whose conditions restrict their parent's rows (an index bitmap under a heap scan)."""
    CTE_SCANS: frozenset[str] | None = frozenset()
    """Operators that may re-read a CTE (None: any, when the engine marks them otherwise)."""
    GROUP_KEYS: str | None = None
    """The `PlanNode.extra` key holding a grouping node's keys."""
    DEFAULT_SELECTIVITIES: Mapping[str, float] = {}
    """The engine's built-in estimates for clauses without statistics, by the engine's name."""
    DEFAULT_NUM_DISTINCT: tuple[str, float] | None = None
    """The engine's name for, and number of, the groups it assumes when a grouping key has no
    statistics."""
    STATISTICS_KEPT: frozenset[str] = frozenset({"histogram", "most_common_values", "distinct", "min_max"})
    """What the engine keeps per column, so that evidence names only statistics it has."""
    AND_FILTERS: tuple[str, str] | None = None
    """How the engine combines ANDed filters on one table, when not as a product of their
    selectivities: (``minimum``, where the engine's source says so)."""
    NON_CONSTANT_DEFAULTS: Mapping[str, str] = {}
    """Comparison kind (``inequality``, ``equality_same_table``) with something that is not a
    constant, to the name in `DEFAULT_SELECTIVITIES` of the fixed estimate the engine uses."""
    NON_CONSTANT_SOURCE: str | None = None
    """Where the engine's source says so."""
    NON_CONSTANT_GUESSES: Mapping[str, str] = {}
    """Comparison kind (``equality_subplan``) with a value that has no statistics, to how the
    engine guesses its selectivity when the guess is not one fixed number (with its source)."""
    SUBQUERY_MARK: str | None = None
    """How the engine prints a sub-query's result inside a condition, when not as PostgreSQL
    does (a regular expression; read as a sub-plan's value)."""
    JOIN_KEYS_COMBINED: tuple[str, str] | None = None
    """How the engine combines several equalities between a join's inputs, when not as a
    product of their selectivities: (``largest_domain``, where the engine's source says so)."""
    RECURSIVE_GUESSES: Mapping[str, tuple[float, str]] = {}
    """Operators of a recursive CTE whose estimate is a fixed guess of the planner's: operator
    to (factor, what the factor multiplies and where the engine's source says so)."""

    def __init__(self) -> None:
        self._operators: dict[str, tuple] = {}
        """What the tables say of each operator name seen, read once per name."""

    # -- reading the tables ---------------------------------------------------------------
    def listed(self, operator: str, table: Mapping[str, Any] | frozenset[str]) -> bool:
        """Whether a table names this operator (engines that print an operator with its object
        appended override this to match by prefix)."""
        return operator in table

    def lookup(self, operator: str, table: Mapping[str, Any]) -> Any:
        return table.get(operator)

    def input_rule(self, node: PlanNode, nodes: list[PlanNode], inputs: list[int]) -> str:
        rule = self.lookup(node.operator, self.INPUT_RULES)
        if rule is None:
            rule = "pass" if node.children else "source"
        if rule == "join" and node.join_type in self.SEMI_JOINS:
            return "semi_outer"
        if rule == "join" and node.join_type in self.RIGHT_SEMI_JOINS:
            return "semi_inner"
        return rule

    def inner_input(self, node: PlanNode, nodes: list[PlanNode], inputs: list[int]) -> int | None:
        """A join's inner input: its second input."""
        return inputs[1] if len(inputs) > 1 else None

    def completes_inner(self, node: PlanNode, inner: PlanNode) -> bool:
        return self.listed(node.operator, self.COMPLETE_INNER)

    def inner_stop_reason(self, node: PlanNode, inner: PlanNode) -> str | None:
        """Why a join reads its inner input only in part, if it does."""
        if node.join_type in self.SEMI_JOINS and self.listed(node.operator, self.LOOP_JOINS):
            return self.STOP_INNER_REASON.format(join_type=node.join_type.lower())
        return None

    # -- hooks an engine overrides where no table can say it ------------------------------
    def parallel_divisor(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan) -> float | None:
        """The divisor of a per-process estimate, None when the estimate covers the whole."""
        return None

    def cte_reference(self, node: PlanNode) -> Hashable | None:
        """The key of the CTE a CTE scan reads (None: not a CTE scan)."""
        return None

    def cte_definition(self, node: PlanNode) -> Hashable | None:
        """The key a CTE is known by (None: not a CTE); matched with `cte_reference`."""
        return None

    def cte_output(self, cte: PlanNode, nodes: list[PlanNode]) -> int | None:
        """The node whose rows a CTE scan re-reads, given the CTE."""
        return cte.id

    def cte_read(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan) -> int | None:
        reference = self.cte_reference(node)
        if reference is None:
            return None
        cte = index_of(parsed).first_by(self.cte_definition).get(reference)
        return None if cte is None else self.cte_output(nodes[cte], nodes)

    def limit_count(self, node: PlanNode) -> float | None:
        """A limit's row count per start, where the engine prints it (None: not printed; the
        check then takes the least count its figures allow)."""
        return None

    def refine(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan, role: Role) -> None:
        """What this engine adds to the role the tables give (nothing by default)."""

    # -- time per operator (read by planview.timing) --------------------------------------
    TIME_PRINTED: str | None = None
    """How the engine prints an operator's time: ``inclusive`` (a time per start that holds
    its inputs' time: `inclusive_ms`), ``exclusive`` (its own time over all its starts, its
    inputs' left out: `exclusive_ms`), None (no time per operator)."""
    TIME_RULES: tuple[tuple[str, str], ...] = ()
    """(node class, how its time is read): the rule per node class, shown in the README."""

    def time_of(self, node: PlanNode, nodes: list[PlanNode]) -> tuple[str, float] | None:
        """What the engine printed for a node's time: (kind, ms) with kind one of
        ``with_inputs_per_start``, ``with_inputs_in_all``, ``own_in_all``; None: nothing."""
        if self.TIME_PRINTED == "inclusive":
            value = self.inclusive_ms(node)
            return None if value is None else ("with_inputs_per_start", value)
        if self.TIME_PRINTED == "exclusive":
            value = self.exclusive_ms(node)
            return None if value is None else ("own_in_all", value)
        return None

    def inclusive_ms(self, node: PlanNode) -> float | None:
        """Its time with its inputs', per start, as printed (``inclusive`` engines)."""
        return node.actual_total_ms

    def exclusive_ms(self, node: PlanNode) -> float | None:
        """Its own time over all its starts, as printed (``exclusive`` engines); None: not printed."""
        return None

    def time_processes(self, node: PlanNode, nodes: list[PlanNode]) -> float | None:
        """How many processes run this node's inputs at the same time (a Gather's workers
        and its leader), so that their summed times overlap; None: one."""
        return None

    def time_reads(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan) -> tuple[int, ...]:
        """Subtrees, not below this node, whose time the engine counts in this node's (a CTE,
        run by the scans that read it; an InitPlan, run where its value is first used)."""
        return ()

    # -- the role ---------------------------------------------------------------------------
    def role(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan) -> Role:
        """What the check must know of a node (see `planview.check.Role`), from the tables.

        Asked once a node, in pre-order: what the tables say of an operator is read once per
        operator name, and a leaf takes the shortest path."""
        op = node.operator
        known = self._operators.get(op)
        if known is None:
            known = self._operators[op] = self._operator_facts(op)
        whole, blocking, strategies, limit, join, cte_scan = known
        children = node.children
        if not children:
            inputs: list[int] = []
            result = Role(rule=self.input_rule(node, nodes, inputs),
                          partial=self.parallel_divisor(node, nodes, parsed), reads_whole_relation=whole)
        else:
            inputs = [c for c in children if nodes[c].is_input_edge]
            result = Role(rule=self.input_rule(node, nodes, inputs),
                          partial=self.parallel_divisor(node, nodes, parsed), reads_whole_relation=whole,
                          blocking=blocking or (strategies is not None and node.strategy in strategies),
                          limit=limit)
            providers = self.CONDITION_PROVIDERS
            if providers and not providers.isdisjoint([nodes[c].operator for c in children]):
                result.conditions_from = self.conditions_from(node, nodes)
            if node.join_type if self.JOIN_BY_TYPE else join:
                self._join(node, nodes, inputs, result)
        # the typed facts the diagnosis reads, so that it needs no operator names
        if node.rows_removed:
            result.rows_discarded = sum(node.rows_removed.get(k, 0.0) for k in self.ROWS_DISCARDED_KEYS)
        group_key = self.GROUP_KEYS
        if group_key is not None:
            keys = node.extra.get(group_key)
            if keys:
                result.group_keys = group_keys(keys)
        if cte_scan:
            reads = self.cte_read(node, nodes, parsed)
            if reads is not None:
                result.rule, result.reads = "cte", reads
        if result.rule == "pass" and result.limit:
            result.rule = "limit"
        if result.rule == "limit":
            result.limit_count = self.limit_count(node)
        self.refine(node, nodes, parsed, result)
        return result

    JOIN_BY_TYPE = False
    """True for an engine that marks a join by its join type rather than its operator name."""

    def _operator_facts(self, op: str) -> tuple:
        """What the tables say of one operator name, read once."""
        return (self.listed(op, self.WHOLE_RELATION_SCANS), self.listed(op, self.BLOCKING),
                self.BLOCKING_STRATEGIES.get(op), self.listed(op, self.LIMITS),
                self.listed(op, self.JOINS), self.CTE_SCANS is None or self.listed(op, self.CTE_SCANS))

    def _join(self, node: PlanNode, nodes: list[PlanNode], inputs: list[int], result: Role) -> None:
        result.preserved = self.PRESERVED.get(node.join_type or "")
        if self.listed(node.operator, self.MERGE_JOINS):
            result.overestimate_unjudged = tuple(inputs)
        inner_id = self.inner_input(node, nodes, inputs)
        if inner_id is None:
            return
        inner = nodes[inner_id]
        if self.completes_inner(node, inner):
            result.complete_inputs = (inner_id,)
        reason = self.inner_stop_reason(node, inner)
        if reason:
            result.stops_inputs = {inner_id: reason}

    def conditions_from(self, node: PlanNode, nodes: list[PlanNode]) -> tuple[int, ...]:
        """The nodes below whose conditions restrict this one's rows: its input children that
        are condition providers, and theirs (named exactly: the child's operator alone)."""
        found: list[int] = []
        for child_id in node.children:
            child = nodes[child_id]
            if child.is_input_edge and child.operator in self.CONDITION_PROVIDERS:
                found.append(child_id)
                found.extend(g for g in child.children if nodes[g].operator in self.CONDITION_PROVIDERS)
        return tuple(found)

    # -- what the diagnosis needs ---------------------------------------------------------
    @property
    def dialect(self) -> str | None:
        return self.SQL_DIALECT

    @property
    def defaults(self) -> dict[str, float]:
        return dict(self.DEFAULT_SELECTIVITIES)

    def suggest_fix(self, cause: str, table: str | None, columns: list[str] | tuple[str, ...] = (),
                    **details: Any) -> tuple[str, str] | None:
        """The fix SQL and its caution in this engine's terms (None: no fix to offer)."""
        return None


def group_keys(keys: Any) -> tuple[str, ...]:
    """Grouping keys as printed: a list, or one comma-separated text (top-level commas only)."""
    if isinstance(keys, str):
        return tuple(k.strip() for k in _split_top(keys))
    if isinstance(keys, list):
        return tuple(str(k) for k in keys)
    return ()


def _split_top(text: str) -> list[str]:
    out, depth, start = [], 0, 0
    for i, ch in enumerate(text):
        if ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
        elif ch == "," and depth == 0:
            out.append(text[start:i])
            start = i + 1
    out.append(text[start:])
    return [x for x in out if x.strip()]


class ModuleEngine(Engine):
    """An engine module written before the base (a plug-in): its functions, as an `Engine`."""

    def __init__(self, module):
        super().__init__()
        self.module = module
        self.NAME = module.NAME
        self.FORMATS = tuple(module.FORMATS)
        self.SQL_DIALECT = getattr(module, "SQL_DIALECT", None)
        self.DEFAULT_SELECTIVITIES = dict(getattr(module, "DEFAULT_SELECTIVITIES", {}) or {})
        self.DEFAULT_NUM_DISTINCT = getattr(module, "DEFAULT_NUM_DISTINCT", None)

    def role(self, node, nodes, parsed):
        return self.module.role(node, nodes, parsed)

    def suggest_fix(self, cause, table, columns=(), **details):
        suggest = getattr(self.module, "suggest_fix", None)
        return suggest(cause, table, columns, **details) if suggest else None


def engine_of(module) -> Engine:
    """The `Engine` of an engine module (its ``ENGINE``, or its functions wrapped as one)."""
    engine = getattr(module, "ENGINE", None)
    return engine if isinstance(engine, Engine) else ModuleEngine(module)
