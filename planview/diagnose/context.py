"""What a rule sees of an origin: its numbers, its clauses by relation, and the plan around it."""

from __future__ import annotations

import math
from collections import ChainMap
from collections.abc import Mapping
from dataclasses import dataclass, field
from itertools import combinations
from typing import Any

from .. import words
from ..index import relation_name
from .clauses import Clause, merge_ranges, parse_condition

RESTRICTION_KINDS = ("filter", "index_cond", "tid_cond", "recheck_cond")
JOIN_KINDS = ("hash_cond", "merge_cond", "join_filter", "join_cond")


@dataclass
class Candidate:
    """One rule's answer: a cause that fits, how well, and the numbers that say so."""

    cause: str
    score: float
    reason: str
    lines: list[str] = field(default_factory=list)
    fields: dict[str, Any] = field(default_factory=dict)
    table: str | None = None
    columns: list[str] = field(default_factory=list)
    expressions: list[str] = field(default_factory=list)
    details: dict[str, Any] = field(default_factory=dict)


@dataclass
class Context:
    node: Any
    plan: Any
    clauses: list[Clause]
    relation_of: Mapping[str | None, str]
    est_total: float
    actual_total: float
    own_log10_ratio: float
    rows_read: float | None
    rows_removed: float
    engine: Any
    """The plan's `planview.engines.base.Engine`: its dialect, defaults and fixes."""

    @property
    def defaults(self) -> dict[str, float]:
        return self.engine.defaults

    @property
    def dialect(self) -> str | None:
        return self.engine.dialect

    @property
    def direction(self) -> str:
        return "under" if self.own_log10_ratio > 0 else "over"

    @property
    def est_selectivity(self) -> float | None:
        if not self.rows_read:
            return None
        return self.est_total / self.rows_read

    @property
    def actual_selectivity(self) -> float | None:
        if not self.rows_read:
            return None
        return self.actual_total / self.rows_read

    @property
    def is_scan(self) -> bool:
        """A leaf that reads a relation (whatever the engine calls its access method)."""
        node = self.node
        if node.relation is None:
            return False
        nodes = self.plan.nodes
        return not any(nodes[c].is_input_edge and c not in node.conditions_from for c in node.children)

    @property
    def is_join(self) -> bool:
        return self.node.own_rule in ("join", "semi_outer", "semi_inner")

    @property
    def is_grouping(self) -> bool:
        return bool(self.group_keys())

    def restriction_clauses(self) -> list[Clause]:
        return [c for c in self.clauses if c.source in RESTRICTION_KINDS and not c.aggregate]

    def join_clauses(self) -> list[Clause]:
        return [c for c in self.clauses if c.source in JOIN_KINDS or c.is_join]

    def table_of(self, clause: Clause) -> str | None:
        quals = {c.qualifier for c in clause.columns}
        if len(quals) == 1:
            return self.relation_of.get(next(iter(quals)))
        return None

    def group_keys(self) -> list[str]:
        return list(self.node.group_keys)

    @property
    def condition_shares(self) -> tuple[float, float] | None:
        """The shares (in %) of its rows the node's condition was estimated to keep and kept,
        where the engine prints them (MariaDB's ``filtered`` and ``r_filtered``)."""
        shares = self.node.extra.get("selectivity")
        if not isinstance(shares, dict):
            return None
        estimated, actual = shares.get("filtered"), shares.get("r_filtered")
        if not isinstance(estimated, (int, float)) or not isinstance(actual, (int, float)):
            return None
        return float(estimated), float(actual)

    def keeps(self, statistic: str) -> bool:
        """Whether the engine keeps this kind of statistic (``histogram``, ``most_common_values``)."""
        return statistic in self.engine.STATISTICS_KEPT

    def non_constant_kind(self, clause: Clause) -> str | None:
        """``inequality``, ``equality_same_table`` or ``equality_subplan`` when the clause
        compares a column with no constant (a parameter, a sub-plan's result, another column
        of the same table)."""
        if not clause.bare or clause.aggregate or not clause.columns:
            return None
        same_table = len(clause.columns) == 2 and not clause.is_join
        other_side = clause.has_parameter or clause.has_subplan
        if clause.op_class in ("open_range", "closed_range") and (other_side or same_table):
            return "inequality"
        if clause.op_class == "equality" and same_table:
            return "equality_same_table"
        if clause.op_class == "equality" and clause.has_subplan and len(clause.columns) == 1:
            return "equality_subplan"
        return None

    def default_match(self, tolerance: float = 0.05) -> tuple[str, float] | None:
        """The engine default (or product of two) that the estimated selectivity equals."""
        sel = self.est_selectivity
        if sel is None or sel <= 0 or not self.defaults:
            return None
        candidates: list[tuple[str, float]] = list(self.defaults.items())
        for (a, va), (b, vb) in combinations(self.defaults.items(), 2):
            candidates.append((f"{a} x {b}", va * vb))
        for name, value in self.defaults.items():
            candidates.append((f"{name} x {name}", value * value))
        # a printed estimate is rounded to whole rows: allow half a row either side
        slack = 0.5 / self.rows_read if self.rows_read else 0.0
        best = None
        for name, value in candidates:
            if value >= 1:
                continue
            if abs(sel - value) <= max(value * tolerance, slack):
                gap = abs(math.log(max(sel, 1e-300) / value))
                if best is None or gap < best[2]:
                    best = (name, value, gap)
        return (best[0], best[1]) if best else None


