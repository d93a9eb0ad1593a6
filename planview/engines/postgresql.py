"""PostgreSQL: EXPLAIN output in TEXT, JSON, XML and YAML (versions 12 to 18).

JSON, XML and YAML are first turned into the same dicts, keyed as the JSON format spells
them; the text format is read line by line into those same dicts. One builder then makes
the `PlanNode`s, so the four formats cannot drift apart.
"""

from __future__ import annotations

import json
import re
import sys
from functools import lru_cache
from typing import Any

import sqlglot
from sqlglot import exp as sqlglot_exp

from ..check import Role
from ..errors import PlanParseError
from ..index import index_of
from ..inert import check_name, comment_text
from ..model import NO_ENTRIES, Condition, ParsedPlan, PlanNode, Statement
from ..source import MAX_DEPTH
from ._dispatch import JSON_DECODER, MAX_COUNT, BadNumber, bad_number_error
from ._tree import append_node, check_depth, typed_relationships
from .base import Engine

NAME = "postgresql"
ALIASES = ("postgres", "pg", "pgsql")
FORMATS = ("text", "json", "xml", "yaml")
SQL_DIALECT = "postgres"

# ---------------------------------------------------------------------------------------
# Tables: the engine's vocabulary
# ---------------------------------------------------------------------------------------

CONDITION_KEYS = {
    "Filter": "filter",
    "Index Cond": "index_cond",
    "Recheck Cond": "recheck_cond",
    "Join Filter": "join_filter",
    "Hash Cond": "hash_cond",
    "Merge Cond": "merge_cond",
    "One-Time Filter": "one_time_filter",
    "TID Cond": "tid_cond",
    "Run Condition": "run_condition",
    "Order By": "order_by",
    "Conflict Filter": "conflict_filter",
}
ROWS_REMOVED_PREFIX = "Rows Removed by "

BUFFER_KEYS = {
    ("shared", "hit"): "Shared Hit Blocks",
    ("shared", "read"): "Shared Read Blocks",
    ("shared", "dirtied"): "Shared Dirtied Blocks",
    ("shared", "written"): "Shared Written Blocks",
    ("local", "hit"): "Local Hit Blocks",
    ("local", "read"): "Local Read Blocks",
    ("local", "dirtied"): "Local Dirtied Blocks",
    ("local", "written"): "Local Written Blocks",
    ("temp", "read"): "Temp Read Blocks",
    ("temp", "written"): "Temp Written Blocks",
}
BUFFER_NAMES = set(BUFFER_KEYS.values())

NUMERIC_KEYS = {
    "Plan Rows", "Actual Rows", "Actual Loops", "Startup Cost", "Total Cost", "Plan Width",
    "Actual Startup Time", "Actual Total Time", "Workers Planned", "Workers Launched",
    "Planning Time", "Execution Time", "Total Runtime", "Worker Number", "Index Searches",
    *BUFFER_NAMES,
}
BOOL_KEYS = {"Parallel Aware", "Async Capable", "Single Copy", "Inner Unique", "Disabled"}
SINCE_18_KEYS = frozenset({"Disabled", "Index Searches", "Storage", "Maximum Storage"})
"""Node keys first printed by PostgreSQL 18: the structured formats print "Disabled" on every
node (text only when true), ANALYZE prints "Index Searches" on index scans and "Storage" on
Materialize, CTE Scan and WindowAgg (PostgreSQL 18 release notes; on the captures in
plans/tpch/pg18, absent from every pg15 and pg16 capture)."""

# Keys that become PlanNode fields; every other key goes to `extra`.
FIELD_KEYS = {
    "Node Type", "Strategy", "Partial Mode", "Join Type", "Operation", "Parallel Aware",
    "Scan Direction", "Relation Name", "Schema", "Alias", "Index Name", "CTE Name",
    "Function Name", "Parent Relationship", "Subplan Name", "Plan Rows", "Actual Rows",
    "Actual Loops", "Startup Cost", "Total Cost", "Plan Width", "Actual Startup Time",
    "Actual Total Time", "Workers Planned", "Workers Launched", "Workers", "Plans",
    *CONDITION_KEYS, *BUFFER_NAMES,
}

# How each node type's own error is separated from what its inputs carry in
# (see planview.check.RULES). This table is the one the README reproduces.
INPUT_RULES = {
    # scans read a relation: their error is their own
    "Seq Scan": "source", "Index Scan": "source", "Index Only Scan": "source",
    "Bitmap Index Scan": "source", "Tid Scan": "source", "Tid Range Scan": "source",
    "Sample Scan": "source", "Function Scan": "source", "Table Function Scan": "source",
    "Values Scan": "source", "Foreign Scan": "source", "Named Tuplestore Scan": "source",
    "WorkTable Scan": "source", "Custom Scan": "source",
    # grouping estimates a number of groups: its own, unless its input's error explains more
    # (a group count is capped by, and scaled with, the input estimate)
    "Aggregate": "group", "Group": "group", "Unique": "group", "SetOp": "group",
    # joins: minus both inputs (semi/anti: minus the outer input only; see input_rule)
    "Nested Loop": "join", "Hash Join": "join", "Merge Join": "join",
    # pass rows through (perhaps with a filter): minus the child
    "Hash": "pass", "Sort": "pass", "Incremental Sort": "pass", "Materialize": "pass",
    "Memoize": "pass", "Gather": "pass", "Gather Merge": "pass",
    "LockRows": "pass", "Subquery Scan": "pass", "Result": "pass", "ProjectSet": "pass",
    "WindowAgg": "pass", "ModifyTable": "pass",
    # a Limit emits min(its count, its input): judged against that, for estimate and actual
    "Limit": "limit",
    # a heap scan driven by a bitmap: minus its bitmap child
    "Bitmap Heap Scan": "bitmap_heap",
    # several inputs concatenated: against the sum of the children
    "Append": "sum", "Merge Append": "sum", "Recursive Union": "sum",
    # bitmap combinations: PostgreSQL does not count their rows
    "BitmapAnd": "uncounted", "BitmapOr": "uncounted",
    # a CTE Scan re-reads its CTE: minus the CTE's own error
    "CTE Scan": "cte",
}

AGG_STRATEGY = {"Aggregate": "Plain", "GroupAggregate": "Sorted", "HashAggregate": "Hashed",
                "MixedAggregate": "Mixed"}
AGG_LABEL = {v: k for k, v in AGG_STRATEGY.items()}
SETOP_STRATEGY = {"SetOp": "Sorted", "HashSetOp": "Hashed"}
JOIN_TYPES = ("Left", "Right", "Full", "Semi", "Anti", "Right Semi", "Right Anti")
MODIFY_OPS = ("Insert", "Update", "Delete", "Merge")
STATEMENT_TEXT_KEYS = ("Planning Time", "Execution Time", "Total runtime", "Planning",
                       "JIT", "Settings", "Query Identifier", "Serialization", "Trigger",
                       "Memory")
# Node types whose text label carries " on <target>" after the name.
SCAN_TYPES = {
    "Seq Scan", "Index Scan", "Index Only Scan", "Bitmap Index Scan", "Bitmap Heap Scan",
    "Tid Scan", "Tid Range Scan", "Sample Scan", "Function Scan", "Table Function Scan",
    "Values Scan", "CTE Scan", "Named Tuplestore Scan", "WorkTable Scan", "Foreign Scan",
    "Subquery Scan", "Custom Scan",
}
KNOWN_TYPES = set(INPUT_RULES)
# Operator names a text label may start with (at most four words).
TEXT_TYPE_SET = frozenset(KNOWN_TYPES | set(AGG_STRATEGY) | set(SETOP_STRATEGY))


# Node types that read all their input before they emit a row.
BLOCKING = {"Sort", "Hash", "Incremental Sort", "SetOp"}
PRESERVED = {"Left": "outer", "Right": "inner", "Full": "both"}
JOINS = {"Nested Loop", "Hash Join", "Merge Join"}
GATHERS = ("Gather", "Gather Merge")
# Node types whose index conditions restrict the heap scan above them.
BITMAPS = {"Bitmap Index Scan", "BitmapAnd", "BitmapOr", "Bitmap Heap Scan"}


def parallel_divisor(workers: int, leader_participates: bool = True) -> float:
    """PostgreSQL's divisor for per-process estimates (get_parallel_divisor, costsize.c)."""
    divisor = float(workers)
    if leader_participates:
        leader = 1.0 - 0.3 * workers
        if leader > 0:
            divisor += leader
    return divisor or 1.0


def repair(parsed: ParsedPlan) -> None:
    """Repair figures PostgreSQL printed too coarsely, and say so in `derived`.

    - Per-start actual rows are printed rounded (to integers up to 17, to two decimals in 18):
      ``rows=0 loops=29780`` may be 6,000 rows. The inner side of an inner nested loop returned
      exactly the rows the join emitted plus those its join filter removed (each inner row is
      paired with the current outer row, then kept or removed), so its total is set to that
      proof and its range narrowed to it. Through a Memoize the proof is the Memoize's; the
      scan below it ran only on cache misses, so its total is bounded by the Memoize's and
      taken at the same rows per start.
    - The planner clamps a printed estimate to at least one row; for the inner side of an
      inner nested loop without a join filter, the join's estimate over the outer estimate
      gives the real per-start figure. Where the inner side found fewer than a row a start,
      that figure is its estimate (the printed floor would invent an overestimate); where it
      found a row or more a start, it is judged at the printed row and the share below it,
      the selectivity the join's keys were given, stays with the join, which is judged on it.
    """
    nodes = parsed.nodes
    half_step = 0.005 if parsed.engine_version == "18" else 0.5
    for node in nodes:
        if node.operator != "Nested Loop" or node.join_type != "Inner" or not node.executed:
            continue
        inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
        if len(inputs) != 2:
            continue
        outer, inner = inputs
        if inner.executed and node.actual_total is not None:
            _prove_inner_total(node, inner, nodes, half_step)
        has_join_filter = any(c.kind == "join_filter" for c in node.conditions)
        if (not has_join_filter and inner.est_rows == 1 and outer.est_rows and node.est_rows is not None
                and inner.est_total is not None):
            per_start = node.est_rows / outer.est_rows
            if per_start >= 1:
                continue
            figure = (f"estimate printed as 1 row (the planner's floor); the join's estimate "
                      f"{node.est_rows:,.0f} over the outer estimate {outer.est_rows:,.0f} gives "
                      f"{per_start:.3g} per start")
            if inner.executed and inner.actual_rows is not None and inner.actual_rows >= 1:
                # it found at least a row a start: judged at the floor, so the share below one
                # row a start, the selectivity of the join's keys, is the join's own
                inner.derived.append(f"{figure}; it found {inner.actual_rows:g} a start, so it is "
                                     "judged against the 1 row printed and the share below one row "
                                     "a start (the join keys' selectivity) is judged at the join")
                node.derived.append(f"its inner input #{inner.id} is judged at the 1 row a start "
                                    f"printed; the join's own estimate carries the {per_start:.3g} "
                                    "rows a start its keys were given")
                continue
            inner.est_total = per_start * (inner.starts or 1) if inner.executed else per_start
            inner.derived.append(figure)


def _rounding_range(node: PlanNode, half_step: float) -> tuple[float, float] | None:
    """The totals a rounded per-start count allows (None: printed exactly, one start)."""
    if not node.starts or node.starts <= 1 or node.actual_rows is None:
        return None
    known = node.extra.get("actual_total_range")
    if known:
        return known[0], known[1]
    return (max(0.0, (node.actual_rows - half_step) * node.starts),
            (node.actual_rows + half_step) * node.starts)


