"""DuckDB: the JSON profile (0.x, 1.x, 2.x), EXPLAIN (FORMAT json), and the box-drawn text.

DuckDB counts rows per operator over the whole query (there are no loops), so every node
has one start and its counts are totals. Estimates sit in ``extra_info["Estimated
Cardinality"]`` (1.x and later, a string) or as an ``EC: N`` line (0.x). Actual rows are
``intermediate_rows`` (2.x), ``operator_cardinality`` (1.x) or ``cardinality`` (0.x).

The text rendering is a drawing of boxes. It is read by finding each box's rectangle; a
box's parent is the nearest box above it that starts at or left of it (DuckDB draws each
subtree from its parent's column rightwards). Recent text renderings of EXPLAIN ANALYZE
show actual rows only, so such a plan is accepted and says that its estimates are missing.
"""

from __future__ import annotations

import re
from bisect import bisect_right, insort
from collections.abc import Hashable
from typing import Any

from ..check import Role
from ..errors import PlanParseError
from ..index import index_of
from ..inert import check_name
from ..model import Condition, ParsedPlan, PlanNode, Statement
from ._dispatch import dispatch, json_document
from ._tree import append_node, check_depth, link_inputs, read_number
from .base import Engine

NAME = "duckdb"
ALIASES = ("duck",)
FORMATS = ("json", "text")
SQL_DIALECT = "duckdb"

# ---------------------------------------------------------------------------------------
# Tables: the engine's vocabulary
# ---------------------------------------------------------------------------------------

# The tops of a profile that are not operators: they are unwrapped when they have one child.
WRAPPERS = {"RESULT_COLLECTOR", "EXPLAIN_ANALYZE", "QUERY", "EXPLAIN"}

ACTUAL_KEYS = ("intermediate_rows", "operator_cardinality", "cardinality")
NAME_KEYS = ("name", "operator_name", "operator_type", "type")
TIME_KEYS = ("timing", "operator_timing")
ESTIMATE_KEY = "Estimated Cardinality"

JOINS = {
    "HASH_JOIN", "NESTED_LOOP_JOIN", "PIECEWISE_MERGE_JOIN", "IE_JOIN", "BLOCKWISE_NL_JOIN",
    "CROSS_PRODUCT", "POSITIONAL_JOIN", "ASOF_JOIN", "LEFT_DELIM_JOIN", "RIGHT_DELIM_JOIN",
    "DELIM_JOIN",
}
AGGREGATES = {
    "HASH_GROUP_BY", "PERFECT_HASH_GROUP_BY", "UNGROUPED_AGGREGATE", "SIMPLE_AGGREGATE",
    "PARTITIONED_AGGREGATE", "STREAMING_WINDOW_AGGREGATE",
}
# How each operator's own error is separated from its inputs' (planview.check.RULES).
INPUT_RULES: dict[str, str] = {
    **{op: "join" for op in JOINS},
    **{op: "source" for op in AGGREGATES},
    "PROJECTION": "pass", "FILTER": "pass", "ORDER_BY": "pass", "LIMIT": "limit",
    "STREAMING_LIMIT": "limit", "LIMIT_PERCENT": "pass", "TOP_N": "limit", "WINDOW": "pass",
    "STREAMING_WINDOW": "pass", "UNNEST": "pass", "STREAMING_SAMPLE": "pass",
    "RESERVOIR_SAMPLE": "pass", "RESULT_COLLECTOR": "pass", "EXPLAIN_ANALYZE": "pass",
    "REORDER": "pass", "BATCH_COLLECTOR": "pass",
    "UNION": "sum", "RECURSIVE_CTE": "sum",
    # a materialised CTE reports no rows of its own (0 in 2.x); its scans re-read it, and it
    # returns what its last child (the query after the CTE) returns (see DuckDB.refine)
    "CTE": "uncounted", "CTE_SCAN": "cte",
}
# a grouping node's count scales with its input's estimate ("group" where the check has it)
GROUPING = {"HASH_GROUP_BY", "PERFECT_HASH_GROUP_BY", "PARTITIONED_AGGREGATE"}
# pass-through operators that normally copy their input's estimate: when they print another,
# DuckDB estimated them afresh (after a rewrite), so their error is their own
PURE_PASS = {"PROJECTION", "ORDER_BY", "WINDOW", "STREAMING_WINDOW", "RESULT_COLLECTOR",
             "BATCH_COLLECTOR", "REORDER"}
# DuckDB applies a fixed selectivity to a comparison it has no statistics for: measured 0.2
# for a range on 2.0.1 (300,000 rows, `id > 5` estimated at 60,000; plans/ENGINES.md)
DEFAULT_SELECTIVITIES = {"DuckDB's default filter selectivity": 0.2}
BLOCKING = {"ORDER_BY", "TOP_N", "WINDOW", *AGGREGATES - {"STREAMING_WINDOW_AGGREGATE"}}
LIMITS = {"LIMIT", "STREAMING_LIMIT", "LIMIT_PERCENT"}
SEMI_OUTER = {"SEMI", "ANTI", "MARK"}
SEMI_INNER = {"RIGHT_SEMI", "RIGHT_ANTI"}
PRESERVED = {"LEFT": "outer", "RIGHT": "inner", "OUTER": "both", "FULL": "both"}
JOIN_TYPES = {"INNER", "LEFT", "RIGHT", "OUTER", "FULL", "SEMI", "ANTI", "MARK", "SINGLE",
              "RIGHT_SEMI", "RIGHT_ANTI", "CROSS"}

CONDITION_KEYS = {
    "Conditions": "join_cond",  # hash_cond on a HASH_JOIN
    "Filters": "filter",
    "Expression": "filter",
    "Dynamic Filters": "dynamic_filter",  # kept in extra["dynamic_filters"], see _apply_info
}
# extra_info keys that become PlanNode fields; the others stay in extra["extra_info"].
FIELD_INFO_KEYS = {ESTIMATE_KEY, "Table", "Join Type", *CONDITION_KEYS}

_RUNTIME_FILTER = re.compile(r"\bPRF\(|Dynamic Filter|^optional:.*\bIN\b \(")
_IMPLIED_NOT_NULL = re.compile(r"^(.*\S)\s+AND\s+(\w+) IS NOT NULL$")
DYNAMIC_FILTER_REASON = (
    "not judged: the join above pushed a filter built from its other input into this one "
    "while running (a dynamic filter: {how}); the estimate leaves it out, so fewer actual "
    "rows are no misestimate"
)


# ---------------------------------------------------------------------------------------
# Detection
# ---------------------------------------------------------------------------------------

_BOX_CORNER = re.compile(r"[┌╭][─━]")
_ROWS_IN_BOX = re.compile(r"│[^│\n]*(~?[\d,]+ [Rr]ows?\b|EC: \d+)")


