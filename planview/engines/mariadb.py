"""MariaDB: ANALYZE FORMAT=JSON (10.6 to 11.x) and the tabular output of ANALYZE.

MariaDB prints tables, not operators: a ``nested_loop`` lists its tables in join order. The
reader builds the join nodes MariaDB leaves implicit, left-deep, so the tree reads like any
other engine's: ``join(join(t1, t2), t3)``.

Per table (one start = one loop): estimated output = ``rows x filtered/100``, actual output =
``r_rows x r_filtered/100``, starts = ``r_loops``; ``r_rows`` null means never scanned. The
rows examined (``rows``, ``r_rows``) are kept apart from the rows output, in ``extra``, and
the filtered/r_filtered pair, a direct measure of the condition's selectivity error, sits in
``extra["selectivity"]``. A join prefix's estimate is the product of its tables' estimates
(the optimizer's own record count), its actual count the last table's total output.
"""

from __future__ import annotations

import json
import re
from typing import Any

from ..check import Role
from ..errors import PlanParseError
from ..inert import check_name
from ..model import NO_ENTRIES, Condition, ParsedPlan, PlanNode, Statement
from ._dispatch import dispatch, json_document
from ._tree import append_node, check_depth, read_number, typed_relationships
from .base import Engine

NAME = "mariadb"
ALIASES = ("maria",)
FORMATS = ("json", "table")
SQL_DIALECT = "mysql"

MAX_BLOCK_DEPTH = 400
"""Nested query blocks deeper than this are refused (each level is several JSON levels)."""

# ---------------------------------------------------------------------------------------
# Tables: the engine's vocabulary
# ---------------------------------------------------------------------------------------

ACCESS_TYPES = {"ALL", "index", "range", "ref", "eq_ref", "const", "system", "ref_or_null",
                "index_merge", "fulltext", "unique_subquery", "index_subquery", "hash_ALL",
                "hash_range", "hash_index", "hash_index_merge", "NULL"}
FULL_SCANS = {"ALL", "index", "hash_ALL", "hash_index"}
# full scans whose r_rows count every row of the relation (hashed ones count what the join
# buffer looked up, from memory: left out)
WHOLE_RELATION_SCANS = {"ALL", "index"}
NUMERIC_TABLE_KEYS = ("rows", "r_rows", "filtered", "r_filtered", "r_loops", "r_index_rows",
                      "r_icp_filtered", "r_total_filtered", "r_table_time_ms", "r_other_time_ms")
ACTUAL_TABLE_KEYS = ("r_loops", "r_rows", "r_filtered")
KEY_LOOKUPS = frozenset({"ref", "eq_ref", "ref_or_null"})
"""Access types that look rows up by an equality on an index key (the ``ref`` column names
the value): their ``rows`` is the rows per key."""
"""The figures an actual row count is made from: one masked, the count is unknown."""
MASKED = frozenset({"REPLACED", "#"})
"""What the engine's test suite prints in place of a figure that varies from run to run
(mysqltest's --replace_regex and --replace_column): read as unknown, never refused."""
RANGE_CHECKED = "range-checked-for-each-record"
"""A nested_loop member wrapping a table whose index is chosen again for each outer row."""
CONDITION_KEYS = {"attached_condition": "filter", "index_condition": "index_cond",
                  "index_condition_bka": "index_cond", "having_condition": "filter"}
JOIN_OPERATORS = {"nested_loop", "block-nl-join"}
INPUT_RULES = {"nested_loop": "join", "block-nl-join": "join", "union_result": "sum",
               "filesort": "pass", "temporary_table": "pass", "read_sorted_file": "pass"}
BLOCKING = {"filesort", "temporary_table", "union_result"}
# Every blocks' key that holds other blocks, so an unknown layout is read through
WRAPPER_KEYS = ("expression_cache", "duplicates_removal", "read_sorted_file", "window_functions_computation")


# ---------------------------------------------------------------------------------------
# Detection
# ---------------------------------------------------------------------------------------

_TABLE_HEADER = re.compile(r"^\|?\s*id\s*[|\t]\s*select_type\s*[|\t].*\br_rows\b.*\br_filtered\b", re.M)


def detect(text: str) -> tuple[str, float] | None:
    head = text[:20000].lstrip("\ufeff \t\r\n")
    if head.startswith("{") and '"query_block"' in head:
        if '"r_loops"' in head or '"r_rows"' in head or '"r_total_time_ms"' in head:
            return "json", 0.97
        if '"select_id"' in head:
            # EXPLAIN FORMAT=JSON without ANALYZE: MySQL's v1 JSON looks the same
            return "json", 0.6 if '"cost_info"' not in head else 0.3
    if _TABLE_HEADER.search(head):
        return "table", 0.95
    return None


def parse(text: str, fmt: str) -> ParsedPlan:
    return dispatch(NAME, "MariaDB", {"json": _parse_json, "table": _parse_table}, text, fmt)

# ---------------------------------------------------------------------------------------
# JSON
# ---------------------------------------------------------------------------------------