def _prove_inner_total(join: PlanNode, inner: PlanNode, nodes: list[PlanNode], half_step: float) -> None:
    """The inner input's total from what the join emitted and removed (see `repair`)."""
    removed = sum(join.rows_removed.get(k, 0.0) for k in ("Join Filter", "Filter"))
    join_range = _rounding_range(join, half_step) or (join.actual_total, join.actual_total)
    removed_range = (removed * (join.starts or 1),) * 2
    if removed and join.starts and join.starts > 1:
        removed_range = (max(0.0, removed - half_step) * join.starts, (removed + half_step) * join.starts)
    proof = (join_range[0] + removed_range[0], join_range[1] + removed_range[1])
    own = _rounding_range(inner, half_step)
    if own is None or inner.actual_total is None:
        return
    low, high = max(own[0], proof[0]), min(own[1], proof[1])
    if low > high:  # the figures disagree: keep what was printed
        return
    value = min(max(inner.actual_total, low), high) if high > low else low
    inner.extra["actual_total_range"] = [low, high]
    if abs(value - inner.actual_total) > 1e-9:
        exact = "exactly" if high == low else f"between {low:,.0f} and {high:,.0f}, so"
        inner.derived.append(
            f"actual total {value:,.0f}: the nested loop above emitted {proof[0]:,.0f} rows "
            f"through it and removed {removed_range[0]:,.0f} by its join filter, so it returned "
            f"{exact} that many; per-start rows are printed rounded ({inner.actual_rows:g} x "
            f"{inner.starts:,.0f} loops)")
        inner.actual_total = value
    if inner.operator == "Memoize":
        _through_memoize(inner, nodes, half_step)


def _through_memoize(memo: PlanNode, nodes: list[PlanNode], half_step: float) -> None:
    """The scan below a Memoize runs once per cache miss: its total is at most the Memoize's,
    and is taken at the Memoize's rows per start, within what its own rounding allows."""
    below = [nodes[c] for c in memo.children if nodes[c].is_input_edge]
    if len(below) != 1 or memo.actual_total is None or not memo.starts:
        return
    scan = below[0]
    own = _rounding_range(scan, half_step)
    if own is None or scan.actual_total is None:
        return
    high = min(own[1], memo.actual_total)
    low = min(own[0], high)
    value = min(max(memo.actual_total / memo.starts * scan.starts, low), high)
    scan.extra["actual_total_range"] = [value, value]
    if abs(value - scan.actual_total) > 1e-9:
        scan.derived.append(
            f"actual total taken as {value:,.0f}: the Memoize above returned {memo.actual_total:,.0f} "
            f"rows over {memo.starts:,.0f} lookups; this ran on its {scan.starts:,.0f} cache misses, "
            f"taken at the same rows per lookup (per-start rows are printed rounded: "
            f"{scan.actual_rows:g} x {scan.starts:,.0f} loops)")
        scan.actual_total = value


# ---------------------------------------------------------------------------------------
# Detection and the paste
# ---------------------------------------------------------------------------------------

_PSQL_HEADER = re.compile(r"^\s*QUERY PLAN\s*$", re.M)
_PSQL_RULE = re.compile(r"^\s*-{3,}\s*$")
_PSQL_FOOTER = re.compile(r"^\s*\(\d+ rows?\)\s*$", re.M)
_PSQL_PLUS = re.compile(r"\s*\+$")
_TEXT_NODE_HINT = re.compile(
    r"\(cost=\d[\d.]*\.\.\d[\d.]* rows=\d+ width=\d+\)"
    r"|\(actual (time=(?:[\d.]+|N)\.\.(?:[\d.]+|N) )?rows=(?:[\d.]+|N) loops=(?:\d+|N)\)|\(never executed\)"
)


def _alternatives(names) -> str:
    return "|".join(re.escape(n) for n in sorted(names, key=len, reverse=True))


_OPERATOR_LABEL = re.compile(
    r"^(?:Async )?(?:Parallel )?(?:Partial |Finalize )?(?:"
    r"(?:Insert|Update|Delete|Merge) on \S.*"
    r"|Nested Loop(?: (?:Left|Right Semi|Right Anti|Right|Full|Semi|Anti) Join)?"
    r"|(?:Hash|Merge)(?: (?:Left|Right Semi|Right Anti|Right|Full|Semi|Anti))? Join"
    rf"|(?:{_alternatives(SCAN_TYPES)})(?: \(\S[^)]*\))?(?: Backward)?(?: (?:using|on) \S.*)?"
    rf"|(?:{_alternatives(SETOP_STRATEGY)}) (?:Intersect|Except)(?: All)?"
    rf"|(?:{_alternatives(TEXT_TYPE_SET - SCAN_TYPES - set(SETOP_STRATEGY))})"
    r")$")
"""An operator line's label as PostgreSQL prints it, figures aside."""
_COSTS_OFF_LINES = 400


def _figureless_text(lines: list[str]) -> bool:
    """A text plan printed without any figures (EXPLAIN (COSTS OFF)): every operator line is an
    operator label PostgreSQL prints, children under '->  ', detail lines indented below them."""
    shown = [x for x in lines[:_COSTS_OFF_LINES] if x.strip()]
    if not shown or not _OPERATOR_LABEL.match(shown[0]):
        return False
    for line in shown[1:]:
        content = line.lstrip(" ")
        if content.startswith("->"):
            if not content.startswith("->  ") or not _OPERATOR_LABEL.match(content[4:].lstrip(" ")):
                return False
        elif line == content and not (content.split(":", 1)[0] in STATEMENT_TEXT_KEYS
                                      or _OPERATOR_LABEL.match(content)):
            return False
    return True


def clean_paste(text: str) -> tuple[list[str], list[int]]:
    """The plan's lines without psql's decorations, and each kept line's original number.

    psql's aligned display adds a centred ``QUERY PLAN`` header, a dashed rule, a leading
    space, a ``+`` at the end of each continued line and a ``(N rows)`` footer.
    """
    if not _decorated(text):
        lines = text.splitlines()
        first = next((x for x in lines if x.strip()), "")
        if not first.startswith((" ", "\t")):  # raw server output: nothing to take off
            while lines and not lines[-1].strip():
                lines.pop()
            return lines, range(1, len(lines) + 1)
    lines: list[str] = []
    numbers: list[int] = []
    for number, raw in enumerate(text.splitlines(), 1):
        if _PSQL_HEADER.match(raw) or _PSQL_RULE.match(raw) or _PSQL_FOOTER.match(raw):
            continue
        line = _PSQL_PLUS.sub("", raw) if raw.endswith("+") else raw.rstrip()
        lines.append(line)
        numbers.append(number)
    while lines and not lines[-1].strip():
        lines.pop()
        numbers.pop()
    indents = [len(x) - len(x.lstrip(" ")) for x in lines if x.strip()]
    cut = min(indents, default=0)
    if cut:
        lines = [x[cut:] for x in lines]
    return lines, numbers


def detect(text: str) -> tuple[str, float] | None:
    head = text[:20000]
    body = "\n".join(clean_paste(head)[0]).lstrip()
    if body.startswith(("[", "{")) and ('"Node Type"' in body or '"Plan"' in body):
        return "json", 0.95
    if "<explain" in body and "postgresql.org/2009/explain" in body:
        return "xml", 0.99
    if re.match(r"^- (Plan|Query Text):", body) or re.match(r"^(Plan|Query Text):\s*$", body.split("\n", 1)[0]):
        if "Node Type:" in body:
            return "yaml", 0.95
    if _TEXT_NODE_HINT.search(body):
        first = body.split("\n", 1)[0]
        if "width=" in body or not first.startswith("->"):
            return "text", 0.9 if "width=" in body else 0.6
    if _figureless_text(body.split("\n", _COSTS_OFF_LINES)):
        return "text", 0.5
    return None


def _decorated(text: str) -> bool:
    """True when the text carries psql's decorations (header, rule, ``+`` marks, footer)."""
    head = text[:4000]
    return bool(_PSQL_HEADER.search(head) or re.search(r"\+[ \t]*$", head, re.M)
                or _PSQL_FOOTER.search(text[-200:]))


def parse(text: str, fmt: str) -> ParsedPlan:
    if not text.strip():
        raise PlanParseError("the input is empty", engine=NAME, fmt=fmt, line=1)
    if fmt != "text" and not _decorated(text):
        body, numbers = text, []  # structured and undecorated: line numbers are the text's own
    else:
        lines, numbers = clean_paste(text)
        if fmt == "text":
            statements = _read_text(lines, numbers)
            return _build(statements, fmt)
        body = "\n".join(lines)
    if fmt == "json":
        statements = _read_json(body, numbers)
    elif fmt == "yaml":
        statements = _read_yaml(body, numbers)
    elif fmt == "xml":
        statements = _read_xml(body, numbers)
    else:
        raise PlanParseError(f"unknown format {fmt!r}; PostgreSQL formats: {', '.join(FORMATS)}")
    return _build(statements, fmt)


# ---------------------------------------------------------------------------------------
# JSON, YAML, XML into dicts
# ---------------------------------------------------------------------------------------

def _read_json(text: str, numbers: list[int]) -> list[dict]:
    decoder = JSON_DECODER
    docs: list[Any] = []
    pos = 0
    length = len(text)
    while True:
        while pos < length and text[pos] in " \t\r\n,":
            pos += 1
        if pos >= length:
            break
        try:
            doc, pos = decoder.raw_decode(text, pos)
        except json.JSONDecodeError as exc:
            line = numbers[min(exc.lineno, len(numbers)) - 1] if numbers else exc.lineno
            raise PlanParseError(f"invalid JSON: {exc.msg} (column {exc.colno})",
                                 line=line, engine=NAME, fmt="json") from None
        except BadNumber as exc:
            raise bad_number_error(exc, text, NAME, numbers) from None
        except RecursionError:
            raise PlanParseError("JSON nested too deeply for the JSON reader (about 500 plan "
                                 "levels at most); refused. The text format of the same plan "
                                 f"reads to {MAX_DEPTH:,} levels", engine=NAME, fmt="json") from None
        docs.append(doc)
    statements: list[dict] = []
    for doc_no, doc in enumerate(docs):
        items = doc if isinstance(doc, list) else [doc]
        for item_no, item in enumerate(items):
            where = f"[{item_no}]" if len(docs) == 1 else f"document {doc_no + 1}[{item_no}]"
            if not isinstance(item, dict) or "Plan" not in item:
                raise PlanParseError("expected an object with a \"Plan\" key", key=where,
                                     engine=NAME, fmt="json")
            item["__path__"] = where
            statements.append(item)
    return statements


def _read_yaml(text: str, numbers: list[int]) -> list[dict]:
    import yaml

    try:
        docs = _yaml_documents(text, numbers)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = None
        if mark is not None:
            line = numbers[min(mark.line, len(numbers) - 1)] if numbers else mark.line + 1
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise PlanParseError(f"invalid YAML: {problem}", line=line, engine=NAME, fmt="yaml") from None
    statements: list[dict] = []
    for doc in docs:
        if doc is None:
            continue
        items = doc if isinstance(doc, list) else [doc]
        for item_no, item in enumerate(items):
            if not isinstance(item, dict) or "Plan" not in item:
                raise PlanParseError("expected a mapping with a \"Plan\" key", key=f"[{item_no}]",
                                     engine=NAME, fmt="yaml")
            item["__path__"] = f"[{len(statements)}]"
            statements.append(item)
    return statements


_YAML_INT = re.compile(r"[-+]?[0-9]+")
_YAML_FLOAT = re.compile(r"[-+]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][-+]?[0-9]+)?")
_YAML_WORDS = {"true": True, "True": True, "TRUE": True, "false": False, "False": False,
               "FALSE": False, "null": None, "Null": None, "NULL": None, "~": None, "": None,
               ".inf": float("inf"), ".Inf": float("inf"), "-.inf": float("-inf"),
               ".nan": float("nan"), ".NaN": float("nan")}
_YAML_MAX_NESTING = 2 * MAX_DEPTH + 16  # a plan level is a mapping inside a "Plans" list


