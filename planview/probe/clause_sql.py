"""A condition from a plan, checked and written again as SQL that planview controls.

A plan is pasted text, and a server may read a string differently from the parser that
checked it (``standard_conforming_strings = off`` makes ``\\'`` an escaped quote). So the
pasted text is never sent: sqlglot parses it, every node must be a column, a constant, a
cast to a built-in type or a comparison, and this module renders the tree itself: identifiers
double-quoted, strings in standard single quotes (a backslash is refused, as its meaning
depends on the server's setting), types and operators named in ``pg_catalog``, every
operator bracketed. What the server receives is what the tree says, nothing more.

>>> render_clause("((a = 1) OR (b ~~ 'x%'::text))").sql
'(("a" OPERATOR(pg_catalog.=) 1) OR ("b" OPERATOR(pg_catalog.~~) CAST(\\'x%\\' AS pg_catalog.text)))'
>>> render_clause("(lower(email) = 'x'::text)")
Traceback (most recent call last):
...
planview.probe.clause_sql.UnsafeClause: it calls lower()
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import sqlglot
from sqlglot import exp

MAX_CLAUSE_CHARS = 4000
MAX_DEPTH = 60

# sqlglot's type -> the built-in type's name in pg_catalog. Anything else is refused: a cast
# to a type of the user's could call the user's functions while the planner folds constants.
_TYPES = {
    exp.DataType.Type.TEXT: "text", exp.DataType.Type.VARCHAR: "varchar",
    exp.DataType.Type.CHAR: "bpchar", exp.DataType.Type.BPCHAR: "bpchar",
    exp.DataType.Type.NAME: "name", exp.DataType.Type.INT: "int4",
    exp.DataType.Type.BIGINT: "int8", exp.DataType.Type.SMALLINT: "int2",
    exp.DataType.Type.DECIMAL: "numeric", exp.DataType.Type.FLOAT: "float4",
    exp.DataType.Type.DOUBLE: "float8", exp.DataType.Type.BOOLEAN: "bool",
    exp.DataType.Type.DATE: "date", exp.DataType.Type.TIMESTAMP: "timestamp",
    exp.DataType.Type.TIMESTAMPTZ: "timestamptz", exp.DataType.Type.TIME: "time",
    exp.DataType.Type.TIMETZ: "timetz", exp.DataType.Type.INTERVAL: "interval",
    exp.DataType.Type.UUID: "uuid", exp.DataType.Type.INET: "inet",
    exp.DataType.Type.JSON: "json", exp.DataType.Type.JSONB: "jsonb",
    exp.DataType.Type.MONEY: "money", exp.DataType.Type.BIT: "bit",
}
# Built-in types sqlglot reads as user-defined names (unquoted, or quoted as PostgreSQL prints them).
_NAMED_TYPES = {"cidr": "cidr", "macaddr": "macaddr", "char": '"char"'}

_COMPARISONS = {exp.EQ: "=", exp.NEQ: "<>", exp.GT: ">", exp.GTE: ">=", exp.LT: "<", exp.LTE: "<="}
_NUMBER = re.compile(r"(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")


class UnsafeClause(ValueError):
    """The clause holds something planview will not send to a server; the message says what."""


@dataclass(frozen=True)
class RenderedClause:
    sql: str
    columns: tuple[tuple[str | None, str], ...]
    """(qualifier, column name) as PostgreSQL resolves them: unquoted names folded to lower case."""
    literals: tuple[str, ...]
    """The constants' values, in the order written."""


def render_clause(text: str, *, qualifiers: dict[str, str] | None = None) -> RenderedClause:
    """Parse `text` and render it again, or raise UnsafeClause.

    `qualifiers` maps each column qualifier the clause may use (folded as PostgreSQL folds it)
    to the one to write; a qualifier not in it is refused. None keeps qualifiers as written."""
    if len(text) > MAX_CLAUSE_CHARS:
        raise UnsafeClause(f"it is longer than {MAX_CLAUSE_CHARS:,} characters")
    try:
        tree = sqlglot.parse_one(text, read="postgres")
    except Exception:  # sqlglot raises several types; a clause it cannot read is not sent
        raise UnsafeClause("it could not be parsed") from None
    if tree is None:
        raise UnsafeClause("it is empty")
    renderer = _Renderer(qualifiers)
    sql = renderer.condition(tree, 0)
    if not renderer.columns:
        raise UnsafeClause("it names no column")
    return RenderedClause(sql, tuple(renderer.columns), tuple(renderer.literals))


def quote_ident(name: str) -> str:
    """A PostgreSQL identifier, always double-quoted (a NUL cannot be quoted, so is refused)."""
    if "\x00" in name:
        raise UnsafeClause("a name holds a NUL character")
    return '"' + name.replace('"', '""') + '"'