def detect(text: str) -> tuple[str, float] | None:
    head = text[:20000].lstrip("\ufeff \t\r\n")
    if head.startswith(("{", "[")):
        keys = re.findall(r'"([A-Za-z_ ]+)"\s*:', head[:20000])
        found = set(keys)
        if found & {"intermediate_rows", "operator_cardinality", "operator_type"}:
            return "json", 0.97
        if "extra_info" in found and ("children" in found) and (
                "cardinality" in found or ESTIMATE_KEY in found or "timings" in found):
            return "json", 0.9
        if "extra_info" in found and "children" in found and "name" in found:
            return "json", 0.8
        return None
    if _BOX_CORNER.search(head) and ("│" in head) and (
            _ROWS_IN_BOX.search(head) or re.search(r"(Query Profiling Information|Total Time:)", head)):
        return "text", 0.9
    return None


def parse(text: str, fmt: str) -> ParsedPlan:
    return dispatch(NAME, "DuckDB", {"json": _parse_json, "text": _parse_text}, text, fmt)

# ---------------------------------------------------------------------------------------
# JSON
# ---------------------------------------------------------------------------------------

def _parse_json(text: str) -> ParsedPlan:
    body = text.lstrip("\ufeff")
    doc = json_document(body, NAME)
    statement = Statement(root=0)
    version = None
    if isinstance(doc, dict) and isinstance(doc.get("operator"), list):
        tops, path = doc["operator"], "operator"
        version = "2.x"
        query = doc.get("query") if isinstance(doc.get("query"), dict) else {}
        statement.query_text = _opt_str(query.get("sql"))
        seconds = query.get("total_time", doc.get("latency"))
        statement.execution_ms = _seconds_ms(seconds, "query.total_time")
        statement.extra = {k: v for k, v in doc.items() if k != "operator"}
    elif isinstance(doc, dict) and isinstance(doc.get("children"), list):
        tops, path = doc["children"], "children"
        if "query_name" in doc or "latency" in doc:
            version = "1.x"
            statement.query_text = _opt_str(doc.get("query_name"))
            statement.execution_ms = _seconds_ms(doc.get("latency"), "latency")
        else:
            version = "0.x"
            statement.query_text = _opt_str(doc.get("extra-info"))
            statement.execution_ms = _seconds_ms(doc.get("timing"), "timing")
        statement.extra = {k: v for k, v in doc.items() if k != "children"}
    elif isinstance(doc, list):
        tops, path = doc, ""
    else:
        raise PlanParseError("expected a DuckDB profile: an object with \"operator\" or "
                             "\"children\", or a list of operators", key="$", engine=NAME, fmt="json")
    raws = [(t, f"{path}[{i}]" if path else f"[{i}]") for i, t in enumerate(tops)]
    roots = _unwrap(raws)
    if not roots:
        raise PlanParseError("no operator found", key=path or "$", engine=NAME, fmt="json")
    nodes: list[PlanNode] = []
    statements: list[Statement] = []
    has_actuals = False
    for stmt_no, (raw, key_path) in enumerate(roots):
        if stmt_no:
            statement = Statement(root=len(nodes))
        statement.root = len(nodes)
        statements.append(statement)
        todo: list[tuple[Any, int | None, int, str]] = [(raw, None, 0, key_path)]
        while todo:
            item, parent, depth, where = todo.pop()
            check_depth(depth, key=where, engine=NAME, fmt="json")
            node = append_node(nodes, _node_from_json(item, len(nodes), parent, depth, stmt_no, where,
                                                      version), parent)
            has_actuals = has_actuals or node.actual_rows is not None
            kids = item.get("children") or []
            if not isinstance(kids, list):
                raise PlanParseError("\"children\" is not a list", key=f"{where}.children",
                                     engine=NAME, fmt="json")
            for i in range(len(kids) - 1, -1, -1):
                todo.append((kids[i], node.id, depth + 1, f"{where}.children[{i}]"))
    _relationships(nodes)
    notes = []
    if not has_actuals:
        notes.append("no actuals: this is EXPLAIN without ANALYZE, so estimates cannot be "
                     "checked; use EXPLAIN (ANALYZE, FORMAT json) or PRAGMA enable_profiling='json'")
    if has_actuals and not any(n.est_rows is not None for n in nodes):
        notes.append("no estimates in this profile, so nothing can be checked")
    return ParsedPlan(engine=NAME, format="json", nodes=nodes, statements=statements,
                      engine_version=version, has_actuals=has_actuals, notes=notes)


def _unwrap(raws: list[tuple[Any, str]]) -> list[tuple[dict, str]]:
    """Skip the wrapper nodes at the top of a profile (result collector, explain-analyze)."""
    out: list[tuple[dict, str]] = []
    todo = list(reversed(raws))
    while todo:
        raw, where = todo.pop()
        if not isinstance(raw, dict):
            raise PlanParseError("an operator is not an object", key=where, engine=NAME, fmt="json")
        name = _operator_name(raw, where)
        kids = raw.get("children")
        if name in WRAPPERS and isinstance(kids, list) and kids:
            todo.extend(reversed([(k, f"{where}.children[{i}]") for i, k in enumerate(kids)]))
            continue
        out.append((raw, where))
    return out


def _operator_name(raw: dict, where: str) -> str:
    for key in NAME_KEYS:
        value = raw.get(key)
        if value is None:
            continue
        if not isinstance(value, str) or not value.strip():
            raise PlanParseError(f"operator name is not text: {value!r}", key=f"{where}.{key}",
                                 engine=NAME, fmt="json")
        return value.strip().upper().replace(" ", "_")
    raise PlanParseError("operator without a name (expected \"name\", \"operator_name\", "
                         "\"operator_type\" or \"type\")", key=where, engine=NAME, fmt="json")


