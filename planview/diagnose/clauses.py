"""Conditions read with a real SQL parser (sqlglot), split into ANDed clauses and classified.

Engines print conditions with their own decorations: PostgreSQL writes casts
(``'x'::text``), ``= ANY ('{...}'::int[])``, ``$1`` parameters, ``(InitPlan 1).col1`` and
sub-plan references. References the parser cannot know are swapped for placeholders first;
a clause that still cannot be parsed is kept with its error, never raised.

>>> [c.op_class for c in parse_condition("((a.x = 10) AND (a.y > 1))", "filter", "postgres")]
['equality', 'open_range']
>>> parse_condition("(lower(code) = 'abc'::text)", "filter", "postgres")[0].bare
False
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from functools import lru_cache

import sqlglot
from sqlglot import exp

# Casts that keep the column's statistics usable (binary-compatible relabelling to text).
TRANSPARENT_CASTS = {"TEXT", "VARCHAR", "CHAR", "BPCHAR", "NAME", "NCHAR", "NVARCHAR"}

_PARAM = "__pv_param"
_SUBPLAN = "__pv_subplan"
_PREP = [
    (re.compile(r"\(InitPlan \d+\)\.col\d+"), f"{_PARAM}()"),
    (re.compile(r"\(alternatives: [^()]*\)"), f"{_SUBPLAN}()"),
    (re.compile(r"\bhashed SubPlan \d+"), f"{_SUBPLAN}()"),
    (re.compile(r"\(SubPlan \d+\)"), f"{_SUBPLAN}()"),
    (re.compile(r"\bSubPlan \d+"), f"{_SUBPLAN}()"),
    (re.compile(r"\bInitPlan \d+"), f"{_PARAM}()"),
    (re.compile(r"\$\d+"), f"{_PARAM}()"),
]


@dataclass(frozen=True)
class ColumnRef:
    qualifier: str | None
    name: str

    def __str__(self) -> str:
        return f"{self.qualifier}.{self.name}" if self.qualifier else self.name


@dataclass
class Clause:
    """One ANDed clause of a condition."""

    text: str
    source: str
    op_class: str
    columns: list[ColumnRef] = field(default_factory=list)
    bare: bool = True
    wrappers: list[str] = field(default_factory=list)
    aggregate: bool = False
    operator: str | None = None
    constants: list[str] = field(default_factory=list)
    constant_types: list[str] = field(default_factory=list)
    has_parameter: bool = False
    has_subplan: bool = False
    parse_error: str | None = None
    column_side: str | None = None
    """The SQL of the side holding the column(s), table qualifiers removed (``lower(code)``)."""
    column_left: bool = True
    """A comparison's column stands on the left (``x < 5``, not ``5 > x``)."""

    @property
    def is_join(self) -> bool:
        """Compares columns of two different relations (or a column with a parameter of an
        outer row, as the inner side of a nested loop does)."""
        qualifiers = {c.qualifier for c in self.columns}
        return len(qualifiers) > 1 and self.op_class in ("equality", "inequality", "open_range", "other")

    def as_dict(self) -> dict:
        return {
            "text": self.text, "source": self.source, "op_class": self.op_class,
            "columns": [str(c) for c in self.columns], "bare": self.bare,
            "wrappers": list(self.wrappers), "aggregate": self.aggregate,
            "operator": self.operator, "constants": list(self.constants),
            "has_parameter": self.has_parameter, "parse_error": self.parse_error,
        }


_RANGE = (exp.GT, exp.GTE, exp.LT, exp.LTE)


MAX_CONDITION_CHARS = 16_000
"""Longer conditions are kept on the node but not parsed: the SQL parser's time grows with the
text (a 10 MB Filter took over a minute), and no estimate turns on a 16 KB clause."""

MAX_CLAUSES = 200
"""ANDed clauses classified per condition; the rest are counted, not classified."""


def parse_condition(text: str, source: str, dialect: str | None,
                    subquery_mark: str | None = None) -> list[Clause]:
    """The condition's top-level ANDed clauses, each classified (never raises).
    `subquery_mark` is the engine's word for a sub-query's result inside a condition (a
    regular expression; DuckDB prints `SUBQUERY`): it is read as a sub-plan's value."""
    if len(text) > MAX_CONDITION_CHARS:
        return [_too_long(text, source)]
    return [Clause(**vars(c)) for c in _parse_cached(text, source, dialect, subquery_mark)]


_QUOTED = re.compile(r"'(?:[^']|'')*'|\"(?:[^\"]|\"\")*\"")
"""A string literal or a quoted name, as the engines print them (a quote inside doubled)."""