def quote_literal(value: str) -> str:
    """A PostgreSQL standard string (the probe pins ``standard_conforming_strings = on``).

    >>> quote_literal("it's")
    "'it''s'"
    """
    if "\\" in value:
        raise UnsafeClause("a string holds a backslash, whose meaning depends on the server's "
                           "standard_conforming_strings")
    if "\x00" in value:
        raise UnsafeClause("a string holds a NUL character")
    return "'" + value.replace("'", "''") + "'"


def fold(identifier: exp.Identifier) -> str:
    """The name PostgreSQL resolves: quoted as written, unquoted folded to lower case (ASCII)."""
    name = identifier.this
    if identifier.args.get("quoted"):
        return name
    return name.translate(_ASCII_LOWER)


_ASCII_LOWER = str.maketrans("ABCDEFGHIJKLMNOPQRSTUVWXYZ", "abcdefghijklmnopqrstuvwxyz")


def _describe(node: exp.Expression) -> str:
    if isinstance(node, exp.Block):
        return "it holds more than one statement"
    if isinstance(node, (exp.Anonymous, exp.Func)):
        name = node.name if isinstance(node, exp.Anonymous) else node.sql_name()
        return f"it calls {str(name).lower()[:40]}()"
    return f"it holds a {type(node).__name__} expression"


def _only(node: exp.Expression, *allowed: str) -> None:
    """Refuse a node carrying an argument this renderer does not write (it would be lost)."""
    for key, value in node.args.items():
        if key not in allowed and value not in (None, False, [], ""):
            raise UnsafeClause(f"it holds a {type(node).__name__} with {key}, which is not planned")