class _Builder:
    """Turns MariaDB's blocks into PlanNodes in pre-order (parents before children)."""

    def __init__(self, fmt: str):
        self.fmt = fmt
        self.nodes: list[PlanNode] = []
        self.has_actuals = False
        self.masked: dict[str, str] = {}
        """The keys whose figures the plan printed masked (read as unknown), with the mask."""

    def error(self, message: str, key: str) -> PlanParseError:
        return PlanParseError(message, key=key, engine=NAME, fmt=self.fmt)

    def number(self, value: Any, key: str) -> float | None:
        """A figure, or None where the plan prints it masked (the key is remembered for the note)."""
        if value.__class__ is str and value.strip() in MASKED:
            self.masked[key.rsplit(".", 1)[-1]] = value.strip()
            return None
        return _number(value, key, self.fmt)

    def timing(self, raw: dict, key: str) -> float | None:
        """A statement's time in ms: None when absent, masked or not a number (a time is shown,
        never judged)."""
        value = raw.get(key.rsplit(".", 1)[-1])
        if value.__class__ is str and value.strip() in MASKED:
            return self.number(value, key)
        return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else None

    def add(self, node: PlanNode, parent: int | None) -> PlanNode:
        return append_node(self.nodes, node, parent)

    # a block: query_block, or anything holding one of the block keys
    def block(self, raw: Any, parent: int | None, path: str, depth: int, relationship: str | None,
              loops: float | None = None) -> int | None:
        check_depth(depth, key=path, engine=NAME, fmt=self.fmt, limit=MAX_BLOCK_DEPTH, what="query blocks")
        if not isinstance(raw, dict):
            raise self.error("a block is not an object", path)
        if "query_block" in raw and isinstance(raw["query_block"], dict) and len(
                [k for k in raw if k in ("query_block", "nested_loop", "table", "filesort")]) == 1:
            return self.block(raw["query_block"], parent, f"{path}.query_block", depth + 1,
                              relationship, loops)
        block_loops = self.number(raw.get("r_loops"), f"{path}.r_loops")
        if block_loops is None:
            block_loops = loops
        select_id = raw.get("select_id")
        for key in ("filesort", "temporary_table", "read_sorted_file"):
            if key in raw and isinstance(raw[key], dict):
                return self.sorted_block(key, raw, parent, path, depth, relationship, block_loops)
        if "union_result" in raw:
            return self.union(raw["union_result"], parent, f"{path}.union_result", depth, relationship)
        for key in WRAPPER_KEYS:
            if key in raw and isinstance(raw[key], dict):
                inner = raw[key]
                top = self.block(inner, parent, f"{path}.{key}", depth + 1, relationship, block_loops)
                if top is not None:
                    self.nodes[top].extra.setdefault("wrapped_in", []).append(key)
                    if key == "expression_cache":
                        self.nodes[top].extra["expression_cache"] = {
                            k: v for k, v in inner.items() if k != "query_block"}
                return top
        top: int | None = None
        if "nested_loop" in raw:
            top = self.nested_loop(raw["nested_loop"], parent, f"{path}.nested_loop", depth,
                                   relationship, block_loops)
        elif "table" in raw:
            top = self.table(raw["table"], parent, f"{path}.table", depth, relationship)
        elif "message" in raw or "table" not in raw:
            message = raw.get("message") or raw.get("table", {}).get("message") if isinstance(raw.get("table"), dict) else raw.get("message")
            top = self.add(message_node(message, relationship), parent).id
        if top is None:
            raise self.error("a block without tables", path)
        root = self.nodes[top]
        if select_id is not None:
            root.subplan_name = root.subplan_name or f"select #{select_id}"
            root.extra.setdefault("select_id", select_id)
        for key in ("having_condition",):
            if isinstance(raw.get(key), str):
                root.extra["having_condition"] = raw[key]
        subqueries = raw.get("subqueries")
        if subqueries is not None:
            if not isinstance(subqueries, list):
                raise self.error("\"subqueries\" is not a list", f"{path}.subqueries")
            for i, sub in enumerate(subqueries):
                self.block(sub, top, f"{path}.subqueries[{i}]", depth + 1, "SubPlan")
        return top

    def sorted_block(self, key: str, raw: dict, parent, path, depth, relationship, loops) -> int:
        inner = raw[key]
        node = PlanNode(id=0, parent=None, operator=key, label=key.replace("_", " "))
        node.parent_relationship = relationship
        if key == "filesort":
            node.label = "filesort" + (f" ({inner['sort_key']})" if isinstance(inner.get("sort_key"), str) else "")
            out = self.number(inner.get("r_output_rows"), f"{path}.{key}.r_output_rows")
            sort_loops = self.number(inner.get("r_loops"), f"{path}.{key}.r_loops")
            if out is not None:
                node.starts = sort_loops or 1.0
                node.executed = bool(node.starts)
                node.actual_rows = out / node.starts if node.starts else None
                self.has_actuals = True
            if "r_limit" in inner:
                node.extra["r_limit"] = inner["r_limit"]
        node.extra.update({k: v for k, v in inner.items()
                           if not isinstance(v, (dict, list)) or k in ("sort_key",)})
        node = self.add(node, parent)
        rest = {k: v for k, v in inner.items() if isinstance(v, dict) or k in ("nested_loop", "table")}
        child_raw = dict(rest)
        for k in ("select_id", "r_loops"):
            if k in raw:
                child_raw.setdefault(k, raw[k])
        if not any(k in child_raw for k in ("nested_loop", "table", "filesort", "temporary_table",
                                             "read_sorted_file", "union_result", *WRAPPER_KEYS)):
            raise self.error(f"\"{key}\" holds no tables", f"{path}.{key}")
        self.block(child_raw, node.id, f"{path}.{key}", depth + 1, None, loops)
        if raw.get("select_id") is not None:
            node.subplan_name = f"select #{raw['select_id']}"
        subqueries = raw.get("subqueries")
        if isinstance(subqueries, list):
            for i, sub in enumerate(subqueries):
                self.block(sub, node.id, f"{path}.subqueries[{i}]", depth + 1, "SubPlan")
        return node.id

    def union(self, raw: Any, parent, path, depth, relationship) -> int:
        if not isinstance(raw, dict):
            raise self.error("\"union_result\" is not an object", path)
        node = PlanNode(id=0, parent=None, operator="union_result",
                        label=f"union result {raw.get('table_name', '')}".strip())
        node.parent_relationship = relationship
        rows = self.number(raw.get("r_rows"), f"{path}.r_rows")
        loops = self.number(raw.get("r_loops"), f"{path}.r_loops")
        if rows is not None:
            node.starts = loops if loops is not None else 1.0
            node.executed = bool(node.starts)
            node.actual_rows = rows
            self.has_actuals = True
        node.extra.update({k: v for k, v in raw.items() if not isinstance(v, (dict, list))})
        node = self.add(node, parent)
        specs = raw.get("query_specifications")
        if not isinstance(specs, list) or not specs:
            raise self.error("\"query_specifications\" missing or not a list",
                             f"{path}.query_specifications")
        for i, spec in enumerate(specs):
            self.block(spec, node.id, f"{path}.query_specifications[{i}]", depth + 1, "Member")
        return node.id

    def nested_loop(self, items: Any, parent, path, depth, relationship, block_loops) -> int:
        if not isinstance(items, list) or not items:
            raise self.error("\"nested_loop\" is not a non-empty list", path)
        entries = []
        for i, item in enumerate(items):
            where = f"{path}[{i}]"
            if not isinstance(item, dict) or not item:
                raise self.error("a nested_loop member is not an object", where)
            if "table" in item:
                entries.append(("table", item["table"], f"{where}.table"))
            elif "block-nl-join" in item:
                entries.append(("bnl", item["block-nl-join"], f"{where}.block-nl-join"))
            elif isinstance(item.get("read_sorted_file"), dict) \
                    and isinstance(item["read_sorted_file"].get("filesort"), dict):
                entries.append(("sorted", item["read_sorted_file"], f"{where}.read_sorted_file"))
            elif RANGE_CHECKED in item:
                entries.append(("range_checked", item[RANGE_CHECKED], f"{where}.{RANGE_CHECKED}"))
            elif "duplicates_removal" in item:
                inner = item["duplicates_removal"]
                members = inner if isinstance(inner, list) else [inner]
                for j, member in enumerate(members):
                    if isinstance(member, dict) and "table" in member:
                        entries.append(("table", member["table"], f"{where}.duplicates_removal[{j}].table"))
                    elif isinstance(member, dict) and "block-nl-join" in member:
                        entries.append(("bnl", member["block-nl-join"], f"{where}.duplicates_removal[{j}].block-nl-join"))
            else:
                raise self.error(f"unknown nested_loop member {next(iter(item))!r}", where)
        if not entries:
            raise self.error("\"nested_loop\" holds no tables", path)
        if len(entries) == 1:
            kind, raw, where = entries[0]
            return self.member(kind, raw, parent, where, depth, relationship)
        # left-deep: the join nodes first (outermost last in the list), then the tables
        joins: list[PlanNode] = []
        for k in range(len(entries) - 1, 0, -1):
            kind, raw, where = entries[k]
            join = PlanNode(id=0, parent=None, operator="block-nl-join" if kind == "bnl" else "nested_loop",
                            label="")
            join.extra["tables"] = k + 1
            joins.append(join)
        top_parent = parent
        added: list[int] = []
        for join_index, join in enumerate(joins):
            join.parent_relationship = relationship if join_index == 0 else "Outer"
            added.append(self.add(join, top_parent).id)
            top_parent = join.id
        # the first table is the outer input of the innermost join
        kind, raw, where = entries[0]
        first = self.member(kind, raw, added[-1], where, depth, "Outer")
        members = [first]
        for k in range(1, len(entries)):
            join_id = added[len(entries) - 1 - k]
            kind, raw, where = entries[k]
            members.append(self.member(kind, raw, join_id, where, depth, "Inner"))
            # the join node's children: its outer input (added already, the deeper join or the
            # first table) comes first because it was added before this table
        self._join_numbers(added, members, entries, block_loops)
        return added[0]

    def _join_numbers(self, join_ids: list[int], member_ids: list[int], entries, block_loops) -> None:
        """Estimated and actual rows of each join prefix (see the module docstring)."""
        nodes = self.nodes
        first = nodes[member_ids[0]]
        est = first.extra.get("est_output_total")
        act_total = _actual_total_hint(first)
        for k in range(1, len(member_ids)):
            inner = nodes[member_ids[k]]
            join = nodes[join_ids[len(member_ids) - 1 - k]]
            kind, raw, _ = entries[k]
            per_loop_est = inner.est_rows
            est = est * per_loop_est if est is not None and per_loop_est is not None else None
            if kind == "bnl" and est is not None:
                join_filtered = self.number(raw.get("filtered"), "filtered")
                if join_filtered is not None:
                    est *= join_filtered / 100.0
            if kind == "bnl":
                loops = self.number(raw.get("r_loops"), "r_loops")
                r_filtered = self.number(raw.get("r_filtered"), "r_filtered")
                effective = self.number(raw.get("r_effective_rows"), "r_effective_rows")
                # every buffered outer row meets every inner row read; r_filtered is the
                # share of those pairs that passed the join condition
                scanned = effective if effective is not None else inner.actual_rows
                if loops is not None and r_filtered is not None and scanned is not None:
                    act_total = loops * scanned * r_filtered / 100.0
                else:
                    act_total = None
                join.extra["join_algorithm"] = raw.get("join_type")
                for time_key in ("r_unpack_time_ms", "r_other_time_ms"):
                    value = self.number(raw.get(time_key), time_key)
                    if value is not None:
                        join.extra[time_key] = value
                join.extra["buffer_type"] = raw.get("buffer_type")
                if isinstance(raw.get("attached_condition"), str):
                    join.conditions.append(Condition("join_filter", raw["attached_condition"],
                                                     "attached_condition"))
                if r_filtered is not None:
                    join.extra["selectivity"] = {"filtered": self.number(raw.get("filtered"), "filtered"),
                                                 "r_filtered": r_filtered,
                                                 "condition": raw.get("attached_condition")}
            else:
                act_total = _actual_total_hint(inner)
            left_join = any("trigcond(" in c.text for c in inner.conditions)
            join.join_type = "Left" if left_join else "Inner"
            join.label = ("block nested loop" if kind == "bnl" else "nested loop") + \
                (" left join" if left_join else "") + f" ({k + 1} tables)"
            join.est_rows = None if est is None else est / (block_loops or 1.0)
            if left_join:
                join.derived.append("a left join (its inner table's condition is wrapped in "
                                    "trigcond()): MariaDB prints no count of the rows it emits")
                continue
            if act_total is not None:
                join.starts = block_loops or 1.0
                join.executed = bool(join.starts) or act_total > 0
                join.actual_rows = act_total / join.starts if join.starts else None
                if not join.starts:
                    join.executed = False
            elif inner.executed is False:
                join.starts = block_loops or 0.0
                join.executed = False

    def member(self, kind: str, raw: Any, parent, path, depth, relationship) -> int:
        if kind == "table":
            return self.table(raw, parent, path, depth, relationship)
        if kind == "sorted":  # the first table, sorted before the join reads it
            return self.sorted_block("filesort", raw, parent, path, depth, relationship, None)
        wrapper = RANGE_CHECKED if kind == "range_checked" else "block-nl-join"
        if not isinstance(raw, dict) or not isinstance(raw.get("table"), dict):
            raise self.error(f"\"{wrapper}\" without a \"table\"", path)
        table = self.table(raw["table"], parent, f"{path}.table", depth, relationship)
        if kind == "range_checked":
            node = self.nodes[table]
            node.label += " (range checked for each record)"
            node.extra[RANGE_CHECKED] = {k: v for k, v in raw.items() if k != "table"}
        return table

    def table(self, raw: Any, parent, path, depth, relationship) -> int:
        if not isinstance(raw, dict):
            raise self.error("a table is not an object", path)
        name = raw.get("table_name")
        if name is not None and not isinstance(name, str):
            raise self.error("\"table_name\" is not text", f"{path}.table_name")
        access = raw.get("access_type")
        if access is None and "message" in raw:
            access = "message"
        if not isinstance(access, str) or not access:
            raise self.error("missing or invalid \"access_type\"", f"{path}.access_type")
        node = PlanNode(id=0, parent=None, operator=access, label="")
        node.parent_relationship = relationship
        numbers = {k: self.number(raw.get(k), f"{path}.{k}") for k in NUMERIC_TABLE_KEYS}
        fill_table(node, name, raw, numbers)
        masked = [k for k in ACTUAL_TABLE_KEYS if raw.get(k).__class__ is str and raw[k].strip() in MASKED]
        if masked:
            node.executed = node.actual_rows = node.starts = None
            node.rows_removed = NO_ENTRIES
            node.extra.pop("never_scanned", None)
            node.derived.append(f"{', '.join(masked)} masked where the plan was printed: the actual "
                                "rows are unknown")
        if node.actual_rows is not None or "r_loops" in raw:
            self.has_actuals = True
        node = self.add(node, parent)
        for key in ("materialized",):
            inner = raw.get(key)
            if isinstance(inner, dict):
                top = self.block(inner, node.id, f"{path}.{key}", depth + 1, "InitPlan")
                if top is not None:
                    self.nodes[top].subplan_name = self.nodes[top].subplan_name or f"{key} {name}"
                    node.extra["materialized_from"] = top
        return node.id