def _prepare(text: str, subquery_mark: str | None = None) -> str:
    """The condition with its parameters and sub-plan references made placeholders sqlglot
    reads, outside quotes only: a literal such as ``'SCRAM-SHA-256$4096:zz'`` stays as written.

    >>> _prepare("(a = $1) AND (b = 'x$4096 SubPlan 2')")
    "(a = __pv_param()) AND (b = 'x$4096 SubPlan 2')"
    """
    out, at = [], 0
    for quoted in (*_QUOTED.finditer(text), None):
        plain = text[at:quoted.start() if quoted else len(text)]
        for pattern, replacement in _PREP:
            plain = pattern.sub(replacement, plain)
        if subquery_mark:
            plain = re.sub(subquery_mark, f"{_SUBPLAN}()", plain)
        out.append(plain)
        if quoted:
            out.append(quoted.group())
            at = quoted.end()
    return "".join(out)


def _too_long(text: str, source: str) -> Clause:
    return Clause(text=f"{text[:200]}... ({len(text):,} characters)", source=source,
                  op_class="unparsed",
                  parse_error=f"not parsed: longer than {MAX_CONDITION_CHARS:,} characters")


@lru_cache(maxsize=4096)
def _parse_cached(text: str, source: str, dialect: str | None,
                  subquery_mark: str | None = None) -> tuple[Clause, ...]:
    prepared = _prepare(text, subquery_mark)
    try:
        tree = sqlglot.parse_one(prepared, read=dialect)
    except Exception as exc:  # sqlglot raises several types; none may escape
        message = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        return (Clause(text=text, source=source, op_class="unparsed", parse_error=message),)
    if tree is None:
        return (Clause(text=text, source=source, op_class="unparsed", parse_error="empty"),)
    parts = _split_and(tree)
    originals = split_and_text(text)
    if len(originals) != len(parts):
        originals = [None] * len(parts)
    clauses = []
    if len(parts) > MAX_CLAUSES:
        rest = len(parts) - MAX_CLAUSES
        clauses.append(Clause(text=f"{rest:,} further ANDed clauses", source=source,
                              op_class="unparsed",
                              parse_error=f"not classified: over {MAX_CLAUSES} clauses in one condition"))
        parts, originals = parts[:MAX_CLAUSES], originals[:MAX_CLAUSES]
    for part, original in zip(parts, originals):
        try:
            clause = _classify(part, source, dialect)
        except Exception as exc:
            clause = Clause(text=_sql(part, dialect), source=source, op_class="unparsed",
                            parse_error=str(exc).splitlines()[0] if str(exc) else "error")
        if original is not None:
            clause.text = original
            side = column_side_text(original, clause)
            if side:
                clause.column_side = side
        clauses.append(clause)
    return tuple(clauses)


def _strip_parens(text: str) -> str:
    """The text without the brackets that enclose all of it, in one pass however deep."""
    text = text.strip()
    if not (text.startswith("(") and text.endswith(")")) or text.count("'") % 2:
        return text
    closes: dict[int, int] = {}
    opened: list[int] = []
    for i, ch, _ in _outside_quotes(text):
        if ch == "(":
            opened.append(i)
        elif ch == ")":
            if not opened:
                return text
            closes[opened.pop()] = i
    if opened:
        return text
    start, end = 0, len(text) - 1
    while start < end and text[start] == "(" and closes.get(start) == end:
        start += 1
        end -= 1
        while start <= end and text[start].isspace():
            start += 1
        while end >= start and text[end].isspace():
            end -= 1
    return text[start:end + 1]


def _outside_quotes(text: str):
    """(position, character, depth) of every character outside single quotes."""
    depth, quote = 0, False
    for i, ch in enumerate(text):
        if ch == "'":
            quote = not quote
        elif not quote:
            if ch == "(":
                depth += 1
            elif ch == ")":
                depth -= 1
            yield i, ch, depth


def _balanced(text: str) -> bool:
    depth = 0
    for _, _, depth in _outside_quotes(text):
        if depth < 0:
            return False
    return depth == 0 and text.count("'") % 2 == 0


def _top_level_split(text: str, separator: str) -> list[str]:
    out, start = [], 0
    upper = text.upper()
    for i, ch, depth in _outside_quotes(text):
        if i < start or depth != 0 or ch in "()":
            continue
        if upper.startswith(separator, i):
            out.append(text[start:i])
            start = i + len(separator)
    out.append(text[start:])
    return [x.strip() for x in out]


def split_and_text(text: str) -> list[str]:
    """The top-level ANDed parts of a condition, as the engine wrote them (quotes respected).

    >>> split_and_text("((a.x = 'p AND q'::text) AND (a.y > 1))")
    ["(a.x = 'p AND q'::text)", '(a.y > 1)']
    """
    parts: list[str] = []
    todo = [_strip_parens(text)]  # a stack, last piece first: pieces come off in order
    while todo:
        current = todo.pop()
        pieces = _top_level_split(current, " AND ")
        if len(pieces) == 1:
            parts.append(current if current.startswith("(") or " " not in current else f"({current})")
        else:
            todo.extend(_strip_parens(p) for p in reversed(pieces))
    return parts


