"""MySQL 8.0.18+: EXPLAIN ANALYZE in the tree format, and JSON with explain_json_format_version=2.

Tree lines are ``-> OPERATION  (cost=F..T rows=R) (actual time=F..L rows=R loops=N)``, four
spaces a level, numbers printed readably (``1.23e+6``, ``934e-6``). The manual's examples
wrap each node's ``(actual ...)`` onto a line of its own; such a line continues the node above.
Rows are per loop, estimated and actual alike, so every node keeps ``starts = loops``.

Lines without numbers are headings. ``-> Hash`` (the build side of a hash join) and
``-> Select #2 (...)`` (a subquery) are folded into the node below them, which keeps the
fact in ``extra`` and, for a subquery, becomes a sub-plan of the node above.
"""

from __future__ import annotations

import re
from typing import Any

from ..errors import PlanParseError
from ..inert import check_name
from ..model import Condition, ParsedPlan, PlanNode, Relationship, Statement
from ._dispatch import dispatch, json_document
from ._tree import append_node, check_depth, link_inputs, read_number
from .base import Engine

NAME = "mysql"
FORMATS = ("tree", "json")
SQL_DIALECT = "mysql"

# ---------------------------------------------------------------------------------------
# Tables: the engine's vocabulary (operation text prefixes, longest first when matched)
# ---------------------------------------------------------------------------------------

SOURCES = ("Table scan", "Index scan", "Index range scan", "Index lookup", "Single-row index lookup",
           "Covering index lookup", "Covering index scan", "Covering index range scan",
           "Covering index skip scan for grouping", "Index skip scan", "Full-text index search",
           "Constant row from", "Rows fetched before execution", "Zero rows", "Zero input rows",
           "Index lookup on", "Multi-range index range scan", "Sort-deduplicate by row ID",
           "Intersect rows sorted by row ID", "Deduplicate rows sorted by row ID",
           "Table function", "Materialized table function", "Single-row covering index lookup",
           "Index range scan (Multi-Range Read)", "Hash index range scan")
GROUPING = ("Aggregate", "Group aggregate", "Group (no aggregates)", "Aggregate using temporary table",
            "Window aggregate", "Window aggregate with buffering")
PASS = ("Filter", "Sort", "Limit", "Limit/Offset", "Stream results", "Materialize", "Temporary table",
        "Remove duplicates", "Window", "Window multi-pass aggregate", "Deduplicate",
        "Sort row IDs", "Table scan on <temporary>", "Materialize with deduplication",
        "Materialize CTE", "Materialize union CTE", "Materialize recursive CTE")
JOIN_WORDS = re.compile(r"\b(hash join|nested loop|semijoin|antijoin|join)\b", re.I)
SEMI = re.compile(r"\b(semijoin|antijoin)\b", re.I)
LEFT = re.compile(r"\bleft\b", re.I)
BLOCKING = ("Sort", "Aggregate using temporary table", "Materialize", "Temporary table", "Window")
LIMITS = ("Limit", "Limit/Offset")
_LIMIT_COUNT = re.compile(r"^Limit(?:/Offset)?: (\d+)\b")
# Headings: lines that carry no numbers of their own
HASH_HEADINGS = ("Hash", "Parallel hash")

CONDITION_PATTERNS = (
    (re.compile(r"^Filter: (.+)$"), "filter"),
    (re.compile(r"^(?:Inner|Left|Right|Outer|Full)? ?hash (?:join|semijoin|antijoin) \((.+)\)(?:, extra conditions: (.+))?$", re.I), "hash_cond"),
    (re.compile(r"^Hash (?:semijoin|antijoin) \((.+)\)", re.I), "hash_cond"),
    (re.compile(r"lookup on \S+ using \S+ \((.+)\)$"), "index_cond"),
    (re.compile(r" over \((.+)\)$"), "index_cond"),
)