def fill_table(node: PlanNode, name: str | None, raw: dict, numbers: dict[str, float | None]) -> None:
    """The per-table figures, shared by the JSON and the tabular readers."""
    access = node.operator
    node.relation = name
    node.alias = name
    key = raw.get("key")
    node.index = key if isinstance(key, str) else None
    target = name or "?"
    node.label = f"{access} on {target}" + (f" ({node.index})" if node.index else "")
    rows, filtered = numbers.get("rows"), numbers.get("filtered")
    r_rows, r_filtered = numbers.get("r_rows"), numbers.get("r_filtered")
    loops = numbers.get("r_loops")
    if rows is not None:
        node.est_rows = rows * (filtered if filtered is not None else 100.0) / 100.0
    node.extra.update({k: v for k, v in numbers.items() if v is not None})
    if "r_rows" in raw and raw.get("r_rows") is None:
        node.extra["r_rows"] = None
    if loops is not None or r_rows is not None or "r_rows" in raw:
        node.starts = loops if loops is not None else 1.0
        never = r_rows is None or not node.starts
        node.executed = not never
        if never:
            node.extra["never_scanned"] = True
        else:
            node.actual_rows = r_rows * (r_filtered if r_filtered is not None else 100.0) / 100.0
            removed = r_rows - node.actual_rows
            if removed > 0:
                node.rows_removed = {"Filter": removed}
    # the join prefix arithmetic needs totals before the check computes them
    if node.est_rows is not None:
        node.extra["est_output_total"] = node.est_rows  # one estimated loop for the first table
    for cond_key, kind in CONDITION_KEYS.items():
        value = raw.get(cond_key)
        if isinstance(value, str) and value:
            node.conditions.append(Condition(kind, value, cond_key))
    ref = raw.get("ref")
    parts = raw.get("used_key_parts")
    if isinstance(ref, list) and isinstance(parts, list):
        for part, source in zip(parts, ref):
            if isinstance(part, str) and isinstance(source, str) and source not in ("const", "func"):
                outer = source.split(".", 1)[1] if source.count(".") >= 2 else source
                node.conditions.append(Condition("index_cond", f"{target}.{part} = {outer}", "ref"))
    if filtered is not None or r_filtered is not None:
        node.extra["selectivity"] = {
            "filtered": filtered, "r_filtered": r_filtered,
            "condition": raw.get("attached_condition"),
            "q_error": _q(filtered, r_filtered),
        }
    for k in ("possible_keys", "key_length", "used_key_parts", "ref", "r_engine_stats", "using_index",
              "first_match", "loose_scan", "rowid_filter", "index_merge", "using_index_for_group_by",
              "r_hit_ratio", "partitions", "not_exists", "distinct", "start_temporary", "end_temporary"):
        if k in raw:
            node.extra[k] = raw[k]