def _yaml_documents(text: str, numbers: list[int]) -> list[Any]:
    """The documents of a YAML text, built straight from the parser's events.

    PostgreSQL writes plain YAML: mappings, lists, quoted strings and plain numbers and
    booleans, never an anchor, alias or tag. Those are refused where they stand, before
    anything is expanded (nested aliases grow exponentially, and merging them with ``<<``
    takes exponential time). Building from events keeps no node graph, so memory is the
    result's alone.
    """
    import yaml

    loader_class = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
    docs: list[Any] = []
    # each open container: (the container, the pending mapping key or None, its line)
    stack: list[list[Any]] = []
    for event in yaml.parse(text, Loader=loader_class):
        kind = event.__class__
        if kind is yaml.AliasEvent:
            raise PlanParseError("YAML aliases (*name) are refused: PostgreSQL never writes them, and "
                                 "expanding them costs unbounded time and memory",
                                 line=_yaml_line(event, numbers), engine=NAME, fmt="yaml")
        if kind is yaml.MappingEndEvent or kind is yaml.SequenceEndEvent:
            container = stack.pop()[0]
            if container.__class__ is dict and "Node Type" not in container:
                del container["__line__"]  # kept on plan nodes only, for error messages
            continue
        if kind is not yaml.ScalarEvent and kind is not yaml.MappingStartEvent \
                and kind is not yaml.SequenceStartEvent:
            continue  # stream and document starts and ends
        if event.anchor is not None or event.tag is not None:
            what = "anchors (&name)" if event.anchor is not None else f"tags ({event.tag})"
            raise PlanParseError(f"YAML {what} are refused: PostgreSQL never writes them, and "
                                 "expanding aliases costs unbounded time and memory",
                                 line=_yaml_line(event, numbers), engine=NAME, fmt="yaml")
        top = stack[-1] if stack else None
        if top is not None and top[1] is _NO_KEY and top[0].__class__ is dict:
            if kind is not yaml.ScalarEvent:
                raise PlanParseError("a YAML mapping key that is not a scalar is refused",
                                     line=_yaml_line(event, numbers), engine=NAME, fmt="yaml")
            top[1] = event.value
            continue
        if kind is yaml.ScalarEvent:
            value: Any = event.value if event.style else _yaml_plain(event.value, event, numbers)
        elif kind is yaml.MappingStartEvent:
            value = {"__line__": _yaml_line(event, numbers)}
        else:
            value = []
        if top is None:
            docs.append(value)
        elif top[0].__class__ is list:
            top[0].append(value)
        else:
            top[0][top[1]] = value
            top[1] = _NO_KEY
        if kind is not yaml.ScalarEvent:
            if len(stack) >= _YAML_MAX_NESTING:
                raise PlanParseError(f"YAML nested more than {_YAML_MAX_NESTING:,} levels; refused",
                                     line=_yaml_line(event, numbers), engine=NAME, fmt="yaml")
            stack.append([value, _NO_KEY])
    return docs


_NO_KEY = object()


def _yaml_line(event, numbers: list[int]) -> int:
    line = event.start_mark.line
    return numbers[min(line, len(numbers) - 1)] if numbers else line + 1


def _yaml_plain(value: str, event, numbers: list[int]) -> Any:
    """A plain scalar as the YAML 1.1 core schema reads it (the subset EXPLAIN writes)."""
    if value in _YAML_WORDS:
        return _YAML_WORDS[value]
    if value[0] in "0123456789-+.":
        if _YAML_INT.fullmatch(value):
            if len(value) > 300:
                raise PlanParseError(f"a {len(value):,}-digit number is beyond any count or cost; "
                                     "refused", line=_yaml_line(event, numbers), engine=NAME, fmt="yaml")
            return int(value)
        if _YAML_FLOAT.fullmatch(value):
            return float(value)
    return value


_XML_KEY_FIXES = {"One-Time-Filter": "One-Time Filter", "Pre-sorted-Groups": "Pre-sorted Groups",
                  "Full-sort-Groups": "Full-sort Groups"}
_XML_LIST_TAGS = {"Plans", "Output", "Sort-Key", "Group-Key", "Grouping-Sets", "Group-Keys",
                  "Hash-Keys", "Workers", "Triggers", "Presorted-Key", "Partial-Sort-Key",
                  "Sort-Methods-Used", "Cache-Key", "Relations"}


@lru_cache(maxsize=1024)
def _xml_key(tag: str) -> str:
    return _XML_KEY_FIXES.get(tag, tag.replace("-", " "))


def _read_xml(text: str, numbers: list[int]) -> list[dict]:
    from lxml import etree

    if re.search(r"<!(DOCTYPE|ENTITY)", text, re.IGNORECASE):
        raise PlanParseError("XML with a DOCTYPE or ENTITY declaration is refused (entities are "
                             "never expanded)", line=_line_of(text, re.search(r"<!(DOCTYPE|ENTITY)", text, re.I).start(), numbers),
                             engine=NAME, fmt="xml")
    body = re.sub(r"<\?xml[^>]*\?>", "", text)
    parser = etree.XMLParser(resolve_entities=False, no_network=True, load_dtd=False,
                             dtd_validation=False, huge_tree=False, remove_comments=True)
    try:
        root = etree.fromstring(f"<planview-paste>{body}</planview-paste>".encode(), parser)
    except etree.XMLSyntaxError as exc:
        line = exc.lineno if exc.lineno else None
        if line is not None and numbers:
            line = numbers[min(line, len(numbers)) - 1]
        raise PlanParseError(f"invalid XML: {exc.msg}", line=line, engine=NAME, fmt="xml") from None
    statements: list[dict] = []
    for explain in root:
        if not isinstance(explain.tag, str) or etree.QName(explain).localname != "explain":
            raise PlanParseError("expected <explain> elements", line=_src_line(explain, numbers),
                                 engine=NAME, fmt="xml")
        for query in explain:
            if not isinstance(query.tag, str):
                continue
            if etree.QName(query).localname != "Query":
                raise PlanParseError(f"expected <Query>, found <{etree.QName(query).localname}>",
                                     line=_src_line(query, numbers), engine=NAME, fmt="xml")
            item = _xml_to_dict(query)
            if not isinstance(item, dict) or "Plan" not in item:
                raise PlanParseError("<Query> without <Plan>", line=_src_line(query, numbers),
                                     engine=NAME, fmt="xml")
            item["__path__"] = f"Query[{len(statements)}]"
            statements.append(item)
    if not statements:
        raise PlanParseError("no <explain><Query> found", engine=NAME, fmt="xml")
    return statements


def _line_of(text: str, offset: int, numbers: list[int]) -> int:
    line = text.count("\n", 0, offset)
    return numbers[line] if line < len(numbers) else line + 1


def _src_line(element, numbers: list[int]) -> int | None:
    line = getattr(element, "sourceline", None)
    if line and numbers:
        return numbers[min(line, len(numbers)) - 1]
    return line


def _xml_to_dict(top) -> Any:
    """Element to dict/list/str without recursion (an explicit stack)."""
    from lxml import etree

    def convert_leaf(element) -> Any:
        return (element.text or "").strip()

    result: dict = {}
    stack: list[tuple[Any, Any]] = [(top, result)]
    while stack:
        element, target = stack.pop()
        for child in element:
            if not isinstance(child.tag, str):
                continue
            tag = etree.QName(child).localname
            key = _xml_key(tag)
            kids = [c for c in child if isinstance(c.tag, str)]
            if tag in _XML_LIST_TAGS or (kids and len(kids) > 1 and len({c.tag for c in kids}) == 1
                                         and etree.QName(kids[0]).localname in ("Item", "Plan", "Worker", "Trigger")):
                items: list[Any] = []
                for kid in kids:
                    if [c for c in kid if isinstance(c.tag, str)]:
                        sub: dict = {}
                        items.append(sub)
                        stack.append((kid, sub))
                    else:
                        items.append(convert_leaf(kid))
                value: Any = items
            elif kids:
                sub = {}
                value = sub
                stack.append((child, sub))
            else:
                value = convert_leaf(child)
            if isinstance(target, dict):
                target[key] = value
    # lists are filled in document order; nested dicts are filled later, in place
    return result


# ---------------------------------------------------------------------------------------
# The text format into the same dicts
# ---------------------------------------------------------------------------------------

MASKED = "N"
"""What PostgreSQL's regression suites print in place of a figure that varies from run to run
(``loops=N``, ``Memory Usage: NkB``, ``Workers Launched: N``): read as unknown."""
_NUM = rf"(?:\d+(?:\.\d+)?|{MASKED})"
_INT = rf"(?:\d+|{MASKED})"
_FIGURES = re.compile(
    rf"(?:  \(cost=(?P<sc>{_NUM})\.\.(?P<tc>{_NUM}) rows=(?P<rows>{_INT}) width=(?P<width>{_INT})\))?"
    rf"(?: ?\((?:actual (?:time=(?P<ast>{_NUM})\.\.(?P<att>{_NUM}) )?rows=(?P<ar>{_NUM}) loops=(?P<loops>{_INT})"
    r"|(?P<never>never executed))\))?\s*$"
)
MASKED_NOTE = ("masked figures: the plan prints 'N' in place of some numbers (as the engine's regression "
               "suites do); those figures are read as unknown and nothing is judged on them")


def _figure(text: str, key: str, node: dict) -> float | None:
    """A printed figure, or None where it is masked (the key is noted on the node)."""
    if text == MASKED:
        node.setdefault("__masked__", []).append(key)
        return None
    return float(text)


class _LineMatch:
    """The label of an operator line and the match of its figures (cost, actual)."""

    __slots__ = ("label", "figures")

    def __init__(self, label: str, figures):
        self.label = label
        self.figures = figures

    def group(self, name: str):
        if name == "label":
            return self.label
        return self.figures.group(name) if self.figures is not None else None


class _NodeLine:
    """Splits an operator line where its figures start: no backtracking over the label."""

    @staticmethod
    def match(text: str) -> _LineMatch | None:
        cut = text.find("  (cost=")
        if cut < 0:
            cut = text.find(" (actual ")
            if cut < 0:
                cut = text.find(" (never executed)")
        if cut < 0:
            return _LineMatch(text, _FIGURES.match(""))
        figures = _FIGURES.match(text, cut)
        if figures is None:
            return _LineMatch(text, _FIGURES.match(""))
        return _LineMatch(text[:cut], figures)


_NODE_LINE = _NodeLine
_HEADER_LINE = re.compile(r"^(?:(?P<init>InitPlan \d+)(?: \(returns .*\))?|(?P<sub>SubPlan \d+)|CTE (?P<cte>.+))$")
_WORKER_LINE = re.compile(r"^Worker (?P<n>\d+):\s+(?P<rest>.*)$")
_ACTUAL_PART = re.compile(
    rf"actual (?:time=(?P<ast>{_NUM})\.\.(?P<att>{_NUM}) )?rows=(?P<ar>{_NUM}) loops=(?P<loops>{_INT})")
_IDENT = r'(?:"(?:[^"]|"")+"|[^\s".]+)'
_TARGET = re.compile(rf"^(?P<name>{_IDENT}(?:\.{_IDENT})*)(?: (?P<alias>{_IDENT}))?$")


class _Frame:
    __slots__ = ("node", "detail_col", "header", "owner", "last_key", "worker")

    def __init__(self, node, detail_col, header=None, owner=None):
        self.node = node
        self.detail_col = detail_col
        self.header = header
        self.owner = owner
        self.last_key = None
        self.worker = None