_FIGURE = r"(?:\d+(?:\.\d*)?|\.\d+)(?:e[+-]?\d+)?"
_METRICS = re.compile(
    rf"\s*\((?P<cost>cost=(?P<c1>{_FIGURE})(?:\.\.(?P<c2>{_FIGURE}))? )?rows=(?P<rows>[\d.e+-]+)\)"
)
"""``(cost=C rows=R)``, or ``(cost=S..T rows=R)`` where MySQL prints a start-up cost apart (a
materialized table's scan); a cost is one number, so ``2.5..2.5`` is split, not misread."""
_ACTUAL = re.compile(
    r"\s*\(actual (?:time=(?P<t1>[\d.e+-]+)\.\.(?P<t2>[\d.e+-]+) )?rows=(?P<rows>[\d.e+-]+) "
    r"loops=(?P<loops>[\d.e+-]+)\)"
)
_NEVER = re.compile(r"\s*\(never executed\)")
_MASKED = re.compile(r"\s+\(\.\.\.\)\s*$")
"""What the engine's test suite prints in place of a line's figures (mysqltest --replace_regex),
read as unknown."""
MASKED_NOTE = ("masked figures: the plan prints '(...)' in place of its estimates and actuals (as the "
               "engine's test suite does); the tree is shown and nothing is judged on them")
_NUMBER = re.compile(r"^\d+(\.\d+)?(e[+-]?\d+)?$|^\d*\.\d+(e[+-]?\d+)?$")


# ---------------------------------------------------------------------------------------
# Detection
# ---------------------------------------------------------------------------------------

def detect(text: str) -> tuple[str, float] | None:
    head = text[:20000].lstrip("\ufeff \t\r\n")
    body = re.sub(r"^(EXPLAIN|@\w+):\s*", "", head)
    if body.startswith("{"):
        if '"json_schema_version"' in body or ('"operation"' in body and '"access_type"' in body
                                                and ('"estimated_rows"' in body or '"actual_rows"' in body)):
            return "json", 0.97
        if '"query_block"' in body and ('"cost_info"' in body or '"rows_examined_per_scan"' in body):
            return "json", 0.8  # the classic JSON (v1): read only to say what to run instead
        return None
    if re.search(r"(^|\n)[|\s]*(EXPLAIN: )?-> .+\((cost=[\d.e+-]+(\.\.[\d.e+-]+)? )?rows=[\d.e+-]+\)", head) \
            or re.search(r"(^|\n)[|\s]*(EXPLAIN: )?-> .+\(actual time=", head) \
            or re.search(r"(^|\n)[|\s]*(EXPLAIN: )?-> \S.*\S\s+\(\.\.\.\)[ \t]*(\n|$)", head):
        if re.search(r"width=\d+\)", head):
            return None  # PostgreSQL prints width=
        return "tree", 0.92
    return None


def parse(text: str, fmt: str) -> ParsedPlan:
    return dispatch(NAME, "MySQL", {"tree": _parse_tree, "json": _parse_json}, text, fmt)

# ---------------------------------------------------------------------------------------
# Operation text into the node's fields (shared by both formats)
# ---------------------------------------------------------------------------------------

def operator_of(operation: str) -> str:
    """The iterator's name: the operation text up to its object (`Table scan on t` -> `Table scan`)."""
    text = operation.strip()
    for cut in (" on ", ": ", " (", " using ", " over "):
        pos = text.find(cut)
        if pos > 0:
            text = text[:pos]
    return text.strip() or operation.strip()


def describe(node: PlanNode, operation: str) -> None:
    node.label = operation
    node.operator = operator_of(operation)
    target = re.search(r" on (<[^>]+>|`[^`]+`|[\w$]+)(?: using ([\w$`]+))?", operation)
    if target and not node.operator.lower().startswith(("filter", "sort", "limit")):
        node.relation = node.relation or target.group(1).strip("`")
        if target.group(2):
            node.index = node.index or target.group(2).strip("`")
    for pattern, kind in CONDITION_PATTERNS:
        found = pattern.search(operation)
        if found:
            node.conditions.append(Condition(kind, found.group(1), "operation"))
            if found.lastindex and found.lastindex > 1 and found.group(2):
                node.conditions.append(Condition("join_filter", found.group(2), "operation"))
            break
    if JOIN_WORDS.search(node.operator):
        node.join_type = ("Semi" if "semijoin" in node.operator.lower() else
                          "Anti" if "antijoin" in node.operator.lower() else
                          "Left" if LEFT.search(node.operator) else "Inner")


# ---------------------------------------------------------------------------------------
# Tree
# ---------------------------------------------------------------------------------------