def _node_from_json(raw: Any, node_id: int, parent: int | None, depth: int, stmt_no: int,
                    where: str, version: str | None) -> PlanNode:
    if not isinstance(raw, dict):
        raise PlanParseError("an operator is not an object", key=where, engine=NAME, fmt="json")
    operator = _operator_name(raw, where)
    node = PlanNode(id=node_id, parent=parent, operator=operator, label="", statement=stmt_no,
                    depth=depth)
    for key in NAME_KEYS:
        value = raw.get(key)
        if isinstance(value, str) and value.strip().upper() != operator:
            node.extra[key] = value
    info = raw.get("extra_info", {})
    if isinstance(info, str):
        info = _legacy_info(info, operator)
        node.extra["extra_info_text"] = raw["extra_info"]
    elif info is None:
        info = {}
    elif not isinstance(info, dict):
        raise PlanParseError(f"\"extra_info\" is neither an object nor text: {type(info).__name__}",
                             key=f"{where}.extra_info", engine=NAME, fmt="json")
    _apply_info(node, info, f"{where}.extra_info", "json")
    for key in ACTUAL_KEYS:
        if key in raw:
            rows = _count(raw[key], f"{where}.{key}", "json")
            if rows is not None:
                node.actual_rows = rows
                node.starts = 1.0
                node.executed = True
            break
    for key in TIME_KEYS:
        if key in raw:
            seconds = _count(raw[key], f"{where}.{key}", "json")
            if seconds is not None:
                node.extra["own_time_ms"] = seconds * 1000.0
            break
    for key in ("rows_scanned", "operator_rows_scanned", "row_groups_scanned",
                "total_row_groups_to_scan", "intermediate_size_bytes", "result_set_size"):
        if key in raw and isinstance(raw[key], (int, float)) and not isinstance(raw[key], bool):
            node.extra[key] = raw[key]
    scanned = raw.get("rows_scanned", raw.get("operator_rows_scanned"))
    if isinstance(scanned, (int, float)) and not isinstance(scanned, bool) \
            and node.actual_rows is not None and node.operator.endswith("SCAN") \
            and any(c.kind == "filter" for c in node.conditions) \
            and not node.extra.get("dynamic_filters") \
            and scanned >= node.actual_rows:
        # rows read from storage (after skipping row groups) less the rows the filters kept
        node.rows_removed = {"Filter": float(scanned) - node.actual_rows}
    node.label = compose_label(node)
    return node


def _legacy_info(text: str, operator: str) -> dict[str, Any]:
    """0.x writes extra_info as one string, sections split by [INFOSEPARATOR]."""
    info: dict[str, Any] = {}
    sections = [s.strip() for s in text.split("[INFOSEPARATOR]")]
    plain: list[str] = []
    for section in sections:
        if not section:
            continue
        ec = re.fullmatch(r"EC:\s*(\S+)", section)
        if ec:
            info[ESTIMATE_KEY] = ec.group(1)
            continue
        if section.startswith("Filters:"):
            info["Filters"] = [x.strip() for x in section[len("Filters:"):].split("\n") if x.strip()]
            continue
        keyed = [re.match(r"^([A-Z][A-Za-z ]{1,40}):\s*(.+)$", x.strip()) for x in section.split("\n")]
        if all(keyed):
            info.update({m.group(1): m.group(2) for m in keyed if m})
            continue
        plain.append(section)
    if operator.endswith("_JOIN") and plain:
        lines = [x.strip() for x in plain[0].split("\n") if x.strip()]
        if lines and lines[0] in JOIN_TYPES:
            info["Join Type"] = lines.pop(0)
        if lines:
            info["Conditions"] = lines
        plain = plain[1:]
    elif operator.endswith("_SCAN") and plain and "\n" not in plain[0] and operator != "CTE_SCAN":
        info["Table"] = plain.pop(0)
    elif operator == "FILTER" and plain:
        info["Expression"] = plain.pop(0)
    if plain:
        info["details"] = plain
    return info


def _apply_info(node: PlanNode, info: dict[str, Any], where: str, fmt: str) -> None:
    if ESTIMATE_KEY in info:
        node.est_rows = _count(info[ESTIMATE_KEY], f"{where}.\"{ESTIMATE_KEY}\"", fmt)
    table = info.get("Table")
    if table is None and node.operator.endswith("_SCAN") and isinstance(info.get("Text"), str) \
            and re.fullmatch(r"[\w.\"]+", info["Text"]):
        table = info["Text"]  # 1.1 names the table under "Text"
    if table is not None:
        table = _join_text(table, f"{where}.Table", fmt)
        parts = table.split(".")
        node.relation = parts[-1]
        if len(parts) > 1:
            node.schema = parts[-2]
        if len(parts) > 2:
            node.extra["catalog"] = ".".join(parts[:-2])
    join_type = info.get("Join Type")
    if join_type is not None:
        node.join_type = _join_text(join_type, f"{where}.\"Join Type\"", fmt).upper()
    elif node.operator in JOINS:
        node.join_type = "INNER"
    for key, kind in CONDITION_KEYS.items():
        value = info.get(key)
        if value is None or value == "" or value == []:
            continue
        if key == "Conditions" and node.operator == "HASH_JOIN":
            kind = "hash_cond"
        items = value if isinstance(value, list) else [value]
        if fmt == "text" and isinstance(value, list):
            items = _rejoin_wrapped(items)
        for i, item in enumerate(items):
            text = _join_text(item, f"{where}.\"{key}\"[{i}]", fmt)
            for part in ([text] if key != "Conditions" else text.split("\n")):
                part = part.strip()
                if not part:
                    continue
                if kind == "dynamic_filter" or (kind == "filter" and _RUNTIME_FILTER.search(part)):
                    # filled in while running, from a join's other side or a Top-N's bound:
                    # no estimate ever saw it, so it is kept apart from the conditions
                    node.extra.setdefault("dynamic_filters", []).append(part)
                    continue
                implied = _IMPLIED_NOT_NULL.match(part)
                if implied and re.match(rf"\(?{re.escape(implied.group(2))}\b", implied.group(1)):
                    # 0.x and 1.1 print `c=7 AND c IS NOT NULL`: the second half is implied
                    node.extra.setdefault("filters_as_printed", []).append(part)
                    part = implied.group(1)
                node.conditions.append(Condition(kind=kind, text=part, key=key))
    rest = {k: v for k, v in info.items() if k not in FIELD_INFO_KEYS}
    if rest:
        node.extra["extra_info"] = rest


def _rejoin_wrapped(items: list) -> list:
    """The square boxes wrap long lines at the box's width: put the pieces back together."""
    out: list = []
    for item in items:
        if out and isinstance(item, str) and isinstance(out[-1], str) and (
                item in ("NULL", "NOT NULL") or re.search(r"\b(NOT|IS|AND|OR)$|[(,]$", out[-1])):
            out[-1] = f"{out[-1]} {item}"
        else:
            out.append(item)
    return out


def _relationships(nodes: list[PlanNode]) -> None:
    """Joins read their first child as the probe (outer) side and build on the second."""
    link_inputs(nodes, lambda node: node.operator in JOINS,
                lambda node: node.operator in ("UNION", "RECURSIVE_CTE"))


def compose_label(node: PlanNode) -> str:
    words = node.operator.replace("_", " ").title()
    for short in ("Cte", "Ie ", "Nl "):
        words = words.replace(short, short.upper())
    if node.operator in JOINS and node.join_type and node.join_type != "INNER":
        words += f" ({node.join_type})"
    if node.relation:
        words += f" on {node.relation}"
    return words


# ---------------------------------------------------------------------------------------
# Text: the box drawing
# ---------------------------------------------------------------------------------------