def _read_text(lines: list[str], numbers: list[int]) -> list[dict]:
    statements: list[dict] = []
    stmt: dict | None = None
    stack: list[_Frame] = []
    stmt_last_key: str | None = None
    labels: dict[str, dict[str, Any]] = {}
    for index, line in enumerate(lines):
        if not line.strip():
            continue
        lineno = numbers[index]
        col = len(line) - len(line.lstrip(" "))
        content = line[col:]
        if content.startswith("->"):
            if stmt is None or not stack:
                raise PlanParseError("a child operator ('->') before any root operator", line=lineno,
                                     engine=NAME, fmt="text")
            label_col = col + len(content) - len(content[2:].lstrip(" "))
            while stack and stack[-1].detail_col > col:
                stack.pop()
            if not stack:
                raise PlanParseError("child operator is indented less than its parent",
                                     line=lineno, engine=NAME, fmt="text")
            top = stack[-1]
            node = _text_node(content[2:].lstrip(" "), lineno, labels)
            if top.header is not None:
                kind, name = top.header
                node["Parent Relationship"] = kind
                node["Subplan Name"] = name
                parent = top.owner
                stack.pop()
            else:
                parent = top.node
            parent.setdefault("Plans", []).append(node)
            check_depth(len(stack) + 1, line=lineno, engine=NAME, fmt="text")
            stack.append(_Frame(node, label_col + 2))
            continue
        if col == 0:
            key = content.split(":", 1)[0]
            is_statement_key = stmt is not None and (
                key in STATEMENT_TEXT_KEYS or key.startswith("Trigger ")
            )
            if is_statement_key:
                stack = []
                stmt_last_key = _statement_text_line(stmt, content, lineno)
                continue
            if stmt is not None and stack and not _NODE_LINE.match(content).group("rows") \
                    and not _NODE_LINE.match(content).group("ar") and ":" in content:
                # a detail line pushed to column 0 (unusual, but seen in hand-edited pastes)
                _detail_line(stack[0], content, lineno)
                continue
            stmt = {"Plan": _text_node(content, lineno, labels), "__path__": f"statement {len(statements) + 1}",
                    "__line__": lineno}
            statements.append(stmt)
            stack = [_Frame(stmt["Plan"], 2)]
            stmt_last_key = None
            continue
        if stmt is None:
            raise PlanParseError("indented line before any operator", line=lineno, engine=NAME,
                                 fmt="text")
        if not stack:
            # indented lines under a statement-level key (Planning:, JIT:, ...)
            _statement_sub_line(stmt, stmt_last_key, content)
            continue
        while len(stack) > 1 and stack[-1].detail_col > col:
            stack.pop()
        top = stack[-1]
        header = _HEADER_LINE.match(content)
        if header and col == top.detail_col and _next_is_arrow(lines, index, col):
            if header.group("init"):
                kind, name = "InitPlan", content
            elif header.group("sub"):
                kind, name = "SubPlan", content
            else:
                kind, name = "InitPlan", content
            owner = top.node if top.header is None else top.owner
            stack.append(_Frame(None, col + 2, header=(kind, name), owner=owner))
            continue
        if top.header is not None:
            raise PlanParseError(f"expected an operator ('->') under {top.header[1]!r}",
                                 line=lineno, engine=NAME, fmt="text")
        if col > top.detail_col:
            _nested_detail_line(top, content, lineno)
        else:
            _detail_line(top, content, lineno)
    if not statements:
        raise PlanParseError("no operator line found", line=numbers[0] if numbers else 1,
                             engine=NAME, fmt="text")
    return statements


def _next_is_arrow(lines: list[str], index: int, col: int) -> bool:
    for line in lines[index + 1:]:
        if line.strip():
            stripped = line.lstrip(" ")
            return stripped.startswith("->") and len(line) - len(stripped) > col
    return False


_BAD_FIGURES = re.compile(r"\((cost|actual)[ =]|\bloops=")


def _text_node(text: str, lineno: int, labels: dict[str, dict[str, Any]]) -> dict:
    """The keys of one operator line. `labels` holds the keys of each label already read in
    this plan (Hash, Sort, Hash Join repeat on many lines), which the node gets a copy of."""
    match = _NODE_LINE.match(text)
    label = match.label.strip()
    figures = match.figures
    sc, tc, rows, width, ast, att, ar, loops, never = (
        figures.groups() if figures is not None else (None,) * 9)
    if not label or _BAD_FIGURES.search(label) or (
            rows is None and ar is None and not never and _BAD_FIGURES.search(text)):
        if not label:
            raise PlanParseError(f"cannot read operator line {text[:80]!r}", line=lineno,
                                 engine=NAME, fmt="text")
        shown = text[text.find("("):][:80]
        raise PlanParseError(f"cannot read the figures {shown!r} (expected cost=S..T rows=N "
                             "width=W and actual time=A..B rows=N loops=L, all non-negative)",
                             line=lineno, engine=NAME, fmt="text")
    keys = labels.get(label)
    if keys is None:
        keys = labels[label] = _label_to_keys(label, lineno)
    node: dict[str, Any] = dict(keys)
    node["__line__"] = lineno
    node["__label__"] = label
    if rows is not None and MASKED not in (sc, tc, rows, width):
        node["Startup Cost"] = float(sc)
        node["Total Cost"] = float(tc)
        node["Plan Rows"] = float(rows)
        node["Plan Width"] = float(width)
    elif rows is not None:
        node["Startup Cost"] = _figure(sc, "Startup Cost", node)
        node["Total Cost"] = _figure(tc, "Total Cost", node)
        node["Plan Rows"] = _figure(rows, "Plan Rows", node)
        node["Plan Width"] = _figure(width, "Plan Width", node)
    if never:
        node["Actual Rows"] = 0.0
        node["Actual Loops"] = 0.0
        node["__never__"] = True
    elif ar is not None:
        node["Actual Rows"] = _figure(ar, "Actual Rows", node)
        node["Actual Loops"] = _figure(loops, "Actual Loops", node)
        if "." in ar:
            node["__decimal_rows__"] = True
        if ast is not None:
            node["Actual Startup Time"] = _figure(ast, "Actual Startup Time", node)
            node["Actual Total Time"] = _figure(att, "Actual Total Time", node)
    return node


def _unquote(name: str) -> str:
    if len(name) >= 2 and name[0] == '"' and name[-1] == '"':
        return name[1:-1].replace('""', '"')
    return name


_IDENT_RE = re.compile(_IDENT)


def _split_qualified(name: str) -> list[str]:
    return [_unquote(p) for p in _IDENT_RE.findall(name)] if name else []


_JOIN_LABEL = re.compile(
    r"^(Nested Loop|Hash|Merge)(?: (Left|Right Semi|Right Anti|Right|Full|Semi|Anti))?(?: Join)?$")


_MODIFY_PREFIXES = tuple(op + " on " for op in MODIFY_OPS)


def _label_to_keys(label: str, lineno: int) -> dict[str, Any]:
    """The JSON keys a text label stands for ("Parallel Hash Left Join" -> Hash Join, Left)."""
    keys: dict[str, Any] = {}
    rest = label
    if rest.startswith("Async "):
        keys["Async Capable"] = True
        rest = rest[len("Async "):]
    keys["Parallel Aware"] = False
    if rest.startswith("Parallel "):
        keys["Parallel Aware"] = True
        rest = rest[len("Parallel "):]
    for mode in ("Partial ", "Finalize "):
        if rest.startswith(mode):
            keys["Partial Mode"] = mode.strip()
            rest = rest[len(mode):]
            break
    if rest.startswith(_MODIFY_PREFIXES):
        for op in MODIFY_OPS:
            if rest.startswith(op + " on "):
                keys["Node Type"] = "ModifyTable"
                keys["Operation"] = op
                _target(keys, rest[len(op) + 4:], "relation")
                return keys
    join = _JOIN_LABEL.match(rest) if rest.startswith(("Nested Loop", "Hash", "Merge")) else None
    if join and (join.group(1) == "Nested Loop" or rest.endswith("Join")):
        keys["Node Type"] = "Nested Loop" if join.group(1) == "Nested Loop" else f"{join.group(1)} Join"
        keys["Join Type"] = join.group(2) or "Inner"
        return keys
    words = rest.split(" ", 4)
    for count in range(min(4, len(words)), 0, -1):
        name = " ".join(words[:count])
        if name in TEXT_TYPE_SET:
            tail = rest[len(name):].strip()
            break
    else:
        keys["Node Type"] = rest
        return keys
    if name in AGG_STRATEGY:
        keys["Node Type"] = "Aggregate"
        keys["Strategy"] = AGG_STRATEGY[name]
        keys.setdefault("Partial Mode", "Simple")
        return keys
    if name in SETOP_STRATEGY:
        keys["Node Type"] = "SetOp"
        keys["Strategy"] = SETOP_STRATEGY[name]
        if tail:
            keys["Command"] = tail
        return keys
    keys["Node Type"] = name
    if name == "Custom Scan" and tail.startswith("("):
        provider, _, tail = tail[1:].partition(")")
        keys["Custom Plan Provider"] = provider
        tail = tail.strip()
    if name in SCAN_TYPES and tail:
        if tail.startswith("Backward"):
            keys["Scan Direction"] = "Backward"
            tail = tail[len("Backward"):].strip()
        elif name in ("Index Scan", "Index Only Scan"):
            keys["Scan Direction"] = "Forward"
        if tail.startswith("using "):
            index_part, sep, tail = tail[len("using "):].partition(" on ")
            keys["Index Name"] = _unquote(index_part)
            if not sep:
                tail = ""
        elif tail.startswith("on "):
            tail = tail[3:]
        if name == "Bitmap Index Scan":
            keys["Index Name"] = _unquote(tail)
        elif tail:
            kind = {"Function Scan": "function", "CTE Scan": "cte", "Subquery Scan": "alias",
                    "WorkTable Scan": "cte", "Named Tuplestore Scan": "tuplestore",
                    "Values Scan": "alias", "Table Function Scan": "alias"}.get(name, "relation")
            _target(keys, tail, kind)
    elif name in ("Index Scan", "Index Only Scan"):
        keys["Scan Direction"] = "Forward"
    return keys


def _target(keys: dict, text: str, kind: str) -> None:
    match = _TARGET.match(text)
    if not match:
        keys["Relation Name" if kind == "relation" else "__target__"] = text
        return
    parts = _split_qualified(match.group("name"))
    alias = _unquote(match.group("alias")) if match.group("alias") else None
    if kind == "alias":
        keys["Alias"] = parts[-1]
        return
    if kind == "tuplestore":
        keys["Tuplestore Name"] = parts[-1]
        keys["Alias"] = alias or parts[-1]
        return
    if kind == "cte":
        keys["CTE Name"] = parts[-1]
        keys["Alias"] = alias or parts[-1]
        return
    if kind == "function":
        keys["Function Name"] = parts[-1]
        if len(parts) > 1:
            keys["Schema"] = parts[-2]
        keys["Alias"] = alias or parts[-1]
        return
    keys["Relation Name"] = parts[-1]
    if len(parts) > 1:
        keys["Schema"] = parts[-2]
    keys["Alias"] = alias or parts[-1]


def _parse_buffers(value: str, into: dict) -> None:
    for part in value.split(","):
        words = part.split()
        if not words:
            continue
        area = words[0]
        for item in words[1:]:
            kind, _, count = item.partition("=")
            key = BUFFER_KEYS.get((area, kind))
            if key and count.isdigit():
                into[key] = float(count)


# Keys the tree is built from: a text detail line may not set them.
_STRUCTURAL_KEYS = frozenset({"Plans", "Workers", "Node Type", "Parent Relationship",
                              "Subplan Name"})


def _detail_line(frame: _Frame, content: str, lineno: int) -> None:
    node = frame.node
    frame.worker = None
    worker = _WORKER_LINE.match(content)
    if worker:
        entry: dict[str, Any] = {"Worker Number": float(worker.group("n"))}
        actual = _ACTUAL_PART.search(worker.group("rest"))
        if actual:
            entry["Actual Rows"] = _figure(actual.group("ar"), "Actual Rows", node)
            entry["Actual Loops"] = _figure(actual.group("loops"), "Actual Loops", node)
            if actual.group("ast"):
                entry["Actual Startup Time"] = _figure(actual.group("ast"), "Actual Startup Time", node)
                entry["Actual Total Time"] = _figure(actual.group("att"), "Actual Total Time", node)
        elif worker.group("rest").strip() != "never executed":
            entry["__text__"] = worker.group("rest")
        node.setdefault("Workers", []).append(entry)
        frame.worker = entry
        frame.last_key = "Workers"
        return
    key, sep, value = content.partition(": ")
    if not sep:
        key, value = content.rstrip(":"), ""
    key = key.strip()
    value = value.strip()
    if key in _STRUCTURAL_KEYS or key.startswith("__"):
        raise PlanParseError(f"a {key!r} detail line is not part of PostgreSQL's text format "
                             "(the tree is read from the '->' lines); refused", line=lineno,
                             engine=NAME, fmt="text")
    frame.last_key = key
    if key == "Buffers":
        _parse_buffers(value, node)
    elif key.startswith(ROWS_REMOVED_PREFIX) or key in ("Workers Planned", "Workers Launched",
                                                         "Index Searches"):
        if value == MASKED:
            node[key] = _figure(value, key, node)
            return
        try:
            node[key] = float(value)
        except ValueError:
            raise PlanParseError(f"{key} is not a number: {value!r}", line=lineno, engine=NAME,
                                 fmt="text") from None
    elif key in node and key in CONDITION_KEYS:
        _append(node, key, " AND ", value)
    else:
        node[key] = value
        if "__parts__" in node:
            node["__parts__"].pop(key, None)