def _clean_lines(text: str) -> list[tuple[int, str]]:
    """The plan lines, without the client's frame, the ``EXPLAIN:`` label or the manual's wrap."""
    out: list[tuple[int, str]] = []
    framed = re.search(r"^\s*\+-{3,}", text, re.M) is not None
    for number, raw in enumerate(text.splitlines(), 1):
        line = raw.rstrip()
        if framed:
            line = re.sub(r"\s+\|$", "", line)
        stripped = line.strip()
        if not stripped or re.match(r"^\+[-+]+\+$", stripped) or re.match(r"^\*+ \d+\. row \*+$", stripped):
            continue
        if re.match(r"^\|?\s*EXPLAIN\s*\|?$", stripped) or re.match(r"^\d+ rows? in set", stripped):
            continue
        if stripped.startswith(("mysql>", "Query OK")):
            continue  # the client's prompt and status lines around a pasted session
        if line.startswith("|"):
            line = line[1:]
            line = re.sub(r"\s*\|\s*$", "", line)
        line = re.sub(r"^(\s*)EXPLAIN: ", r"\1", line)
        if re.match(r"^\s*\((actual |never executed)", line) and out:
            out[-1] = (out[-1][0], out[-1][1] + " " + line.strip())
            continue
        out.append((number, line))
    return out


def _parse_tree(text: str) -> ParsedPlan:
    lines = _clean_lines(text)
    if not lines:
        raise PlanParseError("no plan lines", line=1, engine=NAME, fmt="tree")
    items: list[tuple[int, int, str]] = []  # (line number, indent, content)
    for number, line in lines:
        match = re.match(r"^(\s*)-> (.*)$", line)
        if not match:
            raise PlanParseError(f"expected a line starting with '-> ', found {line.strip()[:60]!r}",
                                 line=number, engine=NAME, fmt="tree")
        items.append((number, len(match.group(1).replace("\t", "    ")), match.group(2)))
    base = items[0][1]
    nodes: list[PlanNode] = []
    stack: list[tuple[int, int | None]] = []  # (indent, node id or None for a folded heading)
    pending: dict[int, dict[str, Any]] = {}   # indent of a folded heading -> what it says
    has_actuals = False
    for number, indent, content in items:
        if indent < base:
            raise PlanParseError("a line is indented less than the first one", line=number, engine=NAME,
                                 fmt="tree")
        while stack and stack[-1][0] >= indent:
            stack.pop()
        parent = next((nid for _, nid in reversed(stack) if nid is not None), None)
        heading = _heading(content)
        if heading is not None:
            check_depth(len(stack), line=number, engine=NAME, fmt="tree")
            stack.append((indent, None))
            pending[indent] = heading
            continue
        node = PlanNode(id=len(nodes), parent=parent, operator="", label="", depth=0)
        node.extra["line"] = number
        operation = _read_metrics(node, content, number)
        describe(node, operation)
        # what the folded headings between the parent and this node said
        for head_indent in sorted(k for k in pending if k < indent and any(s[0] == k for s in stack)):
            said = pending.pop(head_indent)
            node.extra.update(said.get("extra", {}))
            if said.get("subplan"):
                node.subplan_name = said["subplan"]
                node.parent_relationship = Relationship.SUBPLAN
        append_node(nodes, node, parent)
        check_depth(node.depth, line=number, engine=NAME, fmt="tree")
        has_actuals = has_actuals or node.executed is not None
        stack.append((indent, node.id))
    if not nodes:
        raise PlanParseError("only headings, no operator", line=items[0][0], engine=NAME, fmt="tree")
    _relationships(nodes)
    statements = [Statement(root=n.id) for n in nodes if n.parent is None]
    for i, stmt in enumerate(statements):
        todo = [stmt.root]
        while todo:
            current = nodes[todo.pop()]
            current.statement = i
            todo.extend(current.children)
    masked = any(node.extra.get("masked") for node in nodes)
    notes = [MASKED_NOTE] if masked else []
    if not has_actuals and not masked:
        notes.append("no actuals: this is EXPLAIN FORMAT=TREE; run EXPLAIN ANALYZE to compare "
                     "estimates with what really happened")
    return ParsedPlan(engine=NAME, format="tree", nodes=nodes, statements=statements,
                      has_actuals=has_actuals, notes=notes)


def _heading(content: str) -> dict[str, Any] | None:
    if _METRICS.search(content) or _ACTUAL.search(content) or _NEVER.search(content) \
            or _MASKED.search(content):
        return None
    text = content.strip()
    if text in HASH_HEADINGS:
        return {"extra": {"hashed": True}}
    if re.match(r"^Select #\d+", text):
        return {"subplan": text}
    return None