def _q(filtered: float | None, r_filtered: float | None) -> float | None:
    if filtered is None or r_filtered is None or filtered <= 0 or r_filtered <= 0:
        return None
    return max(filtered / r_filtered, r_filtered / filtered)


def _actual_total_hint(node: PlanNode) -> float | None:
    if node.actual_rows is None or node.starts is None:
        return 0.0 if node.executed is False else None
    return node.actual_rows * node.starts


def _parse_json(text: str) -> ParsedPlan:
    body = text.lstrip("\ufeff").strip()
    # the client's -B output escapes newlines as \n when --raw is not given
    if body.startswith("{") and "\n" not in body and "\\n" in body:
        body = body.replace("\\n", "\n").replace("\\t", "\t")
    doc = json_document(body, NAME)
    if not isinstance(doc, dict) or not isinstance(doc.get("query_block"), dict):
        raise PlanParseError("expected an object with a \"query_block\"", key="query_block",
                             engine=NAME, fmt="json")
    builder = _Builder("json")
    try:
        root = builder.block(doc["query_block"], None, "query_block", 0, None)
    except RecursionError:
        raise PlanParseError("query blocks nested too deeply; refused", engine=NAME, fmt="json") from None
    statement = Statement(root=root or 0)
    block = doc["query_block"]
    statement.execution_ms = builder.timing(block, "query_block.r_total_time_ms")
    optimization = doc.get("query_optimization")
    if isinstance(optimization, dict):
        statement.planning_ms = builder.timing(optimization, "query_optimization.r_total_time_ms")
    for node in builder.nodes:
        node.extra.pop("est_output_total", None)
    notes = []
    version = "10.6+" if "r_total_time_ms" in json.dumps(block)[:200000] else None
    if any("r_index_rows" in n.extra or "r_total_filtered" in n.extra for n in builder.nodes):
        version = "11.5+"
    if not builder.has_actuals:
        notes.append("no actuals: this is EXPLAIN FORMAT=JSON; run ANALYZE FORMAT=JSON to "
                     "compare estimates with what really happened")
    if builder.masked:
        notes.append(masked_note(builder.masked))
    typed_relationships(builder.nodes)
    return ParsedPlan(engine=NAME, format="json", nodes=builder.nodes, statements=[statement],
                      engine_version=version, has_actuals=builder.has_actuals, notes=notes)