def _append(node: dict, key: str, separator: str, value: str) -> None:
    """Add to a value that repeated lines build up, as pieces joined once by the builder
    (joining on every line costs time quadratic in the number of lines)."""
    parts = node.get("__parts__")
    if parts is None:
        parts = node["__parts__"] = {}
    pieces = parts.get(key)
    if pieces is None:
        pieces = parts[key] = [node[key]]
    pieces.append(separator)
    pieces.append(value)


def _nested_detail_line(frame: _Frame, content: str, lineno: int) -> None:
    """A line indented under a detail line: a worker's figures, or a wrapped value."""
    if frame.worker is not None:
        key, _, value = content.partition(": ")
        if key.strip() == "Buffers":
            _parse_buffers(value, frame.worker)
        else:
            frame.worker[key.strip()] = value.strip()
        return
    key = frame.last_key or "Details"
    previous = frame.node.get(key)
    if isinstance(previous, str) and previous:
        _append(frame.node, key, "\n", content)
    else:
        frame.node[key] = content
        if "__parts__" in frame.node:
            frame.node["__parts__"].pop(key, None)


def _statement_text_line(stmt: dict, content: str, lineno: int) -> str:
    key, _, value = content.partition(":")
    key = key.strip()
    value = value.strip()
    if key in ("Planning Time", "Execution Time", "Total runtime"):
        number = value.removesuffix("ms").strip()
        try:
            stmt["Execution Time" if key == "Total runtime" else key] = float(number)
        except ValueError:
            raise PlanParseError(f"{key} is not a number: {value!r}", line=lineno, engine=NAME,
                                 fmt="text") from None
    elif key.startswith("Trigger"):
        stmt.setdefault("Triggers", []).append({"Trigger Name": key[len("Trigger "):], "Text": value})
    elif key == "Settings":
        stmt["Settings"] = dict(
            (k.strip(), v.strip().strip("'")) for k, _, v in
            (item.partition("=") for item in re.split(r", (?=[a-z_.]+ = )", value)) if k.strip()
        )
    else:
        stmt[key] = value if value else {}
    return key


def _statement_sub_line(stmt: dict, key: str | None, content: str) -> None:
    if key is None:
        return
    target = stmt.get(key)
    if not isinstance(target, dict):
        target = {}
        stmt[key] = target
    sub_key, _, value = content.partition(":")
    if sub_key.strip() == "Buffers":
        _parse_buffers(value.strip(), target)
    else:
        target[sub_key.strip()] = value.strip()


# ---------------------------------------------------------------------------------------
# Dicts into PlanNodes (one builder for all four formats)
# ---------------------------------------------------------------------------------------

def _num(value: Any, key: str, path: str, fmt: str, line: int | None) -> float | None:
    if value is None:
        return None
    kind = type(value)
    if (kind is int or kind is float) and 0 <= value <= MAX_COUNT:
        return float(value)
    if isinstance(value, bool):
        raise PlanParseError(f"expected a number, got {value!r}", key=f"{path}.\"{key}\"",
                             line=line, engine=NAME, fmt=fmt)
    if isinstance(value, float):
        number = value
    elif isinstance(value, int):
        number = float(value) if abs(value) < _FLOAT_MAX else float("inf")
    elif isinstance(value, str):
        try:
            number = float(value.strip())
        except ValueError:
            raise PlanParseError(f"expected a number, got {value!r}", key=f"{path}.\"{key}\"",
                                 line=line, engine=NAME, fmt=fmt) from None
    else:
        raise PlanParseError(f"expected a number, got {type(value).__name__}",
                             key=f"{path}.\"{key}\"", line=line, engine=NAME, fmt=fmt)
    if number != number or number in (float("inf"), float("-inf")):
        raise PlanParseError(f"expected a finite number, got {value!r}", key=f"{path}.\"{key}\"",
                             line=line, engine=NAME, fmt=fmt)
    if key not in ("Startup Cost", "Total Cost"):
        if number < 0:
            raise PlanParseError(f"negative count {value!r}", key=f"{path}.\"{key}\"", line=line,
                                 engine=NAME, fmt=fmt)
        if number > MAX_COUNT:
            raise PlanParseError(f"{value!r} is beyond any count (PostgreSQL clamps row estimates "
                                 "to 1e100)", key=f"{path}.\"{key}\"", line=line, engine=NAME, fmt=fmt)
    return number


def _bool(value: Any, key: str, path: str, fmt: str, line: int | None) -> bool | None:
    if value is None or isinstance(value, bool):
        return value
    if isinstance(value, str) and value.strip().lower() in ("true", "false"):
        return value.strip().lower() == "true"
    raise PlanParseError(f"expected true or false, got {value!r}", key=f"{path}.\"{key}\"",
                         line=line, engine=NAME, fmt=fmt)


def _text(value: Any, key: str, path: str, fmt: str, line: int | None) -> str | None:
    if value is None:
        return None
    if isinstance(value, (str, int, float)) and not isinstance(value, bool):
        return str(value)
    raise PlanParseError(f"expected text, got {type(value).__name__}", key=f"{path}.\"{key}\"",
                         line=line, engine=NAME, fmt=fmt)


_PLAIN_IDENT = re.compile(r"[a-z_][a-z0-9_$]*")


def _quote_ident(ident: str | None) -> str:
    """An identifier as PostgreSQL prints it: bare when it can be, else double-quoted."""
    if ident is None:
        return ""
    if _PLAIN_IDENT.fullmatch(ident):
        return ident
    return '"' + ident.replace('"', '""') + '"'


def compose_label(node: PlanNode) -> str:
    """The label the text format prints for a node, rebuilt from its keys."""
    op = node.operator
    name = op
    if op == "Aggregate":
        name = AGG_LABEL.get(node.strategy or "Plain", "Aggregate")
    elif op == "SetOp":
        name = "HashSetOp" if node.strategy == "Hashed" else "SetOp"
        if node.extra.get("Command"):
            name += f" {node.extra['Command']}"
    elif op in ("Nested Loop", "Hash Join", "Merge Join"):
        base = op.removesuffix(" Join")
        jt = node.join_type or "Inner"
        if jt == "Inner":
            name = "Nested Loop" if op == "Nested Loop" else op
        else:
            name = f"{base} {jt} Join"
    elif op == "ModifyTable":
        name = f"{node.operation or 'Modify'} on"
    if node.partial_mode in ("Partial", "Finalize"):
        name = f"{node.partial_mode} {name}"
    if node.parallel_aware:
        name = f"Parallel {name}"
    if node.extra.get("Async Capable") is True:
        name = f"Async {name}"
    if op == "Custom Scan" and node.extra.get("Custom Plan Provider"):
        name += f" ({node.extra['Custom Plan Provider']})"

    quote = _quote_ident

    def target(obj: str | None) -> str:
        qualified = f"{quote(node.schema)}.{quote(obj)}" if node.schema else quote(obj)
        if node.alias and node.alias != obj:
            return f"{qualified} {quote(node.alias)}"
        return qualified

    if op in ("Index Scan", "Index Only Scan"):
        if node.scan_direction == "Backward":
            name += " Backward"
        if node.index:
            name += f" using {quote(node.index)}"
    if op == "Bitmap Index Scan" and node.index:
        return f"{name} on {quote(node.index)}"
    if op == "ModifyTable":
        return f"{name} {target(node.relation)}"
    if node.relation:
        return f"{name} on {target(node.relation)}"
    if op == "Function Scan" and node.function_name:
        return f"{name} on {target(node.function_name)}"
    if op in ("CTE Scan", "WorkTable Scan") and node.cte_name:
        text = f"{name} on {quote(node.cte_name)}"
        if node.alias and node.alias != node.cte_name:
            text += f" {quote(node.alias)}"
        return text
    if op in ("Subquery Scan", "Values Scan", "Table Function Scan") and node.alias:
        return f"{name} on {quote(node.alias)}"
    if op == "Named Tuplestore Scan" and node.extra.get("Tuplestore Name"):
        return f"{name} on {quote(node.extra['Tuplestore Name'])}"
    return name


def _build(statements: list[dict], fmt: str) -> ParsedPlan:
    nodes: list[PlanNode] = []
    stmts: list[Statement] = []
    version: str | None = None
    has_actuals = False
    since_18 = False
    has_estimates = masked = False
    for stmt_no, stmt in enumerate(statements):
        path = stmt.pop("__path__", f"[{stmt_no}]")
        stmt_line = stmt.pop("__line__", None)
        plan = stmt.get("Plan")
        if not isinstance(plan, dict):
            raise PlanParseError("\"Plan\" is not an object", key=f"{path}.Plan", line=stmt_line,
                                 engine=NAME, fmt=fmt)
        root_id = len(nodes)
        # iterative pre-order: (dict, parent id, depth, key path, position among siblings)
        todo: list[tuple[dict, int | None, int, str, int]] = [(plan, None, 0, f"{path}.Plan", 0)]
        while todo:
            raw, parent, depth, key_path, position = todo.pop()
            if depth > MAX_DEPTH:
                check_depth(depth, key=key_path, engine=NAME, fmt=fmt)
            node = append_node(nodes, _node_from_dict(raw, len(nodes), parent, depth, stmt_no, key_path, fmt),
                               parent)
            if parent is not None and node.parent_relationship is None:
                node.parent_relationship = _text_relationship(nodes[parent], position)
            if not has_actuals:
                has_actuals = "Actual Loops" in raw or "Actual Rows" in raw
            if not has_estimates:
                has_estimates = "Plan Rows" in raw
            if not masked:
                masked = "__masked__" in raw
            if not since_18:
                since_18 = bool(raw.get("__decimal_rows__")) or not SINCE_18_KEYS.isdisjoint(raw)
            kids = raw.get("Plans") or []
            if not isinstance(kids, list):
                raise PlanParseError("\"Plans\" is not a list", key=f"{key_path}.Plans",
                                     engine=NAME, fmt=fmt, line=raw.get("__line__"))
            for i in range(len(kids) - 1, -1, -1):
                if not isinstance(kids[i], dict):
                    raise PlanParseError("a plan is not an object", key=f"{key_path}.Plans[{i}]",
                                         engine=NAME, fmt=fmt)
                todo.append((kids[i], node.id, depth + 1, f"{key_path}.Plans[{i}]", i))
        if fmt == "text":
            _fix_text_relationships(nodes, root_id)
        statement = Statement(root=root_id)
        line = stmt_line
        statement.planning_ms = _num(stmt.get("Planning Time"), "Planning Time", path, fmt, line)
        statement.execution_ms = _num(stmt.get("Execution Time", stmt.get("Total Runtime")),
                                      "Execution Time", path, fmt, line)
        statement.query_text = stmt.get("Query Text") if isinstance(stmt.get("Query Text"), str) else None
        triggers = stmt.get("Triggers")
        statement.triggers = [t for t in triggers if isinstance(t, dict)] if isinstance(triggers, list) else []
        settings = stmt.get("Settings")
        statement.settings = dict(settings) if isinstance(settings, dict) else {}
        statement.extra = {k: v for k, v in stmt.items()
                           if k not in ("Plan", "Planning Time", "Execution Time", "Query Text",
                                        "Triggers", "Settings", "Total Runtime")}
        stmts.append(statement)
    notes = []
    if since_18:
        version = "18"
    if not has_estimates and not has_actuals:
        notes.append("no estimates and no actuals: this is EXPLAIN (COSTS OFF), so the tree is "
                     "shown and nothing can be judged")
    elif not has_estimates:
        notes.append("no estimates: the plan was printed with COSTS OFF, so actual rows cannot be "
                     "checked against anything")
    elif not has_actuals:
        notes.append("no actuals: this is EXPLAIN without ANALYZE, so estimates cannot be checked")
    if masked:
        notes.append(MASKED_NOTE)
    typed_relationships(nodes)
    return ParsedPlan(engine=NAME, format=fmt, nodes=nodes, statements=stmts,
                      engine_version=version, has_actuals=has_actuals, notes=notes)