def _read_metrics(node: PlanNode, content: str, line: int) -> str:
    text = content
    masked = _MASKED.search(text)
    if masked:
        node.extra["masked"] = True
        node.derived.append("figures masked as '(...)' where the plan was printed: unknown")
        text = text[:masked.start()]
    actual = _ACTUAL.search(text)
    if actual:
        node.actual_rows = _readable(actual.group("rows"), line, "rows")
        node.starts = _readable(actual.group("loops"), line, "loops")
        node.executed = node.starts > 0
        if actual.group("t2"):
            node.actual_startup_ms = _readable(actual.group("t1"), line, "time")
            node.actual_total_ms = _readable(actual.group("t2"), line, "time")
        text = text[:actual.start()] + text[actual.end():]
    never = _NEVER.search(text)
    if never:
        node.executed = False
        node.starts = 0.0
        text = text[:never.start()] + text[never.end():]
    found = list(_METRICS.finditer(text))
    metrics = found[-1] if found else None
    if metrics:
        node.est_rows = _readable(metrics.group("rows"), line, "rows")
        if metrics.group("c2"):
            node.startup_cost = _readable(metrics.group("c1"), line, "cost")
            node.total_cost = _readable(metrics.group("c2"), line, "cost")
        elif metrics.group("c1"):
            node.total_cost = _readable(metrics.group("c1"), line, "cost")
        text = text[:metrics.start()] + text[metrics.end():]
    operation = text.strip()
    if not operation:
        raise PlanParseError("a node without an operation", line=line, engine=NAME, fmt="tree")
    return operation


def _readable(value: str, line: int | None, what: str, key: str | None = None) -> float:
    """A figure as MySQL prints it (``1.23e+6``, ``934e-6``: no sign, no thousands separator)."""
    fmt = "tree" if key is None else "json"
    if not _NUMBER.match(value or ""):
        raise PlanParseError(f"{what} is not a number: {value!r}", line=line, key=key, engine=NAME, fmt=fmt)
    return read_number(value, key=key, line=line, engine=NAME, fmt=fmt)


def _relationships(nodes: list[PlanNode]) -> None:
    """The first input of a join is its outer (probe) side, the second its inner (build) side."""
    link_inputs(nodes, lambda node: bool(node.join_type),
                lambda node: node.operator.startswith(("Append", "Union")))


# ---------------------------------------------------------------------------------------
# JSON (explain_json_format_version=2)
# ---------------------------------------------------------------------------------------

def _parse_json(text: str) -> ParsedPlan:
    body = re.sub(r"^\s*(EXPLAIN|@\w+):\s*", "", text.lstrip("\ufeff"))
    body = re.sub(r"\n\d+ rows? in set.*$", "", body.strip(), flags=re.S)
    doc = json_document(body, NAME)
    if not isinstance(doc, dict):
        raise PlanParseError("expected a JSON object", key="$", engine=NAME, fmt="json")
    if "query_block" in doc and "query_plan" not in doc and "operation" not in doc:
        raise PlanParseError("this is MySQL's classic JSON (explain_json_format_version=1), which "
                             "has no actual rows; run EXPLAIN ANALYZE (tree), or SET "
                             "explain_json_format_version=2 and EXPLAIN ANALYZE FORMAT=JSON",
                             key="query_block", engine=NAME, fmt="json")
    root, path = (doc["query_plan"], "query_plan") if "query_plan" in doc else (doc, "$")
    if not isinstance(root, dict) or "operation" not in root:
        raise PlanParseError("expected an object with \"operation\"", key=path, engine=NAME, fmt="json")
    nodes: list[PlanNode] = []
    has_actuals = False
    todo: list[tuple[dict, int | None, int, str]] = [(root, None, 0, path)]
    while todo:
        raw, parent, depth, where = todo.pop()
        check_depth(depth, key=where, engine=NAME, fmt="json")
        if not isinstance(raw, dict):
            raise PlanParseError("an input is not an object", key=where, engine=NAME, fmt="json")
        node = append_node(nodes, _node_from_json(raw, len(nodes), parent, depth, where), parent)
        has_actuals = has_actuals or node.executed is not None
        inputs = raw.get("inputs", [])
        if not isinstance(inputs, list):
            raise PlanParseError("\"inputs\" is not a list", key=f"{where}.inputs", engine=NAME, fmt="json")
        for i in range(len(inputs) - 1, -1, -1):
            todo.append((inputs[i], node.id, depth + 1, f"{where}.inputs[{i}]"))
    _relationships(nodes)
    statement = Statement(root=0, query_text=doc.get("query") if isinstance(doc.get("query"), str) else None)
    notes = [] if has_actuals else ["no actuals: this is EXPLAIN FORMAT=JSON; run EXPLAIN ANALYZE "
                                    "FORMAT=JSON to compare estimates with what really happened"]
    return ParsedPlan(engine=NAME, format="json", nodes=nodes, statements=[statement],
                      engine_version=str(doc.get("json_schema_version")) if doc.get("json_schema_version") else None,
                      has_actuals=has_actuals, notes=notes)