# ---------------------------------------------------------------------------------------
# The tabular output of ANALYZE
# ---------------------------------------------------------------------------------------

_TABLE_COLUMNS = ("id", "select_type", "table", "type", "possible_keys", "key", "key_len", "ref",
                  "rows", "r_rows", "filtered", "r_filtered", "Extra")
_REF_TABLE = re.compile(r"^<(subquery|derived|union|materialize)(\d+(?:,\d+)*)>$")


def _split_row(line: str) -> list[str]:
    if line.lstrip().startswith("|"):
        cells = line.strip().strip("|").split("|")
        return [c.strip() for c in cells]
    return [c.strip() for c in line.split("\t")]


def _parse_table(text: str) -> ParsedPlan:
    lines = text.splitlines()
    header_at = None
    for number, line in enumerate(lines):
        if _TABLE_HEADER.match(line):
            header_at = number
            break
    if header_at is None:
        raise PlanParseError("no header line with id, select_type, ..., r_rows, r_filtered",
                             line=1, engine=NAME, fmt="table")
    header = _split_row(lines[header_at])
    missing = [c for c in ("id", "table", "type", "rows", "r_rows", "filtered", "r_filtered") if c not in header]
    if missing:
        raise PlanParseError(f"the header lacks {', '.join(missing)}", line=header_at + 1,
                             engine=NAME, fmt="table")
    rows: list[tuple[int, dict[str, str]]] = []
    for number in range(header_at + 1, len(lines)):
        line = lines[number]
        if not line.strip() or re.match(r"^\s*\+[-+]+\+\s*$", line) or re.match(r"^\d+ rows? in set", line.strip()):
            continue
        cells = _split_row(line)
        if len(cells) != len(header):
            raise PlanParseError(f"expected {len(header)} columns, found {len(cells)}", line=number + 1,
                                 engine=NAME, fmt="table")
        rows.append((number + 1, dict(zip(header, cells))))
    if not rows:
        raise PlanParseError("no table rows under the header", line=header_at + 1, engine=NAME, fmt="table")
    # group the rows by select id, keeping the order
    selects: dict[str, list[tuple[int, dict[str, str]]]] = {}
    for number, row in rows:
        selects.setdefault(row.get("id", "NULL"), []).append((number, row))
    builder = _Builder("table")
    notes = ["the tabular ANALYZE prints no loop counts: each table's loops are taken as the "
             "rows the tables before it emitted, which holds for a plain nested loop"]
    placed: dict[str, int] = {}
    pending = list(selects)
    # the first select (usually id 1) is the statement; others hang under the table naming them
    order = [s for s in pending if s != "NULL"] + (["NULL"] if "NULL" in selects else [])
    references: dict[str, int] = {}
    root: int | None = None
    if "NULL" in selects:
        number, row = selects["NULL"][0]
        node = PlanNode(id=0, parent=None, operator="union_result", label=f"union result {row.get('table', '')}")
        r_rows = _cell_number(row.get("r_rows"), number, "r_rows")
        if r_rows is not None:
            node.starts, node.executed, node.actual_rows = 1.0, True, r_rows
            builder.has_actuals = True
        root = builder.add(node, None).id
        match = _REF_TABLE.match(row.get("table", ""))
        if match:
            for sid in match.group(2).split(","):
                references[sid] = root
        placed["NULL"] = root
    for sid in order:
        if sid == "NULL":
            continue
        members = selects[sid]
        parent = references.get(sid)
        relationship = None
        if parent is not None:
            relationship = "Member" if builder.nodes[parent].operator == "union_result" else "InitPlan"
        elif root is not None:
            parent, relationship = root, "SubPlan"
        top = _table_block(builder, members, parent, relationship)
        builder.nodes[top].subplan_name = f"select #{sid}"
        if root is None:
            root = top
        for node in builder.nodes[top:]:
            match = _REF_TABLE.match(node.relation or "")
            if match:
                for ref_sid in match.group(2).split(","):
                    references.setdefault(ref_sid, node.id)
    for node in builder.nodes:
        node.extra.pop("est_output_total", None)
    typed_relationships(builder.nodes)
    return ParsedPlan(engine=NAME, format="table", nodes=builder.nodes,
                      statements=[Statement(root=root or 0)], engine_version=None,
                      has_actuals=builder.has_actuals, notes=notes)