_TOP_LEFT = "┌╭"
_TOP_RIGHT = "┐╮"
_BOTTOM_LEFT = "└╰"
_SEPARATOR = re.compile(r"^[─━\s]*$|^(─ )+─?$")
_ESTIMATE_LINE = re.compile(r"^(?:~([\d,.]+) [Rr]ows?|EC:\s*([\d,.]+))$")
_ACTUAL_LINE = re.compile(r"^([\d,]+) [Rr]ows?(?:\s+[\d.]+\s*(?:µs|us|ms|s|m|h))?$")
_TIME_LINE = re.compile(r"^\((\d+(?:\.\d+)?)s\)$")
_HEADERS = ("Query Profiling Information", "Total Time:")


def _parse_text(text: str) -> ParsedPlan:
    lines = text.replace("\t", "    ").splitlines()
    boxes = _find_boxes(lines)
    nested = _nested_boxes(boxes)
    boxes = [b for i, b in enumerate(boxes) if i not in nested]
    operators = []
    total_ms = None
    for box in boxes:
        title, content = _box_text(box, lines)
        joined = " ".join([title or "", *content])
        if any(h in joined for h in _HEADERS) or title == "Summary":
            found = re.search(r"Total Time:\s*(\d+(?:\.\d+)?)s", joined)
            if found:
                total_ms = float(found.group(1)) * 1000.0
            continue
        box["title"], box["content"] = title, content
        operators.append(box)
    if not operators:
        first = next((i for i, x in enumerate(lines, 1) if x.strip()), 1)
        raise PlanParseError("no operator box found in DuckDB's text rendering", line=first,
                             engine=NAME, fmt="text")
    operators.sort(key=lambda b: (b["top"], b["left"]))
    parents = _pair_boxes(operators)
    kids: dict[int | None, list[int]] = {}
    for i in range(len(operators)):
        kids.setdefault(parents[i], []).append(i)
    for members in kids.values():
        members.sort(key=lambda j: (operators[j]["left"], operators[j]["top"]))
    # unwrap the wrapper boxes at the top, then number the boxes in pre-order
    order: list[tuple[int, int | None, int]] = []
    todo = [(r, None, 0) for r in reversed(kids.get(None, []))]
    while todo:
        box_no, parent, depth = todo.pop()
        name = _text_operator(operators[box_no])
        if name in WRAPPERS and parent is None and kids.get(box_no):
            todo.extend((k, None, 0) for k in reversed(kids[box_no]))
            continue
        check_depth(depth, line=operators[box_no]["top"] + 1, engine=NAME, fmt="text")
        order.append((box_no, parent, depth))
        todo.extend((k, box_no, depth + 1) for k in reversed(kids.get(box_no, [])))
    id_of: dict[int, int] = {}
    nodes: list[PlanNode] = []
    statements: list[Statement] = []
    for box_no, parent_box, depth in order:
        parent = id_of.get(parent_box) if parent_box is not None else None
        if parent is None:
            statements.append(Statement(root=len(nodes), execution_ms=total_ms if not statements else None))
        node = append_node(nodes, _node_from_box(operators[box_no], len(nodes), parent, depth,
                                                 len(statements) - 1), parent)
        id_of[box_no] = node.id
    _relationships(nodes)
    has_actuals = any(n.actual_rows is not None for n in nodes)
    has_estimates = any(n.est_rows is not None for n in nodes)
    notes = []
    if has_actuals and not has_estimates:
        notes.append("estimates are missing: DuckDB's text rendering of EXPLAIN ANALYZE shows "
                     "actual rows only; run EXPLAIN (ANALYZE, FORMAT json) (or PRAGMA "
                     "enable_profiling='json') to get the estimates beside them")
    if not has_actuals:
        notes.append("no actuals: this is EXPLAIN without ANALYZE, so estimates cannot be "
                     "checked; use EXPLAIN (ANALYZE, FORMAT json)")
    version = None
    if any(b["style"] == "round" for b in operators):
        version = "1.2+"
    elif any(_ESTIMATE_LINE.match(x) and x.startswith("EC") for b in operators for x in b["content"]):
        version = "0.x"
    return ParsedPlan(engine=NAME, format="text", nodes=nodes, statements=statements,
                      engine_version=version, has_actuals=has_actuals, notes=notes)


def _nested_boxes(boxes: list[dict]) -> set[int]:
    """The boxes drawn inside another box (the double frame of a heading), by position.

    A box lies inside another only if its top-left corner does, so each box looks for the
    corners on its inner rows (a bisect a row) instead of comparing every pair of boxes."""
    corners: dict[int, list[tuple[int, int]]] = {}
    for i, box in enumerate(boxes):
        corners.setdefault(box["top"], []).append((box["left"], i))
    for row in corners.values():
        row.sort()
    nested: set[int] = set()
    for outer in boxes:
        for row in range(outer["top"] + 1, outer["bottom"]):
            on_row = corners.get(row)
            if not on_row:
                continue
            at = bisect_right(on_row, (outer["left"], len(boxes)))
            while at < len(on_row) and on_row[at][0] < outer["right"]:
                inner = boxes[on_row[at][1]]
                if inner["bottom"] < outer["bottom"] and inner["right"] < outer["right"]:
                    nested.add(on_row[at][1])
                at += 1
    return nested


def _pair_boxes(operators: list[dict]) -> dict[int, int | None]:
    """Each box's parent: of the boxes ending above its top and starting at or left of its
    left edge, the one furthest right, and of those the lowest (the first when two tie).

    One sweep down the page (`operators` sorted by top, then left): the boxes that have ended
    are kept as their left edges (sorted) with the lowest box ending at each."""
    by_bottom = sorted(range(len(operators)), key=lambda j: (operators[j]["bottom"], j))
    lefts: list[int] = []
    lowest_at: dict[int, tuple[int, int]] = {}  # left edge -> (bottom, index) of the lowest box
    ended = 0
    parents: dict[int, int | None] = {}
    for i, box in enumerate(operators):
        while ended < len(by_bottom) and operators[by_bottom[ended]]["bottom"] < box["top"]:
            j = by_bottom[ended]
            left, bottom = operators[j]["left"], operators[j]["bottom"]
            known = lowest_at.get(left)
            if known is None:
                insort(lefts, left)
                lowest_at[left] = (bottom, j)
            elif bottom > known[0] or (bottom == known[0] and j < known[1]):
                lowest_at[left] = (bottom, j)
            ended += 1
        at = bisect_right(lefts, box["left"])
        parents[i] = lowest_at[lefts[at - 1]][1] if at else None
    return parents