_COMPARISONS = (" = ", " <> ", " != ", " >= ", " <= ", " > ", " < ", " ~~* ", " !~~* ", " ~~ ",
                " !~~ ", " IS ", " LIKE ", " ILIKE ", " IN ")


def column_side_text(original: str, clause: "Clause") -> str | None:
    """The side of a comparison that holds the column, as written, qualifiers removed."""
    body = _strip_parens(original)
    for op in _COMPARISONS:
        pieces = _top_level_split(body, op)
        if len(pieces) == 2:
            names = {c.name for c in clause.columns}
            for piece in pieces:
                if any(re.search(rf"\b{re.escape(n)}\b", piece) for n in names):
                    side = piece
                    for col in clause.columns:
                        if col.qualifier:
                            side = re.sub(rf"\b{re.escape(col.qualifier)}\.(?={re.escape(col.name)}\b)", "", side)
                    return _strip_parens(side) if _balanced(side) else side
            return None
    return None


def _unparen(node: exp.Expression) -> exp.Expression:
    while isinstance(node, exp.Paren):
        node = node.this
    return node


def _split_and(tree: exp.Expression) -> list[exp.Expression]:
    out: list[exp.Expression] = []
    todo = [tree]
    while todo:
        node = _unparen(todo.pop())
        if isinstance(node, exp.And):
            todo.append(node.expression)
            todo.append(node.this)
        else:
            out.append(node)
    return out


def _sql(node: exp.Expression, dialect: str | None) -> str:
    try:
        text = node.sql(dialect=dialect)
    except Exception:
        text = str(node)
    return text.replace(f"{_PARAM}()", "$param").replace(f"{_SUBPLAN}()", "(sub-plan)")


def _is_placeholder(node: exp.Expression, name: str) -> bool:
    return isinstance(node, exp.Anonymous) and str(node.this).lower() == name


def unqualified_sql(node: exp.Expression, dialect: str | None) -> str:
    """The expression's SQL with table qualifiers removed, for statistics ``ON (expr)``."""
    copy = _unparen(node).copy()
    for column in copy.find_all(exp.Column):
        column.set("table", None)
    return _sql(copy, dialect)


def _column_side(node: exp.Expression) -> tuple[list[ColumnRef], bool, list[str]]:
    """The columns in one side of a comparison, whether they stand bare, and what wraps them."""
    node = _unparen(node)
    columns = [ColumnRef(c.table or None, c.name) for c in node.find_all(exp.Column)]
    wrappers: list[str] = []
    current = node
    bare = True
    while not isinstance(current, exp.Column):
        if isinstance(current, exp.Cast):
            target = current.to.this.name if hasattr(current.to.this, "name") else str(current.to)
            wrappers.append(f"::{str(target).lower()}")
            if str(target).upper() not in TRANSPARENT_CASTS:
                bare = False
            current = _unparen(current.this)
            continue
        bare = False
        if isinstance(current, exp.Func):
            wrappers.append(current.sql_name().lower() if hasattr(current, "sql_name") else type(current).__name__.lower())
        else:
            wrappers.append(type(current).__name__.lower())
        break
    if not columns:
        bare = False
    return columns, bare, wrappers


def _constants(node: exp.Expression) -> tuple[list[str], list[str], bool, bool]:
    values, types = [], []
    for literal in node.find_all(exp.Literal):
        values.append(literal.this)
    for cast in node.find_all(exp.Cast):
        types.append(str(cast.to.this.name if hasattr(cast.to.this, "name") else cast.to).lower())
    has_param = any(_is_placeholder(n, _PARAM) for n in node.find_all(exp.Anonymous)) or \
        any(True for _ in node.find_all(exp.Parameter))
    has_subplan = any(_is_placeholder(n, _SUBPLAN) for n in node.find_all(exp.Anonymous))
    return values, types, has_param, has_subplan