def _cell_number(value: str | None, line: int, column: str) -> float | None:
    if value is None or value in ("", "NULL"):
        return None
    return read_number(value, key=column, line=line, engine=NAME, fmt="table")


def _table_block(builder: _Builder, members, parent, relationship) -> int:
    """One select's rows: a left-deep nested loop, with loops derived from the prefix."""
    raws = []
    for number, row in members:
        numbers = {c: _cell_number(row.get(c), number, c) for c in ("rows", "r_rows", "filtered", "r_filtered")}
        raw: dict[str, Any] = {"table_name": row.get("table"), "access_type": row.get("type"),
                               "key": None if row.get("key") in (None, "NULL") else row.get("key")}
        if row.get("r_rows") in ("NULL",):
            raw["r_rows"] = None
        extra = row.get("Extra", "")
        if row.get("possible_keys") not in (None, "NULL"):
            raw["possible_keys"] = row["possible_keys"].split(",")
        if row.get("ref") not in (None, "NULL"):
            raw["ref_text"] = row["ref"]
        raws.append((number, row, raw, numbers, extra))
    nodes_made: list[int] = []
    entries = []
    if len(raws) == 1:
        number, row, raw, numbers, extra = raws[0]
        numbers["r_loops"] = 1.0 if numbers.get("r_rows") is not None else None
        return _table_node(builder, raw, numbers, extra, number, parent, relationship).id
    joins = []
    for k in range(len(raws) - 1, 0, -1):
        bnl = "join buffer" in raws[k][4]
        join = PlanNode(id=0, parent=None, operator="block-nl-join" if bnl else "nested_loop", label="")
        joins.append(join)
    top_parent = parent
    for i, join in enumerate(joins):
        join.parent_relationship = relationship if i == 0 else "Outer"
        builder.add(join, top_parent)
        top_parent = join.id
    prefix_actual: float | None = 1.0
    prefix_est: float | None = 1.0
    for k, (number, _row, raw, numbers, extra) in enumerate(raws):
        loops = prefix_actual
        join_r_filtered = None
        if "join buffer" in extra:
            # a buffered (BNL/BNLH) row's r_filtered is the join condition's share of the
            # pairs; the table itself is read per buffer fill, counted here as one read
            join_r_filtered = numbers.pop("r_filtered", None)
            loops = 1.0 if loops else loops
        numbers["r_loops"] = loops if numbers.get("r_rows") is not None else (0.0 if loops == 0 else None)
        join_parent = joins[-1].id if k == 0 else joins[len(raws) - 1 - k].id
        node = _table_node(builder, raw, numbers, extra, number, join_parent, "Outer" if k == 0 else "Inner")
        if k > 0 and join_r_filtered is None:
            node.derived.append(f"loops {loops:,.0f}: the rows the tables before it emitted "
                                "(the tabular output prints no loop counts)" if loops is not None else
                                "loops unknown")
        nodes_made.append(node.id)
        entries.append(node)
        per_loop_actual = node.actual_rows
        if join_r_filtered is not None and per_loop_actual is not None:
            per_loop_actual *= join_r_filtered / 100.0
            node.extra["join_r_filtered"] = join_r_filtered
            if "Using where" in extra:
                # the buffered row's condition is the join's: its selectivity is the join's
                buffered_join = joins[len(raws) - 1 - k]
                buffered_join.unprinted_condition = "join_filter"
                buffered_join.extra["selectivity"] = {"filtered": node.extra.get("filtered"),
                                                      "r_filtered": join_r_filtered, "condition": None}
            node.derived.append("read once: with a join buffer the tabular output does not say "
                                "how often the table was read")
        prefix_est = prefix_est * node.est_rows if prefix_est is not None and node.est_rows is not None else None
        prefix_actual = (prefix_actual * per_loop_actual if prefix_actual is not None and per_loop_actual is not None
                         else (0.0 if node.executed is False else None))
        if k > 0:
            join = joins[len(raws) - 1 - k]
            join.join_type = "Inner"  # the tabular output cannot show an outer join
            join.label = ("block nested loop" if join.operator == "block-nl-join" else "nested loop") + \
                f" ({k + 1} tables)"
            join.est_rows = prefix_est
            if prefix_actual is not None:
                join.starts, join.executed, join.actual_rows = 1.0, True, prefix_actual
    return joins[0].id