def _json_number(raw: dict, key: str, where: str) -> float | None:
    return read_number(raw.get(key), key=f"{where}.{key}", engine=NAME, fmt="json", signed="cost" in key)


def _node_from_json(raw: dict, node_id: int, parent: int | None, depth: int, where: str) -> PlanNode:
    operation = raw.get("operation")
    if not isinstance(operation, str) or not operation.strip():
        raise PlanParseError("missing or invalid \"operation\"", key=f"{where}.operation", engine=NAME,
                             fmt="json")
    node = PlanNode(id=node_id, parent=parent, operator="", label="", depth=depth)
    for key, attr in (("table_name", "relation"), ("index_name", "index"), ("alias", "alias"),
                      ("schema_name", "schema")):
        value = raw.get(key)
        if value is not None and not isinstance(value, str):
            raise PlanParseError("expected text", key=f"{where}.{key}", engine=NAME, fmt="json")
        setattr(node, attr, value)
    describe(node, operation)
    node.conditions = []
    for key, kind in (("condition", "filter"), ("hash_condition", "hash_cond"),
                      ("join_condition", "join_cond"), ("extra_condition", "join_filter")):
        value = raw.get(key)
        values = value if isinstance(value, list) else [value] if value is not None else []
        for item in values:
            if not isinstance(item, str):
                raise PlanParseError("expected text", key=f"{where}.{key}", engine=NAME, fmt="json")
            node.conditions.append(Condition(kind, item, key))
    if not node.conditions:
        describe_conditions = PlanNode(id=0, parent=None, operator="", label="")
        describe(describe_conditions, operation)
        node.conditions = describe_conditions.conditions
    join_type = raw.get("join_type")
    if isinstance(join_type, str):
        lowered = join_type.lower()
        node.join_type = ("Semi" if "semi" in lowered else "Anti" if "anti" in lowered else
                          "Left" if "left" in lowered or "outer" in lowered else "Inner")
    node.est_rows = _json_number(raw, "estimated_rows", where)
    node.total_cost = _json_number(raw, "estimated_total_cost", where)
    node.startup_cost = _json_number(raw, "estimated_first_row_cost", where)
    loops = _json_number(raw, "actual_loops", where)
    rows = _json_number(raw, "actual_rows", where)
    if loops is not None or rows is not None:
        node.starts = loops if loops is not None else 1.0
        node.executed = node.starts > 0
        node.actual_rows = rows if node.executed else None
        node.actual_startup_ms = _json_number(raw, "actual_first_row_ms", where)
        node.actual_total_ms = _json_number(raw, "actual_last_row_ms", where)
    if isinstance(raw.get("heading"), str):
        node.subplan_name = raw["heading"]
    if raw.get("subquery") is True:
        node.parent_relationship = Relationship.SUBPLAN
    for key, value in raw.items():
        if key in ("inputs", "operation", "estimated_rows", "actual_rows", "actual_loops"):
            continue
        node.extra[key] = value
    return node


# ---------------------------------------------------------------------------------------
# Roles and fixes
# ---------------------------------------------------------------------------------------

IDENT_MAX_CHARS = 64
"""The longest table or column name MySQL has ("Identifier Length Limits" in the manual)."""


def quote_ident(name: str) -> str:
    """A name in backticks, any backtick doubled: read back exactly whatever the sql_mode;
    a name no quoting makes safe is refused."""
    check_name(name, max_chars=IDENT_MAX_CHARS, engine="MySQL")
    return "`" + name.replace("`", "``") + "`"