def relation_map(plan) -> dict[int, dict[str | None, str]]:
    """Per statement, alias (and bare relation name) to schema-qualified relation, from the
    statement's scans: an alias belongs to its own statement, so ``o`` of one statement in a
    paste never names the table ``o`` stands for in another. One pass over the nodes."""
    maps: dict[int, dict[str | None, str]] = {}
    for node in plan.nodes:
        qualified = relation_name(node)
        if qualified:
            mapping = maps.setdefault(node.statement, {})
            mapping.setdefault(node.alias or node.relation, qualified)
            mapping.setdefault(node.relation, qualified)
    return maps


def build_context(plan, node, relation_maps: Mapping[int, Mapping[str | None, str]] | None = None) -> Context:
    """What the rules see of one origin. `relation_maps` is the plan's `relation_map`, made
    once per plan by the caller (made here when not given); the origin sees its statement's."""
    nodes = plan.nodes
    engine = plan.engine_spec
    if relation_maps is None:
        relation_maps = relation_map(plan)
    relation_of: Mapping[str | None, str] = relation_maps.get(node.statement, {})
    # a join or grouping node: unqualified names belong to the one relation below, if one
    own_relation = relation_name(node) or plan.index.sole_relation_below(node.id)
    if own_relation:
        relation_of = ChainMap({None: own_relation}, relation_of)
    # a scan driven by an index bitmap: the index conditions live on the nodes below
    sources = [node] + [nodes[c] for c in node.conditions_from]
    clauses: list[Clause] = []
    seen: set[str] = set()
    for source in sources:
        for cond in source.conditions:
            if cond.kind == "recheck_cond" and len(sources) > 1:
                continue  # repeats the index conditions of the nodes below
            for clause in parse_condition(cond.text, cond.kind, engine.dialect, engine.SUBQUERY_MARK):
                key = f"{clause.source}:{clause.text}"
                if key in seen:
                    continue
                seen.add(key)
                clauses.append(clause)
    if node.own_rule == "join" and not any(c.source in JOIN_KINDS or c.is_join for c in clauses):
        clauses += _parameterised_join_clauses(plan, node, engine.dialect)
    clauses = merge_ranges(clauses)
    starts = node.starts or 1
    removed = node.rows_discarded * starts
    rows_read = None
    # Only a scan of the whole relation reads every row; an index scan's rows removed are
    # counted after the index already narrowed them down.
    if node.actual_total is not None and node.relation is not None and node.reads_whole_relation:
        rows_read = node.actual_total + removed
    return Context(node=node, plan=plan, clauses=clauses, relation_of=relation_of,
                   est_total=node.est_total or 0.0, actual_total=node.actual_total or 0.0,
                   own_log10_ratio=node.own_log10_ratio or 0.0, rows_read=rows_read,
                   rows_removed=removed, engine=engine)


def _parameterised_join_clauses(plan, join, dialect: str | None) -> list[Clause]:
    """A nested loop whose inner scan is keyed by the outer row prints its join clauses on
    that scan (``Index Cond: (l.k = o.k)``): they are the join's, read as join clauses."""
    found: list[Clause] = []
    for child_id in join.children:
        child = plan.nodes[child_id]
        if not child.is_input_edge or child.relation is None:
            continue
        own = child.alias or child.relation
        for cond in child.conditions:
            if cond.kind not in RESTRICTION_KINDS:
                continue
            for clause in parse_condition(cond.text, cond.kind, dialect):
                if clause.is_join and any(c.qualifier and c.qualifier != own for c in clause.columns):
                    clause.source = "join_cond"
                    found.append(clause)
    return found


def fmt_rows(value: float | None) -> str:
    if value is None:
        return "?"
    return words.rows(value)


def fmt_sel(value: float | None) -> str:
    if value is None:
        return "?"
    return f"{value:.4g}"