class _Renderer:
    def __init__(self, qualifiers: dict[str, str] | None):
        self.qualifiers = qualifiers
        self.columns: list[tuple[str | None, str]] = []
        self.literals: list[str] = []

    def _deeper(self, depth: int) -> int:
        if depth >= MAX_DEPTH:
            raise UnsafeClause(f"it nests deeper than {MAX_DEPTH} levels")
        return depth + 1

    # ---- boolean structure -------------------------------------------------------------

    def condition(self, node: exp.Expression, depth: int) -> str:
        depth = self._deeper(depth)
        if isinstance(node, exp.Paren):
            _only(node, "this")
            return self.condition(node.this, depth)
        if isinstance(node, (exp.And, exp.Or)):
            _only(node, "this", "expression")
            word = "AND" if isinstance(node, exp.And) else "OR"
            return f"({self.condition(node.this, depth)} {word} {self.condition(node.expression, depth)})"
        if isinstance(node, exp.Not):
            _only(node, "this")
            if isinstance(node.this, exp.In):  # NOT IN is planned as <> ALL, as PostgreSQL does
                return self.in_list(node.this, depth, "<>", "ALL")
            return f"(NOT {self.condition(node.this, depth)})"
        if isinstance(node, tuple(_COMPARISONS)):
            return self.comparison(node, depth)
        if isinstance(node, (exp.Like, exp.ILike)):
            _only(node, "this", "expression", "negate")
            op = ("!" if node.args.get("negate") else "") + ("~~*" if isinstance(node, exp.ILike) else "~~")
            return (f"({self.value(node.this, depth)} OPERATOR(pg_catalog.{op}) "
                    f"{self.value(node.expression, depth)})")
        if isinstance(node, exp.Is):
            _only(node, "this", "expression", "negate")
            target = node.expression
            if isinstance(target, exp.Null):
                word = "NULL"
            elif isinstance(target, exp.Boolean):
                word = "TRUE" if target.this else "FALSE"
            else:
                raise UnsafeClause("IS compares with something other than NULL, TRUE or FALSE")
            negation = "NOT " if node.args.get("negate") else ""
            return f"({self.value(node.this, depth)} IS {negation}{word})"
        if isinstance(node, exp.In):
            return self.in_list(node, depth, "=", "ANY")
        if isinstance(node, exp.Between):
            _only(node, "this", "low", "high")
            column = self.value(node.this, depth)
            return (f"(({column} OPERATOR(pg_catalog.>=) {self.value(node.args['low'], depth)}) AND "
                    f"({column} OPERATOR(pg_catalog.<=) {self.value(node.args['high'], depth)}))")
        if isinstance(node, (exp.Column, exp.Boolean)):
            return self.value(node, depth)
        raise UnsafeClause(_describe(node))

    def in_list(self, node: exp.In, depth: int, op: str, quantifier: str) -> str:
        _only(node, "this", "expressions", "is_global")
        items = [self.value(item, depth) for item in node.expressions]
        if not items:
            raise UnsafeClause("it holds an empty IN list")
        return f"({self.value(node.this, depth)} OPERATOR(pg_catalog.{op}) {quantifier} (ARRAY[{', '.join(items)}]))"

    def comparison(self, node: exp.Expression, depth: int) -> str:
        _only(node, "this", "expression")
        op = _COMPARISONS[type(node)]
        right = node.expression
        quantifier = None
        if isinstance(right, exp.Any):
            _only(right, "this")
            quantifier, right = "ANY", right.this
        elif isinstance(right, exp.All):
            _only(right, "this")
            quantifier, right = "ALL", right.this
        elif isinstance(right, exp.Anonymous) and str(right.name).upper() in ("ALL", "ANY", "SOME"):
            _only(right, "this", "expressions")
            if len(right.expressions) != 1:
                raise UnsafeClause(f"{right.name} takes one array")
            quantifier, right = ("ANY" if str(right.name).upper() == "SOME" else str(right.name).upper(),
                                 right.expressions[0])
        left_sql = self.value(node.this, depth)
        right_sql = self.value(right, depth)
        if quantifier:
            return f"({left_sql} OPERATOR(pg_catalog.{op}) {quantifier} ({right_sql}))"
        return f"({left_sql} OPERATOR(pg_catalog.{op}) {right_sql})"

    # ---- values ----------------------------------------------------------------------

    def value(self, node: exp.Expression, depth: int) -> str:
        depth = self._deeper(depth)
        if isinstance(node, exp.Paren):
            _only(node, "this")
            return f"({self.value(node.this, depth)})"
        if isinstance(node, exp.Column):
            return self.column(node)
        if isinstance(node, exp.Literal):
            _only(node, "this", "is_string")
            text = str(node.this)
            if node.is_string:
                rendered = quote_literal(text)
            elif _NUMBER.fullmatch(text):
                rendered = text
            else:
                raise UnsafeClause("a number is not written as digits")
            self.literals.append(text)
            return rendered
        if isinstance(node, exp.Neg):
            _only(node, "this")
            inner = node.this
            if not (isinstance(inner, exp.Literal) and not inner.is_string):
                raise UnsafeClause("a minus sign stands before something other than a number")
            return f"-{self.value(inner, depth)}"
        if isinstance(node, exp.Null):
            return "NULL"
        if isinstance(node, exp.Boolean):
            return "TRUE" if node.this else "FALSE"
        if isinstance(node, exp.Cast):
            _only(node, "this", "to", "_type")
            return f"CAST({self.value(node.this, depth)} AS {self.type_name(node.args['to'], depth)})"
        if isinstance(node, exp.Array):
            _only(node, "expressions")
            return f"ARRAY[{', '.join(self.value(item, depth) for item in node.expressions)}]"
        raise UnsafeClause(_describe(node))

    def column(self, node: exp.Column) -> str:
        _only(node, "this", "table")
        if not isinstance(node.this, exp.Identifier):
            raise UnsafeClause("a column reference is not a plain name")
        name = fold(node.this)
        table = node.args.get("table")
        qualifier = fold(table) if isinstance(table, exp.Identifier) else None
        if table is not None and qualifier is None:
            raise UnsafeClause("a column's qualifier is not a plain name")
        written = qualifier
        if qualifier is not None and self.qualifiers is not None:
            if qualifier not in self.qualifiers:
                raise UnsafeClause(f"a column belongs to {qualifier[:40]!r}, not to the table probed")
            written = self.qualifiers[qualifier]
        self.columns.append((qualifier, name))
        return f"{quote_ident(written)}.{quote_ident(name)}" if written else quote_ident(name)

    def type_name(self, node: exp.Expression, depth: int) -> str:
        depth = self._deeper(depth)
        if not isinstance(node, exp.DataType):
            raise UnsafeClause("a cast names no type")
        kind = node.this
        if kind == exp.DataType.Type.ARRAY:
            _only(node, "this", "expressions", "nested", "values")
            if len(node.expressions) != 1 or node.args.get("values"):
                raise UnsafeClause("an array type holds more than one element type")
            return self.type_name(node.expressions[0], depth) + "[]"
        if kind == exp.DataType.Type.USERDEFINED:
            _only(node, "this", "kind")
            ident = node.args.get("kind")
            known = _NAMED_TYPES.get(fold(ident)) if isinstance(ident, exp.Identifier) else None
            if not known:
                raise UnsafeClause("a cast names a type that is not built in")
            return f"pg_catalog.{known}"
        name = _TYPES.get(kind) if isinstance(kind, exp.DataType.Type) else None
        if name is None:
            raise UnsafeClause(f"a cast names a type planview does not plan ({str(kind)[:30]})")
        _only(node, "this", "expressions", "nested")
        params = []
        for param in node.expressions:
            inner = param.this if isinstance(param, exp.DataTypeParam) else None
            if not (isinstance(inner, exp.Literal) and str(inner.this).isdigit() and len(str(inner.this)) < 6):
                raise UnsafeClause("a type modifier is not a small number")
            params.append(str(inner.this))
        return f"pg_catalog.{name}" + (f"({', '.join(params)})" if params else "")