def _find_boxes(lines: list[str]) -> list[dict]:
    boxes = []
    for row, line in enumerate(lines):
        for col, char in enumerate(line):
            if char not in _TOP_LEFT or col + 1 >= len(line) or line[col + 1] not in "─━":
                continue
            right = next((c for c in range(col + 1, len(line)) if line[c] in _TOP_RIGHT), None)
            if right is None:
                raise PlanParseError("a box's top border has no right corner", line=row + 1,
                                     engine=NAME, fmt="text")
            bottom = None
            for below in range(row + 1, len(lines)):
                edge = lines[below][col] if col < len(lines[below]) else " "
                if edge in _BOTTOM_LEFT:
                    bottom = below
                    break
                if edge not in "│┃├┠":
                    break
            if bottom is None:
                raise PlanParseError("a box is not closed (its left border stops)", line=row + 1,
                                     engine=NAME, fmt="text")
            boxes.append({"top": row, "bottom": bottom, "left": col, "right": right,
                          "style": "round" if char == "╭" else "square"})
    return boxes


def _box_text(box: dict, lines: list[str]) -> tuple[str | None, list[str]]:
    top = lines[box["top"]][box["left"] + 1:box["right"]]
    title_match = re.match(r"^[─━]\s(.+?)\s[─━┴┚┖┬]", top + " ─")
    title = title_match.group(1).strip() if title_match else None
    content = []
    for row in range(box["top"] + 1, box["bottom"]):
        line = lines[row]
        content.append(line[box["left"] + 1:box["right"]].strip() if len(line) > box["left"] else "")
    return title, content


def _text_operator(box: dict) -> str:
    name = box.get("title")
    if not name:
        name = next((x for x in box["content"] if x.strip()), "")
    return name.strip().upper().replace(" ", "_")


def _node_from_box(box: dict, node_id: int, parent: int | None, depth: int, stmt_no: int) -> PlanNode:
    line_no = box["top"] + 1
    content = [x for x in box["content"]]
    if not box.get("title"):
        while content and not content[0]:
            content.pop(0)
        if content:
            content.pop(0)  # the name line of the square boxes
    operator = _text_operator(box)
    if not operator or not re.fullmatch(r"[A-Z0-9_]+", operator):
        raise PlanParseError(f"cannot read the operator name {operator!r}", line=line_no,
                             engine=NAME, fmt="text")
    node = PlanNode(id=node_id, parent=parent, operator=operator, label="", statement=stmt_no,
                    depth=depth)
    info: dict[str, Any] = {}
    details: list[str] = []
    key: str | None = None
    sections: list[list[str]] = [[]]
    for i, raw in enumerate(content):
        text = raw.strip()
        where_line = box["top"] + 2 + i
        if not text:
            key = None
            continue
        if _SEPARATOR.match(text):
            key = None
            sections.append([])
            continue
        est = _ESTIMATE_LINE.match(text)
        if est:
            node.est_rows = _count(est.group(1) or est.group(2), None, "text", line=where_line)
            key = None
            continue
        actual = _ACTUAL_LINE.match(text)
        if actual:
            node.actual_rows = _count(actual.group(1), None, "text", line=where_line)
            key = None
            continue
        if re.fullmatch(r"[\d,]+", text):
            following = next((x.strip() for x in content[i + 1:] if x.strip()), "")
            if _TIME_LINE.match(following):
                node.actual_rows = _count(text, None, "text", line=where_line)
                continue
        timed = _TIME_LINE.match(text)
        if timed:
            node.extra["own_time_ms"] = float(timed.group(1)) * 1000.0
            continue
        keyed = re.match(r"^([A-Z][A-Za-z ]{1,40}):\s*(.*)$", text)
        if keyed and keyed.group(1) != "optional":
            key = keyed.group(1)
            info.setdefault(key, [])
            if keyed.group(2):
                info[key].append(keyed.group(2))
            continue
        if key is not None:
            info[key].append(text)
        else:
            sections[-1].append(text)
            details.append(text)
    for name, values in list(info.items()):
        info[name] = values[0] if len(values) == 1 else values
    if node.operator.endswith("_SCAN") and "Table" not in info and details and \
            node.operator != "CTE_SCAN" and re.fullmatch(r"[\w.\"]+", details[0]):
        info["Table"] = details.pop(0)
    if node.operator == "FILTER" and "Expression" not in info and details:
        info["Expression"] = details.pop(0)
    if node.operator in JOINS and "Join Type" not in info and details and details[0] in JOIN_TYPES:
        info["Join Type"] = details.pop(0)
        if details and "Conditions" not in info:
            info["Conditions"] = details.pop(0)
    if isinstance(info.get("Conditions"), list):
        info["Conditions"] = [x.rstrip(",") for x in info["Conditions"]]
    if details:
        info["details"] = details
    _apply_info(node, info, f"box at line {line_no}", "text")
    if node.actual_rows is not None:
        node.starts = 1.0
        node.executed = True
    node.extra["line"] = line_no
    node.label = compose_label(node)
    return node


# ---------------------------------------------------------------------------------------
# Values
# ---------------------------------------------------------------------------------------

def _count(value: Any, key: str | None, fmt: str, line: int | None = None) -> float | None:
    return read_number(value, engine=NAME, fmt=fmt, key=key, line=line, thousands=True)


def _seconds_ms(value: Any, key: str) -> float | None:
    if value is None:
        return None
    seconds = _count(value, key, "json")
    return None if seconds is None else seconds * 1000.0


def _opt_str(value: Any) -> str | None:
    return value if isinstance(value, str) else None


def _join_text(value: Any, key: str, fmt: str) -> str:
    if isinstance(value, str):
        return value
    if isinstance(value, list) and all(isinstance(x, str) for x in value):
        return "\n".join(value)
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return str(value)
    raise PlanParseError(f"expected text, got {type(value).__name__}", key=key, engine=NAME, fmt=fmt)


# ---------------------------------------------------------------------------------------
# Roles and fixes
# ---------------------------------------------------------------------------------------

_STRING_OR_CAST = re.compile(r"'(?:[^']|'')*'|::\s*[A-Za-z_][\w ]*(?:\([^)]*\))?")
_IDENT = re.compile(r"[A-Za-z_][\w$]*")
_FILTER_WORDS = frozenset({"optional", "IN", "PRF", "AND", "OR", "NOT", "IS", "NULL", "DISTINCT",
                           "FROM", "TRUE", "FALSE", "BETWEEN", "LIKE"})
_KEY_PAIR = re.compile(r"^\(?\s*([\w.\"]+)\s+(?:=|IS NOT DISTINCT FROM)\s+([\w.\"]+)\s*\)?$")


def _names(text: str) -> set[str]:
    """The column names a printed condition mentions (literals, casts and keywords left out)."""
    return set(_IDENT.findall(_STRING_OR_CAST.sub(" ", text))) - _FILTER_WORDS