def _text_relationship(parent: PlanNode, position: int) -> str:
    if parent.operator in ("Append", "Merge Append", "BitmapAnd", "BitmapOr", "Custom Scan"):
        return "Member"
    if parent.operator == "Subquery Scan":
        return "Subquery"
    return "__ordinal__"


def _fix_text_relationships(nodes: list[PlanNode], root_id: int) -> None:
    """Text does not print Outer/Inner: the first input child is Outer, the second Inner."""
    for node in nodes[root_id:]:
        ordinal = [c for c in node.children if nodes[c].parent_relationship == "__ordinal__"]
        for i, child in enumerate(ordinal):
            nodes[child].parent_relationship = "Outer" if i == 0 else "Inner"


_STR_FIELDS = {
    "Strategy": "strategy", "Partial Mode": "partial_mode", "Join Type": "join_type",
    "Operation": "operation", "Scan Direction": "scan_direction", "Relation Name": "relation",
    "Schema": "schema", "Alias": "alias", "Index Name": "index", "CTE Name": "cte_name",
    "Function Name": "function_name", "Parent Relationship": "parent_relationship",
    "Subplan Name": "subplan_name",
}
_NUM_FIELDS = {
    "Plan Rows": "est_rows", "Startup Cost": "startup_cost", "Total Cost": "total_cost",
    "Plan Width": "width",
}
_LATER_NUMBERS = {"Actual Loops": "starts", "Actual Rows": "actual_rows",
                  "Actual Startup Time": "actual_startup_ms", "Actual Total Time": "actual_total_ms",
                  "Workers Planned": "workers_planned", "Workers Launched": "workers_launched"}
_SKIP = {"Node Type", "Plans", "Workers", "Parallel Aware"}
_FLOAT_MAX = 1.7976931348623157e308  # compares with a huge int without converting it
# key -> (what to do, field): one dictionary look-up a key while building a node
_ACTIONS: dict[str, tuple[int, str | None]] = {
    **{k: (0, v) for k, v in _STR_FIELDS.items()},
    **{k: (1, v) for k, v in _NUM_FIELDS.items()},
    **{k: (1, v) for k, v in _LATER_NUMBERS.items()},
    **{k: (3, v) for k, v in CONDITION_KEYS.items()},
    **{k: (4, None) for k in BUFFER_NAMES},
    **{k: (5, None) for k in _SKIP},
}


def _intern(text: str) -> str:
    """One shared copy of a short string (operator and key names, table names): a text or XML
    plan would otherwise hold a fresh copy of each on every node."""
    return sys.intern(text) if len(text) <= 64 else text


def _node_from_dict(raw: dict, node_id: int, parent: int | None, depth: int, stmt_no: int,
                    path: str, fmt: str) -> PlanNode:
    """One pass over the node's keys: each key goes to its field, or to `extra`."""
    line = raw.get("__line__")
    parts = raw.get("__parts__")
    if parts:
        for key, pieces in parts.items():
            raw[key] = "".join(pieces)
    node_type = raw.get("Node Type")
    if not isinstance(node_type, str) or not node_type:
        raise PlanParseError("missing or invalid \"Node Type\"", key=f"{path}.\"Node Type\"",
                             line=line, engine=NAME, fmt=fmt)
    node = PlanNode(id=node_id, parent=parent, operator=_intern(node_type), label="",
                    statement=stmt_no, depth=depth)
    extra = node.extra
    actions = _ACTIONS
    intern = sys.intern
    for key, value in raw.items():
        action = actions.get(key)
        if action is None:
            if key.startswith(ROWS_REMOVED_PREFIX):
                count = _num(value, key, path, fmt, line)
                if count:
                    if node.rows_removed is NO_ENTRIES:
                        node.rows_removed = {}
                    node.rows_removed[key[16:]] = count
            elif not key.startswith("__"):
                extra[_intern(key)] = value
            continue
        code, attr = action
        if code == 1:  # a number field (the most frequent key)
            if (value.__class__ is float or value.__class__ is int) and 0 <= value <= MAX_COUNT:
                setattr(node, attr, float(value))
            else:
                setattr(node, attr, _num(value, key, path, fmt, line))
        elif code == 0:  # a text field: names repeat across nodes, so one copy of each is kept
            if value is not None:
                if value.__class__ is str:
                    setattr(node, attr, intern(value) if len(value) <= 64 else value)
                else:
                    setattr(node, attr, _text(value, key, path, fmt, line))
        elif code == 3:  # a condition
            if value is not None and value != "":
                text = value if value.__class__ is str else _text(value, key, path, fmt, line)
                node.conditions.append(Condition(kind=attr, text=text, key=key))
        elif code == 4:  # a buffer count
            count = _num(value, key, path, fmt, line)
            if count:
                if node.buffers is NO_ENTRIES:
                    node.buffers = {}
                node.buffers[key] = count
    if len(node.conditions) > 1:
        order = {k: i for i, k in enumerate(CONDITION_KEYS)}
        node.conditions.sort(key=lambda c: order[c.key])
    aware = raw.get("Parallel Aware")
    if aware is None or aware.__class__ is bool:
        node.parallel_aware = aware is True
    else:
        node.parallel_aware = bool(_bool(aware, "Parallel Aware", path, fmt, line))
    if node.operator in ("Nested Loop", "Hash Join", "Merge Join") and node.join_type is None:
        node.join_type = "Inner"
    if node.operator == "Aggregate" and node.partial_mode is None:
        node.partial_mode = "Simple"
    masked = raw.get("__masked__")
    if masked and ("Actual Rows" in masked or "Actual Loops" in masked):
        node.executed = None  # it ran, but its actual total cannot be known
        node.derived.append(f"{' and '.join(k.lower() for k in masked if k.startswith('Actual'))} "
                            "masked as 'N' where the plan was printed: the actual total is unknown")
    elif node.starts is not None or node.actual_rows is not None:
        if node.starts is None:
            node.starts = 1.0
        node.executed = bool(node.starts) and "__never__" not in raw
        if not node.executed:
            node.actual_rows = node.actual_startup_ms = node.actual_total_ms = None
    else:
        node.actual_startup_ms = node.actual_total_ms = None
    if node.workers_planned is not None:
        node.workers_planned = int(node.workers_planned)
    if node.workers_launched is not None:
        node.workers_launched = int(node.workers_launched)
    workers = raw.get("Workers")
    if isinstance(workers, list) and workers:
        node.workers = []
        for i, worker in enumerate(workers):
            if not isinstance(worker, dict):
                continue
            wpath = f"{path}.Workers[{i}]"
            node.workers.append({
                "worker": int(_num(worker.get("Worker Number"), "Worker Number", wpath, fmt, line) or 0),
                "actual_rows": _num(worker.get("Actual Rows"), "Actual Rows", wpath, fmt, line),
                "loops": _num(worker.get("Actual Loops"), "Actual Loops", wpath, fmt, line),
            })
    capable = extra.get("Async Capable")
    if capable is not None and not isinstance(capable, bool):
        extra["Async Capable"] = str(capable).lower() == "true"
    node.label = raw.get("__label__") or compose_label(node)
    return node


# ---------------------------------------------------------------------------------------
# What the diagnosis needs of PostgreSQL: its defaults and its fixes
# ---------------------------------------------------------------------------------------

# src/include/utils/selfuncs.h: selectivities used when a clause has no statistics.
DEFAULT_SELECTIVITIES = {
    "DEFAULT_EQ_SEL": 0.005,
    "DEFAULT_INEQ_SEL": 1.0 / 3.0,
    "DEFAULT_RANGE_INEQ_SEL": 0.005,
    "DEFAULT_MATCH_SEL": 0.005,
    "DEFAULT_MATCHING_SEL": 0.010,
    "DEFAULT_NOT_UNK_SEL": 0.995,
}
DEFAULT_SELECTIVITIES["DEFAULT_NUM_DISTINCT"] = 200.0  # groups, not a selectivity
# selfuncs.h: nulltestsel's guess for IS NULL without statistics (IS NOT NULL is
# DEFAULT_NOT_UNK_SEL above). Kept apart from the table the diagnosis matches estimates
# against, where it would tie with DEFAULT_EQ_SEL.
DEFAULT_UNK_SEL = 0.005

# Scans whose printed rows are the table's restriction estimate, clamp_row_est(tuples x
# clauselist_selectivity(baserestrictinfo)), when not parameterised by an outer row
# (set_baserel_size_estimates in costsize.c; cost_seqscan, cost_index and
# cost_bitmap_heap_scan take baserel->rows), with the condition keys that print those clauses
# (a bitmap heap scan's Recheck Cond repeats its index conditions). A bitmap index scan prints
# clamp_row_est(tuples x clauselist_selectivity(its index conditions)) (create_bitmap_subplan in
# createplan.c, with the selectivity genericcostestimate works out in selfuncs.c).
RESTRICTION_SCANS = {
    "Seq Scan": ("filter",),
    "Index Scan": ("index_cond", "filter"),
    "Index Only Scan": ("index_cond", "filter"),
    "Bitmap Heap Scan": ("recheck_cond", "filter"),
    "Bitmap Index Scan": ("index_cond",),
}

_CHANGE_PROCESS = ("Run it first on a copy or a test system; your change process and a DBA decide "
                   "whether and when it runs in production.")
_ANALYZE_CAUTION = ("ANALYZE reads a sample of the table (I/O on a large table) and takes a SHARE "
                    "UPDATE EXCLUSIVE lock: reads and writes go on, but it waits for and blocks "
                    "VACUUM, other ANALYZEs and DDL on the table. New statistics can change the "
                    "plans of other queries too.")


IDENT_MAX_BYTES = 63
"""NAMEDATALEN - 1: a longer name cannot be a real one (the server truncates it)."""

SAFE_FUNCTIONS = frozenset({
    "abs", "btrim", "cast", "ceil", "ceiling", "char_length", "coalesce", "date_part", "date_trunc",
    "extract", "floor", "left", "length", "lower", "ltrim", "md5", "mod", "nullif", "right", "round",
    "rtrim", "sign", "substr", "substring", "to_char", "trunc", "upper",
})
"""Built-in functions an expression in a fix may call: pure ones that wrap a column in a
condition. Anything else goes into a comment for the reader to write out."""

_EXPRESSION_TOKEN = re.compile(r"""
    (?P<space>\ +)
  | (?P<ident>[A-Za-z_][A-Za-z0-9_$]*)
  | "(?P<quoted>(?:[^"]|"")*)"
  | '(?P<string>(?:[^'\\]|'')*)'
  | (?P<number>[0-9]+(?:\.[0-9]+)?)
  | (?P<op>::|\|\||[-+*/%(),])
""", re.VERBOSE)
_EXPRESSION_NODES = (sqlglot_exp.Column, sqlglot_exp.Identifier, sqlglot_exp.Literal, sqlglot_exp.Cast,
                     sqlglot_exp.DataType, sqlglot_exp.DataTypeParam, sqlglot_exp.Paren, sqlglot_exp.Neg,
                     sqlglot_exp.Add, sqlglot_exp.Sub, sqlglot_exp.Mul, sqlglot_exp.Div, sqlglot_exp.Mod,
                     sqlglot_exp.DPipe, sqlglot_exp.Var, sqlglot_exp.Func)
_EXPRESSION_LIMIT = 300