def _table_node(builder: _Builder, raw, numbers, extra, number, parent, relationship) -> PlanNode:
    access = raw.get("access_type")
    if not access or access == "NULL":
        access = "NULL"
        if raw.get("table_name") in (None, "", "NULL"):
            node = message_node(extra or None, relationship)
            node.extra["line"] = number
            return builder.add(node, parent)
    node = PlanNode(id=0, parent=None, operator=access, label="")
    node.parent_relationship = relationship
    fill_table(node, raw.get("table_name"), raw, numbers)
    if raw.get("ref_text"):
        node.extra["ref"] = raw["ref_text"]
        if access in KEY_LOOKUPS and raw["ref_text"] not in ("const", "func"):
            node.unprinted_condition = "key_lookup"
    if "Using where" in (extra or "") or (numbers.get("filtered") or 100.0) < 100.0:
        node.unprinted_condition = node.unprinted_condition or "filter"
    if extra:
        node.extra["Extra"] = extra
    node.extra["line"] = number
    if node.actual_rows is not None:
        builder.has_actuals = True
    return builder.add(node, parent)


# ---------------------------------------------------------------------------------------
# Values
# ---------------------------------------------------------------------------------------

def message_node(message: Any, relationship: str | None) -> PlanNode:
    """A statement-level row without a table ("Impossible WHERE", "Deleting all rows"): the
    message the engine printed, no relation."""
    node = PlanNode(id=0, parent=None, operator="message", label=str(message or "no tables"))
    node.relation = None
    node.extra["message"] = message
    node.parent_relationship = relationship
    return node


def masked_note(masked: dict[str, str]) -> str:
    shown = " or ".join(f"'{m}'" for m in sorted(set(masked.values())))
    return (f"masked figures: the plan prints {shown} in place of {', '.join(sorted(masked))} (as the "
            "engine's test suite does); those figures are read as unknown and nothing is judged on them")


def _number(value: Any, key: str, fmt: str) -> float | None:
    return read_number(value, key=key, engine=NAME, fmt=fmt)


# ---------------------------------------------------------------------------------------
# Roles and fixes
# ---------------------------------------------------------------------------------------

IDENT_MAX_CHARS = 64
"""The longest table or column name MariaDB has ("Identifier Names" in the manual)."""


def quote_ident(name: str) -> str:
    """A name in backticks, any backtick doubled: read back exactly whatever the sql_mode
    (ANSI_QUOTES changes only double quotes); a name no quoting makes safe is refused."""
    check_name(name, max_chars=IDENT_MAX_CHARS, engine="MariaDB")
    return "`" + name.replace("`", "``") + "`"


def suggest_fix(cause: str, table: str | None, columns: list[str] | tuple[str, ...] = (),
                **details: Any) -> tuple[str, str] | None:
    """Engine-independent statistics (histograms) in MariaDB's own statements; every name
    quoted by `quote_ident`. Each table gets its own columns (a join's condition spans two);
    where the output printed no condition (the tabular ANALYZE) the columns are unknown, and
    the statement collects every column's statistics of the tables the plan names. With no
    table known at all there is no statement to give."""
    targets = _targets(table, columns, details)
    if not targets:
        return None
    analyze = "\n".join(
        f"ANALYZE TABLE {target} PERSISTENT FOR COLUMNS ({listed}) INDEXES ();" if listed
        else f"ANALYZE TABLE {target} PERSISTENT FOR ALL;"
        for target, listed in targets)
    names = " and ".join(target for target, _ in targets)
    unknown = any(not listed for _, listed in targets)
    caution = (f"ANALYZE TABLE ... PERSISTENT reads the whole of {names} (a full scan, no "
               "sampling in 10.6 to 11.x), sorts each column to build its histogram, and holds a "
               "metadata lock on the table while it runs; the statistics go to mysql.column_stats "
               "and change the plans of every query on the table. "
               + ("PERSISTENT FOR ALL does this for every column and index of the table: name the "
                  "condition's columns instead where you know them. " if unknown else "")
               + "optimizer_use_condition_selectivity must be at least 4 (the default) for "
               "histograms to be used. Whether and when to run it is for your change process and "
               "a DBA to decide.")
    listed_all = ", ".join(listed for _, listed in targets if listed)
    fix = _fix_for(cause, listed_all, analyze)
    if fix is None:
        return None
    if len(targets) == 1:
        note = (f"-- {names} is the name in the plan: MariaDB shows a table's alias when the query "
                "gives one; put the table's own name there.\n")
    else:
        note = (f"-- {', '.join(t for t, _ in targets)} are the names in the plan: MariaDB shows a "
                "table's alias when the query gives one; put each table's own name there.\n")
    if unknown:
        note += ("-- this output format prints no condition, so its columns are not known here; the "
                 "JSON output of the same ANALYZE FORMAT=JSON statement names them.\n")
    return note + fix, caution


def _targets(table: str | None, columns, details: dict[str, Any]) -> list[tuple[str, str]]:
    """(quoted table, its quoted columns or "") for each table the statement is about."""
    parts = details.get("table_parts")
    if parts or table:
        cols = ", ".join(quote_ident(c) for c in columns if c)
        return [(quote_ident(parts[-1] if parts else _bare(table)), cols)]
    by_table = details.get("columns_by_table_parts") or []
    if by_table:
        return [(quote_ident(p[-1]), ", ".join(quote_ident(c) for c in cols if c)) for p, cols in by_table]
    tables = details.get("tables_parts") or []
    seen: dict[str, str] = {}
    for p in tables:
        seen.setdefault(quote_ident(p[-1]), "")
    return list(seen.items())