def _classify(node: exp.Expression, source: str, dialect: str | None) -> Clause:
    text = _sql(node, dialect)
    clause = Clause(text=text, source=source, op_class="other")
    clause.aggregate = any(True for _ in node.find_all(exp.AggFunc))
    negated = False
    core = node
    if isinstance(core, exp.Not):
        negated = True
        core = _unparen(core.this)
    if isinstance(core, exp.Or):
        clause.op_class = "or"
        clause.columns = [ColumnRef(c.table or None, c.name) for c in core.find_all(exp.Column)]
        clause.bare = False
        values, types, clause.has_parameter, clause.has_subplan = _constants(core)
        clause.constants, clause.constant_types = values, types
        return clause
    left = getattr(core, "this", None)
    right = getattr(core, "expression", None)
    clause.operator = type(core).__name__
    if isinstance(core, exp.Is):
        if core.args.get("negate"):  # sqlglot reads "x IS NOT NULL" as Is(negate=True)
            negated = not negated
        clause.op_class = "is_not_null" if negated else "is_null"
        clause.columns, clause.bare, clause.wrappers = _column_side(left)
        return clause
    if left is not None and isinstance(left, exp.Expression):
        clause.column_side = unqualified_sql(left, dialect)
    if isinstance(core, (exp.Like, exp.ILike)):
        pattern = _unparen(right) if right is not None else None
        literal = next(iter(pattern.find_all(exp.Literal)), None) if pattern is not None else None
        leading = bool(literal is not None and str(literal.this).startswith(("%", "_")))
        clause.op_class = "like_leading_wildcard" if leading else "like_prefix"
        if negated:
            clause.op_class = "not_" + clause.op_class
        clause.columns, clause.bare, clause.wrappers = _column_side(left)
        clause.constants = [str(literal.this)] if literal is not None else []
        return clause
    if isinstance(core, exp.Between):
        clause.op_class = "closed_range"
        clause.columns, clause.bare, clause.wrappers = _column_side(left)
        clause.constants, clause.constant_types, clause.has_parameter, _ = _constants(core)
        return clause
    if isinstance(core, exp.In):
        clause.op_class = "in_list"
        clause.columns, clause.bare, clause.wrappers = _column_side(left)
        clause.constants, clause.constant_types, clause.has_parameter, clause.has_subplan = _constants(core)
        return clause
    if isinstance(core, (exp.EQ, exp.NEQ, *_RANGE)) and left is not None and right is not None:
        left_cols, left_bare, left_wrap = _column_side(left)
        right_cols, right_bare, right_wrap = _column_side(right)
        if isinstance(_unparen(right), (exp.Any, exp.All)):
            clause.op_class = "in_list" if isinstance(core, exp.EQ) else "other"
        elif isinstance(core, exp.EQ):
            clause.op_class = "equality"
        elif isinstance(core, exp.NEQ):
            clause.op_class = "inequality"
        else:
            clause.op_class = "open_range"
        if negated:
            clause.op_class = "other"
        clause.column_side = unqualified_sql(left if left_cols else right, dialect)
        if left_cols and right_cols:
            clause.columns = left_cols + right_cols
            clause.bare = left_bare and right_bare
            clause.wrappers = left_wrap + right_wrap
        elif left_cols:
            clause.columns, clause.bare, clause.wrappers = left_cols, left_bare, left_wrap
        else:
            clause.columns, clause.bare, clause.wrappers = right_cols, right_bare, right_wrap
        other = right if left_cols else left
        clause.column_left = bool(left_cols)
        clause.constants, clause.constant_types, clause.has_parameter, clause.has_subplan = _constants(other)
        return clause
    # anything else: a user-defined or special operator, a bare boolean column, a function
    clause.columns = [ColumnRef(c.table or None, c.name) for c in core.find_all(exp.Column)]
    clause.bare = isinstance(core, exp.Column)
    if isinstance(core, exp.Column):
        clause.op_class = "boolean_column"
    values, types, clause.has_parameter, clause.has_subplan = _constants(core)
    clause.constants, clause.constant_types = values, types
    if clause.has_subplan and not clause.columns:
        clause.op_class = "subplan"
    return clause


def merge_ranges(clauses: list[Clause]) -> list[Clause]:
    """Two open ranges on the same bare column (``x >= 1 AND x <= 5``) are one closed range."""
    by_column: dict[ColumnRef, list[Clause]] = {}
    for clause in clauses:
        if clause.op_class == "open_range" and clause.bare and len(clause.columns) == 1:
            by_column.setdefault(clause.columns[0], []).append(clause)
    out: list[Clause] = []
    merged: set[int] = set()
    for clause in clauses:
        if id(clause) in merged:
            continue
        group = by_column.get(clause.columns[0]) if clause.columns and clause.op_class == "open_range" else None
        if group and len(group) >= 2 and clause is group[0]:
            text = " AND ".join(c.text for c in group)
            out.append(Clause(text=text, source=clause.source, op_class="closed_range",
                              columns=[clause.columns[0]], bare=True,
                              constants=[v for c in group for v in c.constants],
                              constant_types=[t for c in group for t in c.constant_types],
                              has_parameter=any(c.has_parameter for c in group)))
            merged.update(id(c) for c in group)
        else:
            out.append(clause)
    return out