def _join_keys(join: PlanNode) -> list[tuple[str, str]]:
    """(probe column, build column) of each plain equality of a hash join: DuckDB prints the
    probe side's expression first (the join's first child is its probe side)."""
    keys = []
    for condition in join.conditions:
        if condition.kind in ("hash_cond", "join_cond"):
            pair = _KEY_PAIR.match(condition.text)
            if pair:
                keys.append(tuple(x.split(".")[-1].strip('"') for x in pair.groups()))
    return keys


def runtime_filters(parsed: ParsedPlan) -> dict[int, list[tuple[int | None, str]]]:
    """Each node carrying run-time filters, to (the hash join that pushed it, its text) per
    filter. DuckDB pushes a join's filter into its probe side only, on the probe's key column,
    which can lie several joins down (TPC-H Q7: the customer join's `o_custkey IN PRF(c_custkey)`
    sits on the orders scan two joins below it): the filter belongs to the nearest join above it,
    on whose probe side it lies, whose condition names that column; without one, to the nearest
    join above on whose probe side it lies. One pre-order pass with a stack of open probe sides."""
    cached = parsed.engine_facts.get("runtime_filters")
    if cached is not None:
        return cached
    index = index_of(parsed)
    found: dict[int, list[tuple[int | None, str]]] = {}
    open_sides: list[tuple[int, int, set[str]]] = []  # (end of the probe side, join, probe keys)
    by_key: dict[str, list[int]] = {}
    for node in index.walk():
        position = index.position[node.id]
        while open_sides and position >= open_sides[-1][0]:
            _, _, keys = open_sides.pop()
            for key in keys:
                by_key[key].pop()
        texts = node.extra.get("dynamic_filters")
        if texts:
            for text in texts:
                joins = [by_key[n][-1] for n in _names(text) if by_key.get(n)]
                if joins:
                    join: int | None = max(joins, key=index.position.__getitem__)
                else:
                    join = open_sides[-1][1] if open_sides else None
                found.setdefault(node.id, []).append((join, text))
        if node.operator == "HASH_JOIN" and len(node.children) > 1:
            keys = {probe for probe, _ in _join_keys(node)}
            open_sides.append((index.end[index.position[node.children[0]]], node.id, keys))
            for key in keys:
                by_key.setdefault(key, []).append(node.id)
    parsed.engine_facts["runtime_filters"] = found
    return found


def _cuts_nothing(join: PlanNode, holder: PlanNode, nodes: list[PlanNode]) -> bool:
    """True when the run-time filter a join pushed into `holder` can remove only rows whose key
    is in no row of the build side's table: its build side is a scan of that whole table (DuckDB
    estimates an unfiltered scan at its table's row count) that kept every row, or kept every row
    but those a range on the join key left out that no filter on the probe's key repeats. DuckDB
    repeats a constant filter on a join key on the other side of the equality (a real run of
    2.0.1: `s.id <= 100` on the build side shows as `sid <= 100` on the probe side), so such a
    range came from the probe side's own minimum and maximum and leaves out no key it holds.
    The rows it can still remove reference no row of that table (none where the key is a
    reference to it: an inner join's numbers must show that each probe row kept found one
    match; a semi join's cannot, and there it is assumed, as its build side is that table)."""
    build = nodes[join.children[1]]
    while build.operator == "PROJECTION" and len(build.children) == 1:
        build = nodes[build.children[0]]
    if build.children or build.operator not in ("SEQ_SCAN", "TABLE_SCAN") \
            or build.extra.get("dynamic_filters") or build.est_rows is None or build.actual_rows is None:
        return False
    probe = nodes[join.children[0]]
    if join.join_type in (None, "INNER") and (probe.actual_rows is None
                                              or probe.actual_rows != join.actual_rows):
        # an inner join shows it: each row its probe side kept found exactly one match, so the
        # build key is a key of the whole table and the probe's key references it; where the
        # numbers say otherwise (the probe is the referenced side) the filter may have cut
        return False
    filters = [c for c in build.conditions if c.kind == "filter"]
    if not filters:
        return build.actual_rows >= build.est_rows
    keys = _join_keys(join)
    build_keys = {b for _, b in keys}
    probe_keys = {p for p, _ in keys}
    if not build_keys or any(_names(c.text) - build_keys for c in filters):
        return False
    current = holder
    for _ in range(len(nodes)):  # up the path from the filtered node to the join
        if any(c.kind == "filter" and _names(c.text) & probe_keys for c in current.conditions):
            return False
        if current.parent is None or current.parent == join.id:
            return True
        current = nodes[current.parent]
    return False


def _runtime_cuts(parsed: ParsedPlan) -> dict[int, dict[str, dict[int, str]]]:
    """Per join, what the run-time filters that may have cut rows do to its inputs: `stopped`
    (an input not to judge: the filter's holder and what lies above it up to this join),
    `cut` (an input whose true count is at least what it shows, for every join from the holder
    up to the join that pushed the filter), `exact` (an input known to be whole before the cut:
    a scan of a whole table with no filter of its own, cut only by this join's own filter,
    emits what the join matches; uncut it holds the table's rows, which DuckDB's estimate is).
    Filters that cut nothing (`_cuts_nothing`) leave their holder judged. Made once a plan;
    each filter walks up its own path only."""
    cached = parsed.engine_facts.get("runtime_cuts")
    if cached is not None:
        return cached
    nodes = parsed.nodes
    out: dict[int, dict[str, dict[int, str]]] = {}
    cut_holders: set[int] = set()
    for holder_id, records in runtime_filters(parsed).items():
        holder = nodes[holder_id]
        cutting = [(join, text) for join, text in records
                   if join is not None and not _cuts_nothing(nodes[join], holder, nodes)]
        if not cutting:
            continue
        cut_holders.add(holder_id)
        how = "; ".join(text for _, text in cutting)
        pushers = {join for join, _ in cutting}
        whole_scan = (not holder.children and holder.operator in ("SEQ_SCAN", "TABLE_SCAN")
                      and not any(c.kind == "filter" for c in holder.conditions)
                      and holder.est_rows is not None)
        current, first_join, direct = holder, True, True
        for _ in range(len(nodes)):
            if current.parent is None or not pushers:
                break
            parent = nodes[current.parent]
            if parent.operator in JOINS:
                facts = out.setdefault(parent.id, {"stopped": {}, "cut": {}, "exact": {}})
                if first_join and current.est_rows is not None and current.actual_rows is not None \
                        and current.actual_rows < current.est_rows:
                    facts["stopped"][current.id] = DYNAMIC_FILTER_REASON.format(how=how)
                if whole_scan and direct and pushers == {parent.id}:
                    facts["exact"][current.id] = how
                else:
                    facts["cut"][current.id] = (
                        f"its input #{current.id} was cut while running by a dynamic filter "
                        f"({how}), so that input's true count is at least what it shows")
                first_join, direct = False, False
                pushers.discard(parent.id)
            elif parent.operator != "PROJECTION":
                direct = False
            current = parent
    parsed.engine_facts["runtime_cuts"] = out
    parsed.engine_facts["cut_holders"] = cut_holders
    return out