def _fix_for(cause: str, listed: str, analyze: str) -> str | None:
    if cause in ("skew", "range_gap", "stale_statistics"):
        size = 255 if cause != "stale_statistics" else None
        lines = ["SET SESSION histogram_type = JSON_HB;  -- 10.8 and later; DOUBLE_PREC_HB before"]
        if size:
            lines.append(f"SET SESSION histogram_size = {size};  -- buckets (the most there can be)")
        lines.append(analyze)
        return "\n".join(lines)
    if cause == "correlation":
        sql = ("SET SESSION histogram_type = JSON_HB;\n"
               "SET SESSION histogram_size = 255;\n"
               f"{analyze}\n"
               "-- MariaDB has no multi-column statistics: histograms sharpen each column, but "
               "the optimizer still multiplies their selectivities. An index on "
               + (f"({listed})" if listed else "the correlated columns")
               + " lets it count the combination from the index instead.")
        return sql
    if cause == "default_selectivity":
        sql = (f"{analyze}\n"
               "-- Without statistics on a column MariaDB guesses its selectivity; a column wrapped "
               "in a function gets no statistics at all: compare the bare column instead.")
        return sql
    return None


def _bare(table: str | None) -> str | None:
    return table.split(".")[-1] if table else None


# ---------------------------------------------------------------------------------------
# The engine: its tables, and the hooks no table can say
# ---------------------------------------------------------------------------------------

FIRST_MATCH_REASON = ("stopped early: a semi-join (FirstMatch) or NOT EXISTS reads its inner table "
                      "only up to the first match")


class MariaDB(Engine):
    """MariaDB's tables are its access types and the blocks the reader makes into operators."""

    NAME, FORMATS, SQL_DIALECT = NAME, FORMATS, SQL_DIALECT
    INPUT_RULES = INPUT_RULES
    JOINS = frozenset(JOIN_OPERATORS)
    PRESERVED = {"Left": "outer"}
    COMPLETE_INNER = frozenset({"block-nl-join"})
    BLOCKING = frozenset(BLOCKING)
    WHOLE_RELATION_SCANS = frozenset(WHOLE_RELATION_SCANS)
    CTE_SCANS = None  # a derived table's scan is any access type, marked by its source

    def input_rule(self, node: PlanNode, nodes: list[PlanNode], inputs: list[int]) -> str:
        return INPUT_RULES.get(node.operator, "source")  # a table's own figures are its own

    def inner_stop_reason(self, node: PlanNode, inner: PlanNode) -> str | None:
        return FIRST_MATCH_REASON if inner.extra.get("first_match") or inner.extra.get("not_exists") else None

    def cte_reference(self, node: PlanNode) -> int | None:
        """A derived table's scan re-reads the block it was materialised from."""
        source = node.extra.get("materialized_from")
        return source if isinstance(source, int) and (node.relation or "").startswith("<derived") else None

    def cte_read(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan) -> int | None:
        return self.cte_reference(node)

    def refine(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan, role: Role) -> None:
        """A full scan that read far fewer rows than the table holds was stopped by the query."""
        rows, r_rows = node.extra.get("rows"), node.extra.get("r_rows")
        conditions_consumed = any(c.kind == "index_cond" for c in node.conditions)
        if node.operator in FULL_SCANS and not conditions_consumed and rows and r_rows is not None \
                and (node.starts or 0) <= 1 and r_rows < rows / 2 and not (node.relation or "").startswith("<"):
            role.stopped = (f"stopped early: the full scan read {r_rows:,.0f} of the about "
                            f"{rows:,.0f} rows of {node.relation}, so the query stopped it (a LIMIT "
                            "the plan does not show, or a first match)")

    # The manual's ANALYZE FORMAT=JSON: r_total_time_ms is "how much time in total, in
    # milliseconds, was spent executing this node", its subnodes included; a table prints
    # r_table_time_ms (in the storage engine) and r_other_time_ms (the rest of the join's work
    # at that table: conditions, buffers), over all its loops. Checked on 10.11: the tables'
    # times add up to the query block's r_total_time_ms; a filesort that reads its table itself
    # holds that table's time, one that sorts a temporary table holds only its own; a
    # sub-query's tables are not in the outer table's time.
    TIME_PRINTED = "exclusive"
    TIME_RULES = (
        ("table", "r_table_time_ms + r_other_time_ms, over all its loops, its own"),
        ("block nested loop", "r_unpack_time_ms + r_other_time_ms of the join buffer, its own"),
        ("nested loop", "0 ms of its own: MariaDB counts the join's work at its tables"),
        ("filesort", "r_total_time_ms holds the table it reads itself (own = that less the "
                     "table's); over a temporary table it is the sort's own"),
        ("temporary table, union result", "0 ms of its own (no time printed; the writes are "
                                          "counted at the tables)"),
        ("sub-query", "its own block's tables, added to the query's time"),
        ("masked (\"REPLACED\")", "unknown"),
    )

    def time_of(self, node: PlanNode, nodes: list[PlanNode]) -> tuple[str, float] | None:
        extra = node.extra
        if node.operator == "filesort":
            total = extra.get("r_total_time_ms")
            if not isinstance(total, (int, float)) or isinstance(total, bool):
                return None
            reads_itself = all(nodes[c].operator not in ("temporary_table", "filesort")
                               for c in node.children if nodes[c].is_input_edge)
            return ("with_inputs_in_all" if reads_itself else "own_in_all", float(total))
        keys = ("r_unpack_time_ms", "r_other_time_ms") if node.operator == "block-nl-join" \
            else ("r_table_time_ms", "r_other_time_ms")
        found = [extra[k] for k in keys if isinstance(extra.get(k), (int, float))
                 and not isinstance(extra.get(k), bool)]
        if found:
            return ("own_in_all", float(sum(found)))
        if node.operator in ("nested_loop", "block-nl-join", "temporary_table", "union_result",
                             "read_sorted_file", "message") and not self._masked(node):
            return ("own_in_all", 0.0)
        return None

    @staticmethod
    def _masked(node: PlanNode) -> bool:
        return any(isinstance(v, str) and v.strip() in MASKED for v in node.extra.values())

    def suggest_fix(self, cause, table, columns=(), **details):
        return suggest_fix(cause, table, columns, **details)


ENGINE = MariaDB()
role = ENGINE.role