def suggest_fix(cause: str, table: str | None, columns: list[str] | tuple[str, ...] = (),
                **details: Any) -> tuple[str, str] | None:
    """Histograms in MySQL's own statements (MySQL 8.0 and later); every name quoted by
    `quote_ident`."""
    parts = details.get("table_parts")
    target = quote_ident(parts[-1] if parts else table.split(".")[-1]) if (parts or table) else "the_table"
    cols = [quote_ident(c) for c in columns if c] or ["the_column"]
    listed = ", ".join(cols)
    buckets = 1024 if cause in ("skew", "range_gap") else 100
    caution = (f"ANALYZE TABLE ... UPDATE HISTOGRAM reads {target} (sampled to fit "
               "histogram_generation_max_mem_size) and takes a metadata lock on it while it runs; the "
               "histogram lives in the data dictionary and changes the plans of every query on the "
               "table. Histograms are not updated by later writes: plan to rebuild them. Whether and "
               "when to run it is for your change process and a DBA to decide.")
    histogram = f"ANALYZE TABLE {target} UPDATE HISTOGRAM ON {listed} WITH {buckets} BUCKETS;"
    if cause in ("skew", "range_gap"):
        return histogram, caution
    if cause == "correlation":
        return (histogram + "\n-- MySQL has no multi-column statistics: histograms sharpen each column, "
                f"but the optimizer still multiplies their selectivities. An index on ({listed}) lets "
                "it count the combination by index dives instead.", caution)
    if cause == "stale_statistics":
        return (f"ANALYZE TABLE {target};\n{histogram}",
                caution + " Plain ANALYZE TABLE also recounts the index statistics (InnoDB samples "
                          "innodb_stats_persistent_sample_pages pages).")
    if cause == "default_selectivity":
        return (histogram + "\n-- A column inside a function or an expression gets no histogram: compare "
                            "the bare column, or index a generated column holding the expression.", caution)
    return None


# ---------------------------------------------------------------------------------------
# The engine: its tables, and the hooks no table can say
# ---------------------------------------------------------------------------------------

class MySQL(Engine):
    """MySQL prints an iterator with its object (``Sort: t.a``, ``Limit: 10 row(s)``): its
    tables name the iterators, matched by their first words."""

    NAME, FORMATS, SQL_DIALECT = NAME, FORMATS, SQL_DIALECT
    INPUT_RULES = {**{name: "group" for name in GROUPING}, "Append": "sum", "Union": "sum"}
    SEMI_JOINS = frozenset({"Semi", "Anti"})
    PRESERVED = {"Left": "outer"}
    # a hashed grouping reads all its input; a streaming one ("Group aggregate") does not
    BLOCKING = frozenset({*BLOCKING, "Aggregate"})
    LIMITS = frozenset(LIMITS)
    WHOLE_RELATION_SCANS = frozenset({"Table scan"})
    STOP_INNER_REASON = ("stopped early: a nested-loop {join_type} join reads its inner input only "
                         "up to the first match")

    def listed(self, operator, table) -> bool:
        return any(operator == name or operator.startswith(name + " ") for name in table)

    def lookup(self, operator, table):
        return next((rule for name, rule in table.items()
                     if operator == name or operator.startswith(name + " ")), None)

    JOIN_BY_TYPE = True

    # The manual's EXPLAIN ANALYZE: "actual time" is the time to the first row and to all rows,
    # in milliseconds, an average over the loops, and an iterator's time holds its inputs' (it
    # pulls their rows), sub-queries evaluated by its conditions included.
    TIME_PRINTED = "inclusive"
    TIME_RULES = (
        ("every iterator", "actual time's second figure (per loop, with its inputs) x loops; "
                           "own = that less its inputs' in all"),
        ("sub-query (Select #n)", "counted in the iterator that evaluates it (its parent here)"),
        ("never executed", "0 ms"),
        ("EXPLAIN without ANALYZE", "unknown"),
    )

    def input_rule(self, node: PlanNode, nodes: list[PlanNode], inputs: list[int]) -> str:
        if node.join_type:
            return "semi_outer" if node.join_type in self.SEMI_JOINS else "join"
        if not inputs:
            return "source"
        return self.lookup(node.operator, self.INPUT_RULES) or "pass"

    def limit_count(self, node: PlanNode) -> float | None:
        """``Limit: 10 row(s)``, ``Limit/Offset: 10/5 row(s)``: the count, then the offset."""
        found = _LIMIT_COUNT.match(node.operator)
        return float(found.group(1)) if found else None

    def completes_inner(self, node: PlanNode, inner: PlanNode) -> bool:
        return "hash" in node.operator.lower() or bool(inner.extra.get("hashed"))

    def inner_stop_reason(self, node: PlanNode, inner: PlanNode) -> str | None:
        if node.join_type in self.SEMI_JOINS and not self.completes_inner(node, inner):
            return self.STOP_INNER_REASON.format(join_type=node.join_type.lower())
        return None

    def suggest_fix(self, cause, table, columns=(), **details):
        return suggest_fix(cause, table, columns, **details)


ENGINE = MySQL()
role = ENGINE.role