def _emitted(node: PlanNode, nodes: list[PlanNode]) -> PlanNode:
    """The node whose rows a node emits: a CTE node's last child (the query after the CTE),
    else the node itself."""
    if node.operator == "CTE" and len(node.children) > 1:
        return nodes[node.children[-1]]
    return node


def _cte_key(node: PlanNode) -> tuple[int, Any] | None:
    """A CTE by its statement and table index (what a CTE_SCAN's "CTE Index" names)."""
    if node.operator != "CTE" or not node.children:
        return None
    key = (node.statement, (node.extra.get("extra_info") or {}).get("Table Index"))
    return key if isinstance(key[1], Hashable) else None


def _count_or_none(value: Any) -> float | None:
    try:
        return float(str(value).replace(",", ""))
    except (TypeError, ValueError):
        return None


_CAUTION = (
    "{cost} Whether and when to run it is for your change process and a DBA (or whoever owns "
    "the database file) to decide."
)


IDENT_MAX_BYTES = 1024
"""planview's cap: DuckDB's manual names no length limit (from memory), so a longer name is
refused as not a real one."""


def quote_ident(name: str) -> str:
    """A name in double quotes, any double quote doubled (DuckDB's rule, as PostgreSQL's);
    a name no quoting makes safe is refused."""
    check_name(name, max_bytes=IDENT_MAX_BYTES, engine="planview's cap on DuckDB")
    return '"' + name.replace('"', '""') + '"'


def suggest_fix(cause: str, table: str | None, columns: list[str] | tuple[str, ...] = (),
                **details: Any) -> tuple[str, str] | None:
    """A fix in DuckDB's own terms, saying plainly which levers DuckDB has and which it lacks.

    DuckDB keeps per-column min/max and a distinct count (kept up to date as data changes,
    refreshed in full by ``ANALYZE``); it has no histograms, no most-common-value lists, no
    multi-column statistics and no per-column statistics target to raise.
    """
    parts = details.get("table_parts")
    if parts:
        target = ".".join(quote_ident(p) for p in parts if p)
    else:
        target = quote_ident(table) if table else "the_table"
    cols = ", ".join(quote_ident(c) for c in columns if c)
    analyze = f"ANALYZE {target}({cols});" if cols else f"ANALYZE {target};"
    if cause == "stale_statistics":
        return (analyze,
                _CAUTION.format(cost=f"ANALYZE reads every row of {target} to recompute its "
                                     "distinct counts, and takes the write lock on the database "
                                     "while it runs (DuckDB has one writer at a time)."))
    lacks = {
        "correlation": "DuckDB has no multi-column (extended) statistics and no statistics "
                       "target to raise, so it cannot learn that these columns move together.",
        "skew": "DuckDB keeps no histogram and no most-common-value list: an equality is "
                "estimated from the distinct count alone, so a frequent value is always "
                "underestimated and a rare one overestimated.",
        "range_gap": "DuckDB keeps only the minimum and maximum of a column, no histogram, so "
                     "it cannot see an empty stretch inside the range.",
        "default_selectivity": "DuckDB applies a fixed selectivity to predicates it has no "
                               "statistics for (a range came out at 20% in our runs of 2.0.1); "
                               "there is no setting to change it.",
        "filter_combination": "DuckDB estimates ANDed filters on one table by the smallest of "
                              "their estimates (or 20% once when none is an equality), not their "
                              "product, and no setting changes that.",
        "join_selectivity": ("DuckDB estimates a join on several keys between the same inputs "
                             "from the key with the most distinct values alone (GetDenominator in "
                             "src/optimizer/join_order/cardinality_estimator.cpp); no statistic "
                             "describes how the keys match together."
                             if details.get("multi_key") else
                             "DuckDB estimates a semi or anti join as a fixed share (0.2, its "
                             "DEFAULT_SELECTIVITY) of the side it keeps, whatever the other side "
                             "holds (GetDenominator in "
                             "src/optimizer/join_order/cardinality_estimator.cpp); nothing "
                             "describes which keys match."),
    }
    if cause not in lacks:
        return None
    rewrite = {
        "correlation": "drop a condition the others already imply, or keep the combination as "
                       "a column of its own and filter on that",
        "skew": "run the frequent value as its own query, or materialise it as its own table",
        "range_gap": "cut the range to where the data is, or keep the rows of the stretch in a "
                     "table of their own",
        "default_selectivity": "write the predicate on the bare column (no function or cast "
                               "around it), so min/max and distinct counts apply",
        "filter_combination": "keep the combination the filters select as a column of its own "
                              "and filter on it with one equality",
        "join_selectivity": ("keep the keys' combination as one column of its own on each side "
                             "and join on that single equality"
                             if details.get("multi_key") else
                             "apply the other side's filter first into a table of its own and "
                             "join against that"),
    }[cause]
    sql = (f"-- DuckDB offers no statistics lever for this: {lacks[cause]}\n"
           f"-- What DuckDB does offer: {analyze} refreshes the distinct counts (it cannot help "
           f"here beyond that), and rewriting the query: {rewrite}.\n"
           f"-- {analyze}")
    caution = _CAUTION.format(cost="Rewriting the query costs nothing to run but changes the "
                                   "application; ANALYZE reads the whole table and holds DuckDB's "
                                   "single write lock while it runs.")
    return sql, caution


# ---------------------------------------------------------------------------------------
# The engine: its tables, and the hooks no table can say
# ---------------------------------------------------------------------------------------