def quote_ident(name: str) -> str:
    """A name from the plan as PostgreSQL reads it back exactly: always double-quoted, any
    double quote doubled; a name no quoting makes safe is refused (`UnquotableName`)."""
    check_name(name, max_bytes=IDENT_MAX_BYTES, engine="PostgreSQL")
    return '"' + name.replace('"', '""') + '"'


def _qtable(table: str | None, parts: tuple[str | None, str] | None) -> str:
    """schema.table split only where the plan gave the schema apart from the name."""
    if parts:
        return ".".join(quote_ident(p) for p in parts if p)
    if not table:
        return "the_table"
    return quote_ident(table)


def _made_name(parts: list[str], suffix: str) -> str:
    """A new object's name built from plan names: letters, digits and _ only, cut to fit."""
    base = "_".join(p for p in (re.sub(r"[^a-z0-9]+", "_", part.lower(), flags=re.ASCII).strip("_")
                                for part in parts) if p) or "planview"
    return quote_ident(base[: IDENT_MAX_BYTES - len(suffix)].rstrip("_") + suffix)


def safe_expression(text: str) -> str | None:
    """The plan's expression re-rendered token by token from what was parsed (names quoted,
    strings re-quoted), or None when it holds anything but columns, constants, casts,
    arithmetic and the functions in `SAFE_FUNCTIONS`: then it may only go into a comment."""
    if not text or len(text) > _EXPRESSION_LIMIT or not text.isprintable():
        return None
    try:
        tree = sqlglot.parse_one(text, read="postgres")
    except Exception:  # sqlglot raises several types for text it cannot read
        return None
    if not all(isinstance(node, _EXPRESSION_NODES) for node in tree.walk()) or \
            any(column.table for column in tree.find_all(sqlglot_exp.Column)):
        return None
    out: list[str] = []
    at = 0
    while at < len(text):
        match = _EXPRESSION_TOKEN.match(text, at)
        if match is None:
            return None
        kind, value = match.lastgroup, match.group(match.lastgroup)
        after = text[match.end():].lstrip(" ")
        if kind == "ident" and after.startswith("(") and value.lower() not in SAFE_FUNCTIONS:
            return None
        if kind == "quoted":
            value = quote_ident(value.replace('""', '"'))
        elif kind == "string":
            value = "'" + value.replace("''", "'").replace("'", "''") + "'"
        elif kind == "space":
            value = " "
        out.append(value)
        at = match.end()
    return "".join(out)


_NO_STATISTIC_FIXES = {
    "join_selectivity": [
        "No statistic of one table describes which keys of the other side match: ANALYZE and",
        "CREATE STATISTICS cannot change a semi or anti join's share of matches. What can:",
        "1. apply the other side's filter first into a table of its own (CREATE TABLE ... AS,",
        "   then ANALYZE it), so the planner counts the keys that are really there, or",
        "2. rewrite the EXISTS / NOT EXISTS as a join against that pre-filtered set.",
    ],
    "planner_guess": [
        "No statistic changes this guess: the planner cannot know how many times a recursion",
        "runs. What can: run the recursion into a temporary table, ANALYZE it, and query that,",
        "or bound the recursion (a depth column with a limit) so the plan above it is cheap",
        "whatever the count.",
    ],
}
"""Causes no statistic of PostgreSQL's can fix: the options, all as comments."""


def suggest_fix(cause: str, table: str | None, columns: list[str], **details) -> tuple[str, str] | None:
    """The SQL that gives the optimizer what it missed, and what running it costs.

    Every name is quoted by `quote_ident`; an expression goes into SQL only as
    `safe_expression` re-rendered it, and plan text in a comment is one inert line.
    """
    if not table and cause not in _NO_STATISTIC_FIXES:
        return None
    qt = _qtable(table, details.get("table_parts"))
    cols = [quote_ident(c) for c in columns]
    if cause == "correlation" and details.get("cross_table"):
        other = _qtable(details.get("other_table") or "other_table", details.get("other_table_parts"))
        other_columns = details.get("other_columns") or columns
        other_cols = [quote_ident(c) for c in other_columns]
        glue = " || ':' || "
        key = _made_name([*columns, "key"], "")
        key_expr = glue.join(f"{c}::text" for c in cols)
        other_key_expr = glue.join(f"{c}::text" for c in other_cols)
        sql = (f"-- {qt} and {other} are joined on {len(cols)} correlated columns; extended "
               "statistics are per table\n"
               "-- and cannot correct a join estimate. What can:\n"
               "-- 1. join on the key that implies the others and drop the redundant clauses, or\n"
               "-- 2. (heavy: rewrites both tables under an ACCESS EXCLUSIVE lock; read the caution\n"
               "--    and take it through your change process) give both tables one combined key\n"
               "--    with statistics of its own, then change the query to join on it:\n"
               f"-- ALTER TABLE {qt} ADD COLUMN {key} text\n"
               f"--     GENERATED ALWAYS AS ({key_expr}) STORED;\n"
               f"-- ALTER TABLE {other} ADD COLUMN {key} text\n"
               f"--     GENERATED ALWAYS AS ({other_key_expr}) STORED;\n"
               f"-- ANALYZE {qt};\n-- ANALYZE {other};\n"
               f"-- then join ON {qt}.{key} = {other}.{key}")
        caution = ("Nothing here runs as pasted. The commented-out option 2 is heavy: ALTER TABLE "
                   "... ADD COLUMN ... STORED rewrites the whole table under an ACCESS EXCLUSIVE "
                   "lock (no reads or writes meanwhile), and the query must be rewritten to use the "
                   "new key. " + _ANALYZE_CAUTION + " " + _CHANGE_PROCESS)
        return sql, caution
    if cause == "correlation" and details.get("cross_filter"):
        other = _qtable(details.get("other_table") or "other_table", details.get("other_table_parts"))
        inner_name = columns[0] if columns else "column"
        outer_name = (details.get("other_columns") or ["column"])[0]
        inner_col, outer_col = quote_ident(inner_name), quote_ident(outer_name)
        copy_name = f"{(details.get('other_table_parts') or (None, 'outer'))[-1]}_{outer_name}"
        copy = _made_name([copy_name], "")
        stats = _made_name([(details.get("table_parts") or (None, table))[-1], inner_name, copy_name], "_stats")
        sql = (f"-- {qt}.{inner_col} is filtered in step with {other}.{outer_col} across the join; "
               "extended statistics\n"
               "-- are per table (CREATE STATISTICS names one table) and cannot correct this estimate. "
               "What can:\n"
               f"-- 1. where the data guarantees a bound between the two columns (e.g. a line ships "
               "within N days\n"
               f"--    of its order), add it to the query as a redundant constant range on {qt}.{inner_col},\n"
               "--    so that its per-table statistics see the narrow range the outer filter implies;\n"
               f"-- 2. (heavy: a new column on {qt}, filled by updating every row; read the caution and\n"
               f"--    take it through your change process) keep a copy of {outer_col} in {qt}, then give both\n"
               "--    columns statistics together and filter on the copy:\n"
               f"-- ALTER TABLE {qt} ADD COLUMN {copy} <type of {outer_col}>;  -- filled from {other}, kept by the application or a trigger\n"
               f"-- CREATE STATISTICS {stats} (dependencies, mcv) ON {inner_col}, {copy} FROM {qt};\n"
               f"-- ANALYZE {qt};")
        caution = ("Nothing here runs as pasted. The commented-out option 2 is heavy: ALTER TABLE ... "
                   "ADD COLUMN takes an ACCESS EXCLUSIVE lock (briefly, without a default), filling the "
                   "column updates every row (row locks, a new version of each row, WAL, then VACUUM), "
                   "and the query must filter on the copy. "
                   + _ANALYZE_CAUTION + " " + _CHANGE_PROCESS)
        return sql, caution
    if cause == "correlation" and len(cols) >= 2:
        kinds = {"dependencies", "ndistinct", "mcv"}
        name = _made_name([(details.get("table_parts") or (None, table))[-1], *columns], "_stats")
        sql = (f"CREATE STATISTICS IF NOT EXISTS {name} ({', '.join(sorted(kinds))})\n"
               f"    ON {', '.join(cols)} FROM {qt};\nANALYZE {qt};")
        caution = ("CREATE STATISTICS takes a SHARE UPDATE EXCLUSIVE lock on the table and builds "
                   "nothing until the next ANALYZE; it adds a little planning time to queries on "
                   "the table. " + _ANALYZE_CAUTION + " " + _CHANGE_PROCESS)
        return sql, caution
    if cause in ("skew", "range_gap", "correlation") and cols:
        lines = [f"ALTER TABLE {qt} ALTER COLUMN {c} SET STATISTICS 1000;" for c in cols]
        lines.append(f"ANALYZE {qt} ({', '.join(cols)});")
        caution = ("ALTER TABLE ... SET STATISTICS takes a brief SHARE UPDATE EXCLUSIVE lock; the "
                   "larger target makes every later ANALYZE of this column read and store more "
                   "(up to 1000 most-common values and histogram buckets) and planning a little "
                   "slower. " + _ANALYZE_CAUTION + " " + _CHANGE_PROCESS)
        return "\n".join(lines), caution
    if cause == "stale_statistics":
        sql = (f"ANALYZE {qt};\n"
               f"-- so that auto-analyze keeps up with this table's growth:\n"
               f"ALTER TABLE {qt} SET (autovacuum_analyze_scale_factor = 0.02,\n"
               f"                     autovacuum_analyze_threshold = 1000);")
        caution = (_ANALYZE_CAUTION + " ALTER TABLE ... SET (...) takes a brief SHARE UPDATE "
                   "EXCLUSIVE lock; more frequent auto-analyze means more background I/O. "
                   + _CHANGE_PROCESS)
        return sql, caution
    if cause in _NO_STATISTIC_FIXES:
        return ("\n".join("-- " + line for line in _NO_STATISTIC_FIXES[cause]),
                "Nothing here runs as pasted: each option changes the query or the schema. "
                + _CHANGE_PROCESS)
    if cause == "default_selectivity" and details.get("subplan_value") and not details.get("expressions"):
        sql = ("-- No statistics can describe a sub-plan's result: no ANALYZE or CREATE STATISTICS "
               "changes this guess.\n"
               "-- Where the low estimate leads to a bad plan above this node, change the query so "
               "that it needs\n"
               "-- no comparison with the sub-plan, e.g. the row with the minimum per key as\n"
               "--   SELECT DISTINCT ON (key) ... ORDER BY key, value\n"
               "-- or keep the sub-plan's results in a table of their own that is ANALYZEd.")
        return sql, "Nothing here runs as pasted: it changes the query. " + _CHANGE_PROCESS
    if cause == "default_selectivity":
        return _expression_fix(table, qt, [e for e in details.get("expressions") or [] if e],
                               bool(details.get("aggregate")), details.get("table_parts"))
    return None


def _expression_fix(table: str, qt: str, expressions: list[str], aggregate: bool,
                    parts) -> tuple[str, str]:
    if aggregate and not expressions:
        sql = ("-- No statistics describe an aggregate's result (a HAVING clause): the "
               "optimizer keeps its default.\n"
               "-- Options: pre-aggregate into a table that is ANALYZEd, or move the "
               "condition on the grouped rows\n-- into a subquery over a materialised result.")
        return sql, ("Both options change the schema or the query. " + _CHANGE_PROCESS)
    rendered = [safe_expression(e) for e in expressions]
    safe = [r for r in rendered if r]
    as_text = [e for e, r in zip(expressions, rendered) if not r]
    lines: list[str] = []
    if safe:
        exprs = ", ".join(f"({e})" for e in safe)
        name = _made_name([(parts or (None, table))[-1], *safe], "_stats")
        lines += ["-- PostgreSQL 14 and later: statistics on the expression itself",
                  f"CREATE STATISTICS IF NOT EXISTS {name} ON {exprs} FROM {qt};",
                  f"ANALYZE {qt};",
                  "-- any version: an expression index also gets statistics at ANALYZE",
                  f"-- CREATE INDEX CONCURRENTLY ON {qt} ({exprs});"]
    for text in as_text:
        lines += ["-- an expression planview does not write as SQL (it calls a function outside "
                  "its short list, or holds",
                  "-- text it cannot re-render); as the plan shows it: " + comment_text(text),
                  f"-- CREATE STATISTICS ... ON (<that expression>) FROM {qt}; ANALYZE {qt};"]
    if not expressions:
        lines += ["-- The estimate equals a built-in default: the optimizer had no statistics for "
                  "the clause.",
                  f"-- Rewrite it so that a column of {qt} stands bare, or give the expression statistics:",
                  f"-- CREATE STATISTICS ... ON (<expression>) FROM {qt}; ANALYZE {qt};"]
        return "\n".join(lines), _ANALYZE_CAUTION + " " + _CHANGE_PROCESS
    lines.append("-- or rewrite the condition so that the column stands bare "
                 "(e.g. a range on the column instead of a function of it)")
    caution = ("CREATE STATISTICS takes a SHARE UPDATE EXCLUSIVE lock and builds nothing "
               "until the next ANALYZE. CREATE INDEX CONCURRENTLY does not block writes but "
               "scans the table twice and cannot run inside a transaction block; a plain "
               "CREATE INDEX blocks writes while it builds. " + _ANALYZE_CAUTION + " "
               + _CHANGE_PROCESS)
    return "\n".join(lines), caution