class DuckDB(Engine):
    NAME, FORMATS, SQL_DIALECT = NAME, FORMATS, SQL_DIALECT
    INPUT_RULES = INPUT_RULES
    JOINS = frozenset(JOINS)
    SEMI_JOINS = frozenset(SEMI_OUTER)
    RIGHT_SEMI_JOINS = frozenset(SEMI_INNER)
    MARK_JOINS = frozenset({"MARK"})
    PRESERVED = PRESERVED
    COMPLETE_INNER = frozenset(JOINS)
    BLOCKING = frozenset(BLOCKING)
    LIMITS = frozenset(LIMITS)
    WHOLE_RELATION_SCANS = frozenset({"SEQ_SCAN", "TABLE_SCAN"})
    CTE_SCANS = frozenset({"CTE_SCAN"})
    DEFAULT_SELECTIVITIES = DEFAULT_SELECTIVITIES
    STATISTICS_KEPT = frozenset({"distinct", "min_max"})
    # src/optimizer/join_order/relation_statistics_helper.cpp, ExtractGetStats: each filter of
    # a scan gives a cardinality (an equality with a constant: rows / distinct count; any other
    # filter: no change), the scan takes the smallest of them, and when no filter is an equality
    # the rows x DEFAULT_SELECTIVITY (0.2) once, however many filters there are.
    AND_FILTERS = ("minimum", "ExtractGetStats in src/optimizer/join_order/relation_statistics_helper.cpp")
    # DuckDB prints a scalar sub-query's result inside a condition as the word SUBQUERY
    # (TPC-H Q15: `total_revenue = SUBQUERY`; Q17, Q20)
    SUBQUERY_MARK = r"\bSUBQUERY\b"
    # src/optimizer/join_order/cardinality_estimator.cpp, GetDenominator: the product of the
    # inputs' rows is divided by the distinct counts ("total domains") of the join keys; with no
    # usable key the denominator is 1 ("denominator is 1 and numerators are a cross product of
    # cardinalities")
    NON_CONSTANT_GUESSES = {
        "equality_subplan": "DuckDB has no distinct count for a sub-query's result, so nothing "
                            "divides the product of the join's inputs: it estimates that every row "
                            "matches the sub-query's value (GetDenominator in "
                            "src/optimizer/join_order/cardinality_estimator.cpp takes a denominator "
                            "of 1 where no key's distinct count applies)",
    }
    # the same function walks the join conditions from the largest distinct count down and skips
    # a condition between relations an earlier one already connected ("another filter is
    # connecting relations already in the subgraph, but it has a tdom that is less, and we
    # don't care"): a second key between the same inputs does not lower the estimate
    JOIN_KEYS_COMBINED = ("largest_domain", "GetDenominator in src/optimizer/join_order/cardinality_estimator.cpp")

    def input_rule(self, node: PlanNode, nodes: list[PlanNode], inputs: list[int]) -> str:
        op = node.operator
        if op not in INPUT_RULES and op.endswith("_SCAN"):
            return "source"
        rule = super().input_rule(node, nodes, inputs)
        if rule == "source" and op in GROUPING:
            return "group"
        if op in PURE_PASS and len(node.children) == 1:
            child = _emitted(nodes[node.children[0]], nodes)
            if node.est_rows is not None and child.est_rows is not None \
                    and abs(node.est_rows - child.est_rows) > 0.5:
                return "source"  # estimated afresh after a rewrite: its error is its own
        return rule

    # The profiling output's operator_timing (timing in 1.4's JSON, "(0.09s)" in a text box) is
    # the operator's own time, its children's left out, added up over the threads that ran it:
    # the sum over the tree is the query's cpu_time, which exceeds its latency when threads
    # ran at once.
    TIME_PRINTED = "exclusive"
    TIME_RULES = (
        ("every operator", "operator timing is its own time, added up over its threads; "
                           "with its inputs = that plus its inputs' in all"),
        ("parallel threads", "summed, not overlapped: the tree's sum is the query's cpu_time, "
                             "which can exceed the query's wall-clock latency"),
        ("EXPLAIN without ANALYZE", "unknown"),
    )

    def exclusive_ms(self, node: PlanNode) -> float | None:
        value = node.extra.get("own_time_ms")
        return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else None

    def limit_count(self, node: PlanNode) -> float | None:
        """Top-N prints its N as "Top"; a plain LIMIT prints no count."""
        return _count_or_none((node.extra.get("extra_info") or {}).get("Top"))

    def cte_read(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan) -> int | None:
        """A CTE_SCAN's "CTE Index" names the CTE's "Table Index"; it re-reads the CTE's child."""
        if node.operator != "CTE_SCAN":
            return None
        cte_index = (node.extra.get("extra_info") or {}).get("CTE Index")
        if isinstance(cte_index, Hashable):
            cte = index_of(parsed).first_by(_cte_key).get((node.statement, cte_index))
        else:  # a list or an object where a number belongs: compare by value, as rare as odd
            cte = next((o.id for o in nodes if o.operator == "CTE" and o.children
                        and o.statement == node.statement
                        and (o.extra.get("extra_info") or {}).get("Table Index") == cte_index), None)
        return nodes[cte].children[0] if cte is not None else None

    def refine(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan, role: Role) -> None:
        if node.operator == "CTE_SCAN" and role.reads is None:
            role.rule = "source"
        if node.operator == "CTE" and len(node.children) > 1:
            role.emits = node.children[-1]
        if node.operator in JOINS and len(node.children) > 1:
            role.complete_inputs = tuple(node.children[1:])
        if node.operator in JOINS and node.children:
            self._runtime_filters(node, nodes, parsed, role)
        if node.extra.get("dynamic_filters") and not node.children:
            _runtime_cuts(parsed)
            scanned = node.extra.get("rows_scanned")
            if node.id not in parsed.engine_facts["cut_holders"] and isinstance(scanned, (int, float)) \
                    and node.actual_rows is not None and scanned >= node.actual_rows \
                    and any(c.kind == "filter" for c in node.conditions):
                # its run-time filters removed nothing (`_cuts_nothing`): what it read and did not
                # emit, its own filter removed
                role.rows_discarded = float(scanned) - node.actual_rows

    def _runtime_filters(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan,
                         role: Role) -> None:
        """A hash join may push a filter built from its build side into its probe side while
        running: the probe's estimate leaves it out (see `_runtime_cuts`). Older profiles print
        the build side's minimum and maximum on the join instead."""
        facts = _runtime_cuts(parsed).get(node.id)
        info = node.extra.get("extra_info") or {}
        if ("Build Min" in info or "Build Max" in info) and node.operator == "HASH_JOIN":
            probe = nodes[node.children[0]]
            how = "the join's build-side minimum and maximum"
            facts = {"stopped": {}, "cut": {probe.id: f"its probe input was cut while running by a "
                                                     f"dynamic filter ({how}), so that input's true "
                                                     "count is at least what it shows"}, "exact": {}}
            if probe.est_rows is not None and probe.actual_rows is not None \
                    and probe.actual_rows < probe.est_rows:
                facts["stopped"][probe.id] = DYNAMIC_FILTER_REASON.format(how=how)
        if not facts:
            return
        if facts["stopped"]:
            role.stops_inputs = {**(role.stops_inputs or {}), **facts["stopped"]}
        if facts["cut"]:
            role.cut_inputs = {**(role.cut_inputs or {}), **facts["cut"]}
        if facts["exact"]:
            role.exact_inputs = tuple(facts["exact"])
            node.derived.append(
                "its probe input is a scan of a whole table cut only by this join's own run-time "
                f"filter ({'; '.join(facts['exact'].values())}): uncut it holds the table's rows, "
                "as estimated, and the cut removed only rows this join would drop, so the join is "
                "judged against the whole table")

    def suggest_fix(self, cause, table, columns=(), **details):
        return suggest_fix(cause, table, columns, **details)


ENGINE = DuckDB()
role = ENGINE.role