# ---------------------------------------------------------------------------------------
# The engine: its tables, and the hooks no table can say
# ---------------------------------------------------------------------------------------

class PostgreSQL(Engine):
    NAME, FORMATS, SQL_DIALECT = NAME, FORMATS, SQL_DIALECT
    INPUT_RULES = INPUT_RULES
    JOINS = frozenset(JOINS)
    SEMI_JOINS = frozenset({"Semi", "Anti"})
    RIGHT_SEMI_JOINS = frozenset({"Right Semi", "Right Anti"})
    PRESERVED = PRESERVED
    COMPLETE_INNER = frozenset({"Nested Loop", "Hash Join"})
    LOOP_JOINS = frozenset({"Nested Loop", "Merge Join"})
    MERGE_JOINS = frozenset({"Merge Join"})
    BLOCKING = frozenset(BLOCKING)
    BLOCKING_STRATEGIES = {"Aggregate": frozenset({"Plain", "Hashed", "Mixed"})}
    LIMITS = frozenset({"Limit"})
    WHOLE_RELATION_SCANS = frozenset({"Seq Scan"})
    ROWS_DISCARDED_KEYS = ("Filter", "Index Recheck")
    CONDITION_PROVIDERS = frozenset(BITMAPS)
    GROUP_KEYS = "Group Key"
    CTE_SCANS = frozenset({"CTE Scan"})
    DEFAULT_NUM_DISTINCT = ("DEFAULT_NUM_DISTINCT", DEFAULT_SELECTIVITIES["DEFAULT_NUM_DISTINCT"])
    DEFAULT_SELECTIVITIES = {k: v for k, v in DEFAULT_SELECTIVITIES.items() if k != "DEFAULT_NUM_DISTINCT"}
    # src/backend/utils/adt/selfuncs.c: eqsel returns DEFAULT_EQ_SEL when the clause is not
    # "column = something" (two columns of one table); a column = non-constant is estimated as
    # 1/n_distinct (var_eq_non_const); scalarineqsel returns DEFAULT_INEQ_SEL when the other
    # side is not a constant (a parameter, an InitPlan or SubPlan result, another column).
    NON_CONSTANT_DEFAULTS = {"inequality": "DEFAULT_INEQ_SEL", "equality_same_table": "DEFAULT_EQ_SEL"}
    NON_CONSTANT_SOURCE = "eqsel and scalarineqsel in src/backend/utils/adt/selfuncs.c"
    # selfuncs.c: a sub-plan's result has no statistics. As a restriction, column = value is
    # 1/n_distinct of the column (var_eq_non_const); as a join clause (a correlated sub-plan
    # names the outer table) eqjoinsel divides by the larger of the two sides' distinct counts,
    # the sub-plan side counting as DEFAULT_NUM_DISTINCT (get_variable_numdistinct).
    NON_CONSTANT_GUESSES = {
        "equality_subplan": "it guesses that the value is any one of the column's distinct values "
                            "(1 / its distinct values, and at most 1/200 = DEFAULT_NUM_DISTINCT's "
                            "share: var_eq_non_const and eqjoinsel in src/backend/utils/adt/selfuncs.c)",
    }
    RECURSIVE_GUESSES = {
        "Recursive Union": (10.0, "the non-recursive term's rows plus 10 iterations of the recursive "
                                  "term's (cost_recursive_union in src/backend/optimizer/path/costsize.c: "
                                  "\"we arbitrarily assume that about 10 recursive iterations will be needed\")"),
        "WorkTable Scan": (10.0, "10 times the non-recursive term's rows for the work table "
                                 "(set_cte_size_estimates in src/backend/optimizer/path/costsize.c)"),
    }

    def input_rule(self, node: PlanNode, nodes: list[PlanNode], inputs: list[int]) -> str:
        if not node.children:
            return INPUT_RULES.get(node.operator, "source")
        rule = INPUT_RULES.get(node.operator, "pass")
        if rule == "join" and node.join_type in self.SEMI_JOINS:
            return "semi_outer"
        if rule == "join" and node.join_type in self.RIGHT_SEMI_JOINS:
            return "semi_inner"
        if rule == "group" and node.operator == "Aggregate" and node.strategy == "Plain":
            return "source"  # one row out, whatever comes in
        if node.operator == "ModifyTable" and node.est_rows == 0 and not node.actual_rows:
            return "uncounted"  # no RETURNING: it emits no rows; what it writes is its input's
        if rule in ("pass", "group") and not inputs:
            return "source"
        return rule

    def inner_input(self, node: PlanNode, nodes: list[PlanNode], inputs: list[int]) -> int | None:
        return next((c for c in node.children if nodes[c].parent_relationship == "Inner"), None)

    def cte_reference(self, node: PlanNode) -> tuple[int, str] | None:
        return (node.statement, f"CTE {node.cte_name}") if node.operator == "CTE Scan" and node.cte_name else None

    def cte_definition(self, node: PlanNode) -> tuple[int, str] | None:
        return (node.statement, node.subplan_name) if node.subplan_name else None

    def refine(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan, role: Role) -> None:
        """A sub-plan that answers EXISTS, ANY or a hashed alternative stops at its first match."""
        if not node.children:
            return
        subplans = [nodes[c] for c in node.children if nodes[c].parent_relationship == "SubPlan"]
        if not subplans:
            return
        texts = " ".join(c.text for c in node.conditions)
        for child in subplans:
            name = child.subplan_name
            if name and re.search(rf"(EXISTS\s*\(|ANY \(|alternatives: ){re.escape(name)}\b", texts):
                role.stops_inputs = dict(role.stops_inputs or {})
                role.stops_inputs[child.id] = f"stopped early: {name} stops at its first match"

    def parallel_divisor(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan) -> float | None:
        """The parallel divisor when the node's estimate is per process, else None.

        A node is on a partial path when it is parallel-aware, or when its first input is (a
        join over a parallel scan), below a Gather or Gather Merge. An aggregate, and what lies
        above it below the Gather, is not: each process emits its own groups (a Partial
        Aggregate without grouping emits one row per process), so its total is est_rows x
        loops. On a partial path we take the divisor out (estimate x divisor) so that the total compares with actual rows x loops.
        Both facts are memoised on the parsed plan: `role` is asked once a node, in pre-order.
        """
        memo = parsed.__dict__.get("_pg_parallel")
        if memo is None:
            memo = parsed.__dict__["_pg_parallel"] = {"gather": {}, "partial": {}}
        gathers: dict[int, int | None] = memo["gather"]
        parent = nodes[node.parent] if node.parent is not None else None
        if parent is None:
            gather_id = None
        elif parent.operator in GATHERS:
            gather_id = parent.id
        else:
            gather_id = gathers.get(parent.id)
        gathers[node.id] = gather_id
        if gather_id is None or not nodes[gather_id].workers_planned:
            return None
        partial: dict[int, bool] = memo["partial"]
        chain = []
        current = node
        answer = False
        while True:
            if current.id in partial:
                answer = partial[current.id]
                break
            chain.append(current.id)
            if current.parallel_aware:
                answer = True
                break
            inputs = [c for c in current.children if nodes[c].is_input_edge]
            # an aggregate below a Gather (a Partial Aggregate) estimates the groups of one
            # process's share and each process emits its own: est_rows x loops, no divisor
            if not inputs or current.operator in GATHERS or current.operator == "Aggregate":
                answer = False
                break
            current = nodes[inputs[0]]
        for node_id in chain:
            partial[node_id] = answer
        if not answer:
            return None
        settings = parsed.statements[node.statement].settings if node.statement < len(parsed.statements) else {}
        leader = str(settings.get("parallel_leader_participation", "on")).lower() != "off"
        return parallel_divisor(nodes[gather_id].workers_planned, leader)

    # "Using EXPLAIN" in the manual: actual time is in milliseconds and an average per loop
    # ("multiply the actual time values by loops to get the total time"); a node's time holds
    # its children's. Below a Gather the figures are averaged over the processes that ran the
    # node, each loop being one process's run, and those processes run at the same time.
    TIME_PRINTED = "inclusive"
    TIME_RULES = (
        ("every node", "actual time (per loop, with its children) x loops; own = that less "
                       "its children's, InitPlans' and SubPlans' in all"),
        ("below a Gather or Gather Merge", "the processes (workers launched, plus the leader when it "
                                           "takes part) run at once: in all = per loop x loops / processes, "
                                           "one process's share of the wall clock, never their sum"),
        ("InitPlan, SubPlan", "counted in the time of the node that evaluates it; an InitPlan is shown "
                              "under the node it is attached to, and where an input used it first, the "
                              "node's own time is clamped at 0"),
        ("CTE", "run by the CTE Scans that read it: its time is taken out of theirs (first reader "
                "first), not out of the node it is attached to"),
        ("never executed", "0 ms"),
        ("TIMING OFF", "unknown"),
    )

    def time_processes(self, node: PlanNode, nodes: list[PlanNode]) -> float | None:
        """A Gather's workers and its leader; the leader takes part unless the Gather is a
        single copy or its input's loops say otherwise (parallel_leader_participation off)."""
        if node.operator not in GATHERS or not node.workers_launched:
            return None
        launched = float(node.workers_launched)
        inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
        loops = inputs[0].starts if inputs else None
        if node.extra.get("Single Copy") or loops == launched:
            return launched
        return launched + 1.0

    def time_reads(self, node: PlanNode, nodes: list[PlanNode], parsed: ParsedPlan) -> tuple[int, ...]:
        """The CTE a CTE Scan reads; the InitPlans whose value its conditions use ($0 up to 17,
        (InitPlan 1).col1 from 18): an InitPlan runs, and is timed, where its value is used."""
        found: list[int] = []
        if node.operator == "CTE Scan":
            cte = self.cte_read(node, nodes, parsed)
            if cte is not None:
                found.append(cte)
        for condition in node.conditions:
            text = condition.text
            if "$" not in text and "InitPlan" not in text:
                continue
            names = index_of(parsed).first_by(_init_plan_key)
            for token in _PARAM_TOKEN.findall(text):
                init_plan = names.get((node.statement, token))
                if init_plan is not None and init_plan not in found:
                    found.append(init_plan)
        return tuple(found)

    def suggest_fix(self, cause, table, columns=(), **details):
        return suggest_fix(cause, table, list(columns), **details)


_PARAM_TOKEN = re.compile(r"\$\d+|\(InitPlan \d+\)")
_RETURNS = re.compile(r"\$\d+")


def _init_plan_key(node: PlanNode):
    """An InitPlan's names as its users print them: ``$0`` (returns $0,$1) or ``(InitPlan 1)``."""
    name = node.subplan_name
    if node.parent_relationship != "InitPlan" or not name or not name.startswith("InitPlan"):
        return None
    returns = _RETURNS.findall(name)
    return (node.statement, returns[0] if returns else f"({name.split(' (')[0]})")


ENGINE = PostgreSQL()
role = ENGINE.role
