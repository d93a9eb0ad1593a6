"""What PostgreSQL's planner had for a table and its columns: read-only, timed out, rolled back.

This reads the inputs of the optimizer's row estimate, nothing else: ``pg_class`` (``reltuples``,
``relpages``) and the table's current size in pages (``pg_relation_size`` over ``block_size``),
``pg_stats`` per column (null fraction, distinct count, most-common values and their
frequencies, histogram bounds, correlation), each column's statistics target
(``pg_attribute.attstattarget``; -1, or NULL from version 17 on, means
``default_statistics_target``), the indexes that change an estimate (a unique index on the
column alone; a b-tree index led by the column, from which the planner reads the current
minimum and maximum), ``pg_statistic_ext`` / ``pg_stats_ext`` / ``pg_stats_ext_exprs`` and
``pg_stat_user_tables``.

Everything runs inside the probe's transaction (`planview.probe.postgresql._read_only`: READ
ONLY, rolled back, statement and lock timeouts, the whole under a `Budget`); names go as
parameters or through `quote_ident`, never as text from the plan. A column whose name or type
looks secret (`looks_secret`) has its statistics read for the arithmetic, but `as_dict` and
every sentence made from it show only counts and frequencies, never a value.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from ..errors import ProbeError
from ..probe import Budget
from ..probe.clause_sql import quote_ident
from ..probe.postgresql import (
    TABLE_SQL,
    Relation,
    _read_only,
    _relation,
    _Session,
    looks_secret,
    printable,
    scans_by_table,
    shown,
)

WITHHELD = "withheld"
SHOWN_VALUES = 10

SERVER_SQL = """SELECT pg_catalog.current_setting('server_version_num')::pg_catalog.int4,
       pg_catalog.current_setting('block_size')::pg_catalog.int4,
       pg_catalog.current_setting('default_statistics_target')::pg_catalog.int4"""

SIZE_SQL = """SELECT pg_catalog.pg_relation_size(c.oid, 'main')::pg_catalog.int8, c.relkind::pg_catalog.text,
       c.relhassubclass
FROM pg_catalog.pg_class c WHERE c.oid = %s::pg_catalog.oid"""

DEAD_SQL = """SELECT s.n_dead_tup FROM pg_catalog.pg_stat_user_tables s WHERE s.relid = %s::pg_catalog.oid"""

# attstattarget became nullable in PostgreSQL 17 (NULL = the default); -1 before.
COLUMNS_SQL = """SELECT a.attnum::pg_catalog.int4, a.attname::pg_catalog.text, t.typname::pg_catalog.text,
       pg_catalog.format_type(a.atttypid, a.atttypmod), a.attnotnull,
       COALESCE(a.attstattarget::pg_catalog.int4, -1),
       pg_catalog.has_column_privilege(a.attrelid, a.attnum, 'SELECT'),
       a.attcollation::pg_catalog.int8, co.collname::pg_catalog.text, co.collprovider::pg_catalog.text,
       co.collcollate::pg_catalog.text
FROM pg_catalog.pg_attribute a JOIN pg_catalog.pg_type t ON t.oid = a.atttypid
LEFT JOIN pg_catalog.pg_collation co ON co.oid = a.attcollation
WHERE a.attrelid = %s::pg_catalog.oid AND a.attnum > 0 AND NOT a.attisdropped
  AND a.attname::pg_catalog.text = ANY (%s::pg_catalog.text[])"""

DATABASE_COLLATION_SQL = {
    # datlocprovider exists from PostgreSQL 15 on; before, the default collation is libc's.
    True: """SELECT d.datlocprovider::pg_catalog.text, d.datcollate::pg_catalog.text
FROM pg_catalog.pg_database d WHERE d.datname = pg_catalog.current_database()""",
    False: """SELECT 'c'::pg_catalog.text, d.datcollate::pg_catalog.text
FROM pg_catalog.pg_database d WHERE d.datname = pg_catalog.current_database()""",
}

# inherited = false: the statistics a scan of the table itself uses (examine_simple_variable
# asks for stainherit = the range-table entry's inh, false for a table scanned alone).
STATS_SQL = """SELECT s.attname::pg_catalog.text, s.null_frac::pg_catalog.float8, s.n_distinct::pg_catalog.float8,
       s.most_common_vals::pg_catalog.text::pg_catalog.text[], s.most_common_freqs::pg_catalog.float8[],
       s.histogram_bounds::pg_catalog.text::pg_catalog.text[], s.correlation::pg_catalog.float8
FROM pg_catalog.pg_stats s
WHERE s.schemaname = %s::pg_catalog.name AND s.tablename = %s::pg_catalog.name
  AND s.attname::pg_catalog.text = ANY (%s::pg_catalog.text[]) AND NOT s.inherited"""

INDEXES_SQL = """SELECT i.indkey[0]::pg_catalog.int4, i.indisunique, i.indnkeyatts::pg_catalog.int4,
       am.amname::pg_catalog.text, (i.indpred IS NULL AND i.indexprs IS NULL), i.indisvalid,
       i.indcollation[0]::pg_catalog.int8, opc.opcdefault, ic.relname::pg_catalog.text,
       i.indpred IS NOT NULL
FROM pg_catalog.pg_index i
JOIN pg_catalog.pg_class ic ON ic.oid = i.indexrelid
JOIN pg_catalog.pg_am am ON am.oid = ic.relam
JOIN pg_catalog.pg_opclass opc ON opc.oid = i.indclass[0]
WHERE i.indrelid = %s::pg_catalog.oid"""

EXTENDED_SQL = """SELECT x.stxname::pg_catalog.text, x.stxkind::pg_catalog.text[],
       ARRAY(SELECT a.attname::pg_catalog.text FROM pg_catalog.unnest(x.stxkeys) k(n)
             JOIN pg_catalog.pg_attribute a ON a.attrelid = x.stxrelid AND a.attnum = k.n ORDER BY k.n),
       x.stxexprs IS NOT NULL
FROM pg_catalog.pg_statistic_ext x WHERE x.stxrelid = %s::pg_catalog.oid ORDER BY x.stxname LIMIT 50"""

# The data of an extended statistics object is visible to the table's owner only; counts only.
EXTENDED_DATA_SQL = """SELECT e.statistics_name::pg_catalog.text, e.n_distinct::pg_catalog.text,
       e.dependencies::pg_catalog.text, pg_catalog.cardinality(e.most_common_freqs)
FROM pg_catalog.pg_stats_ext e
WHERE e.schemaname = %s::pg_catalog.name AND e.tablename = %s::pg_catalog.name LIMIT 50"""

EXPRESSIONS_SQL = """SELECT e.statistics_name::pg_catalog.text, e.expr::pg_catalog.text,
       e.null_frac::pg_catalog.float8, e.n_distinct::pg_catalog.float8
FROM pg_catalog.pg_stats_ext_exprs e
WHERE e.schemaname = %s::pg_catalog.name AND e.tablename = %s::pg_catalog.name LIMIT 50"""

C_COLLATIONS = {"C", "POSIX"}
C_COLLATION_OIDS = {950, 951}  # "C" and "POSIX" in pg_collation.dat


@dataclass
class ColumnStats:
    """One column as the planner sees it. Values are the server's text forms."""

    name: str
    attnum: int
    type_name: str
    """``pg_type.typname`` (``int4``, ``text``, ``numeric``, ``date``...)."""
    type_shown: str
    not_null: bool
    stats_target: int
    """The target ANALYZE used: the column's own, or ``default_statistics_target``."""
    stats_target_own: int | None
    """The column's own ``attstattarget`` (None: it follows the default)."""
    collation_is_c: bool | None
    """Strings compare byte by byte (C, POSIX or the builtin provider): None when not a string."""
    secret: bool
    collation_oid: int = 0
    analyzed: bool = False
    null_frac: float | None = None
    n_distinct: float | None = None
    most_common_vals: list[str] | None = None
    most_common_freqs: list[float] | None = None
    histogram_bounds: list[str] | None = None
    correlation: float | None = None
    unique_index: str | None = None
    """A valid unique index on this column alone, without a predicate (has_unique_index)."""
    leading_btree: str | None = None
    """A valid b-tree index led by this column, with no predicate and the column's collation:
    the planner reads the current extremes from it (get_actual_variable_range)."""
    actual_min: str | None = None
    actual_max: str | None = None
    """The current extremes, read through `leading_btree` when the caller asked for them."""

    def as_dict(self) -> dict[str, Any]:
        def values(items):
            if items is None:
                return None
            if self.secret:
                return WITHHELD
            head = [shown(v) for v in items[:SHOWN_VALUES]]
            return head + ([f"... {len(items) - SHOWN_VALUES} more"] if len(items) > SHOWN_VALUES else [])

        return {
            "name": printable(self.name, 63), "type": printable(self.type_shown, 63),
            "not_null": self.not_null, "statistics_target": self.stats_target,
            "statistics_target_own": self.stats_target_own, "analyzed": self.analyzed,
            "null_frac": self.null_frac, "n_distinct": self.n_distinct,
            "most_common_vals": values(self.most_common_vals),
            "most_common_freqs": (self.most_common_freqs or [])[:SHOWN_VALUES] if self.most_common_freqs else None,
            "mcv_count": len(self.most_common_vals or []),
            "histogram_bounds": values(self.histogram_bounds),
            "histogram_buckets": max(len(self.histogram_bounds or []) - 1, 0),
            "correlation": self.correlation,
            "unique_index": printable(self.unique_index, 63) if self.unique_index else None,
            "leading_btree": printable(self.leading_btree, 63) if self.leading_btree else None,
            "values_withheld": self.secret,
        }


@dataclass
class ExtendedStats:
    name: str
    columns: tuple[str, ...]
    kinds: tuple[str, ...]
    """pg_statistic_ext.stxkind: ``d`` distinct counts, ``f`` functional dependencies, ``m``
    most-common values, ``e`` expressions."""
    has_expressions: bool = False
    n_distinct: str | None = None
    dependencies: str | None = None
    mcv_items: int | None = None

    def as_dict(self) -> dict[str, Any]:
        return {"name": printable(self.name, 63), "columns": [printable(c, 63) for c in self.columns],
                "kinds": list(self.kinds), "has_expressions": self.has_expressions,
                "n_distinct": printable(self.n_distinct, 300) if self.n_distinct else None,
                "dependencies": printable(self.dependencies, 300) if self.dependencies else None,
                "mcv_items": self.mcv_items}


@dataclass
class TableStats:
    relation: Relation
    server_version: int
    """``server_version_num`` (160004 for 16.4)."""
    block_size: int
    default_statistics_target: int
    current_bytes: int
    relkind: str
    has_subclass: bool
    live_rows: int | None = None
    modified_since_analyze: int | None = None
    dead_rows: int | None = None
    last_analyze: Any = None
    last_autoanalyze: Any = None
    columns: dict[str, ColumnStats] = field(default_factory=dict)
    extended: list[ExtendedStats] = field(default_factory=list)
    expressions: list[dict[str, Any]] = field(default_factory=list)
    partial_indexes: set[str] = field(default_factory=set)
    """Indexes with a predicate: a scan of one does not print the clauses its predicate implies."""

    @property
    def reltuples(self) -> float:
        return self.relation.reltuples

    @property
    def relpages(self) -> int:
        return self.relation.relpages

    @property
    def current_pages(self) -> int:
        """RelationGetNumberOfBlocks: the main fork's size in blocks."""
        return self.current_bytes // self.block_size if self.block_size else 0

    @property
    def label(self) -> str:
        return self.relation.label

    def as_dict(self) -> dict[str, Any]:
        analyzed = max([t for t in (self.last_analyze, self.last_autoanalyze) if t is not None], default=None)
        return {
            "table": self.label, "server_version": self.server_version,
            "reltuples": self.reltuples, "relpages": self.relpages, "current_pages": self.current_pages,
            "block_size": self.block_size, "default_statistics_target": self.default_statistics_target,
            "live_rows": self.live_rows, "modified_since_analyze": self.modified_since_analyze,
            "dead_rows": self.dead_rows,
            "last_analyze": str(self.last_analyze) if self.last_analyze else None,
            "last_autoanalyze": str(self.last_autoanalyze) if self.last_autoanalyze else None,
            "last_analyzed": str(analyzed) if analyzed else None,
            "columns": {printable(k, 63): c.as_dict() for k, c in self.columns.items()},
            "extended": [x.as_dict() for x in self.extended],
            "expressions": list(self.expressions),
            "partial_indexes": sorted(printable(n, 63) for n in self.partial_indexes),
        }


def read_table_stats(conn, node, columns, *, budget: Budget, endpoints=(), scans: dict | None = None,
                     table: str | None = None) -> TableStats:
    """The statistics of the table `node` scans (or `table`), for `columns`, in a read-only
    transaction of its own (or a read-only savepoint in the caller's) that is rolled back.

    `endpoints` names the columns whose current minimum and maximum the planner would read
    from an index (ranges on a column led by a b-tree index); they are read the same way, one
    row each through that index. Raises ProbeError, with one clean line, when it cannot."""
    with _read_only(conn, budget) as session:
        return table_stats(session, node, columns, endpoints=endpoints, scans=scans, table=table)
    raise ProbeError("the statistics could not be read")  # pragma: no cover (the context raises)


def table_stats(session: _Session, node, columns, *, endpoints=(), scans: dict | None = None,
                table: str | None = None) -> TableStats:
    """`read_table_stats` inside a session the caller holds (`_read_only`)."""
    if table is None:
        if not node.relation:
            raise ProbeError("this node names no table")
        table = f"{node.schema}.{node.relation}" if node.schema else node.relation
    # the statistics' values as text planview reads exactly: ISO dates, shortest exact floats
    session.cur.execute("SET LOCAL datestyle = 'ISO, YMD'")
    session.cur.execute("SET LOCAL extra_float_digits = 3")
    relation = _relation(session, node, table, scans if scans is not None else {})
    version, block_size, default_target = session.one(SERVER_SQL)
    size, relkind, has_subclass = session.one(SIZE_SQL, (relation.oid,))
    stats = TableStats(relation=relation, server_version=int(version), block_size=int(block_size),
                       default_statistics_target=int(default_target), current_bytes=int(size or 0),
                       relkind=relkind, has_subclass=bool(has_subclass))
    facts = session.one(TABLE_SQL, (relation.oid,))
    if facts:
        stats.last_analyze, stats.last_autoanalyze, stats.modified_since_analyze, stats.live_rows = facts
    dead = session.one(DEAD_SQL, (relation.oid,))
    stats.dead_rows = int(dead[0]) if dead and dead[0] is not None else None
    names = sorted({str(c) for c in columns})
    if names:
        _columns(session, stats, names)
        _column_statistics(session, stats, [n for n in names if n in stats.columns])
    _indexes(session, stats)
    if names:
        for name in sorted(set(endpoints)):
            column = stats.columns.get(name)
            if column is not None and column.leading_btree:
                column.actual_min, column.actual_max = _extremes(session, relation, name)
    _extended(session, stats)
    return stats


def _collation_is_c(session: _Session, stats: TableStats, oid, name, provider, collate) -> bool | None:
    if not oid:
        return None
    if int(oid) in C_COLLATION_OIDS:
        return True
    if provider == "d":  # the database's default collation
        cache = getattr(session, "_planview_default_collation", None)
        if cache is None:
            cache = session.one(DATABASE_COLLATION_SQL[stats.server_version >= 150000]) or ("c", None)
            session._planview_default_collation = cache
        provider, collate = cache
    if provider == "b":  # the builtin provider sorts by code point (PostgreSQL 17 on)
        return True
    return provider == "c" and collate in C_COLLATIONS


def _columns(session: _Session, stats: TableStats, names: list[str]) -> None:
    rows = session.run(COLUMNS_SQL, (stats.relation.oid, names)).fetchall()
    for attnum, name, typname, shown_type, not_null, target, allowed, coll, collname, provider, collate in rows:
        if not allowed:
            raise ProbeError(f"this role may not SELECT {stats.label}.{printable(name, 63)}, so planview "
                             "reads none of its statistics")
        own = int(target) if target is not None and int(target) >= 0 else None
        stats.columns[name] = ColumnStats(
            name=name, attnum=int(attnum), type_name=typname, type_shown=shown_type, not_null=bool(not_null),
            stats_target=own if own is not None else stats.default_statistics_target, stats_target_own=own,
            collation_is_c=_collation_is_c(session, stats, coll, collname, provider, collate),
            secret=looks_secret(name, typname), collation_oid=int(coll or 0))
    missing = [n for n in names if n not in stats.columns]
    if missing:
        raise ProbeError(f"{stats.label} has no column {shown(missing[0])}")
    stats.columns = {n: stats.columns[n] for n in names}


def _column_statistics(session: _Session, stats: TableStats, names: list[str]) -> None:
    rows = session.run(STATS_SQL, (stats.relation.schema, stats.relation.name, names)).fetchall()
    for name, null_frac, n_distinct, mcv, mcf, bounds, correlation in rows:
        column = stats.columns[name]
        column.analyzed = True
        column.null_frac = float(null_frac) if null_frac is not None else 0.0
        column.n_distinct = float(n_distinct) if n_distinct is not None else 0.0
        column.most_common_vals = list(mcv) if mcv is not None else None
        column.most_common_freqs = [float(f) for f in mcf] if mcf is not None else None
        column.histogram_bounds = list(bounds) if bounds is not None else None
        column.correlation = float(correlation) if correlation is not None else None


def _indexes(session: _Session, stats: TableStats) -> None:
    by_attnum = {c.attnum: c for c in stats.columns.values()}
    for attnum, unique, key_columns, am, plain, valid, collation, default_opclass, name, partial in \
            session.run(INDEXES_SQL, (stats.relation.oid,)).fetchall()[:500]:
        if partial:
            stats.partial_indexes.add(name)
        column = by_attnum.get(int(attnum or 0))
        if column is None or not valid or not plain:
            continue
        if unique and key_columns == 1 and column.unique_index is None:
            column.unique_index = name
        if am == "btree" and default_opclass and column.leading_btree is None \
                and int(collation or 0) == column.collation_oid:
            column.leading_btree = name


def _extremes(session: _Session, relation: Relation, column: str) -> tuple[str | None, str | None]:
    """The smallest and largest non-null value, one row each through the index (ORDER BY ...
    LIMIT 1 walks a b-tree from an end), as text."""
    target = f"{quote_ident(relation.schema)}.{quote_ident(relation.name)} AS planview_t"
    col = "planview_t." + quote_ident(column)  # qualified: ORDER BY must not mean the text output
    found = []
    for direction in ("ASC", "DESC"):
        row = session.one(f"SELECT {col}::pg_catalog.text AS planview_value FROM {target} "
                          f"WHERE {col} IS NOT NULL ORDER BY {col} {direction} LIMIT 1")
        found.append(row[0] if row else None)
    return found[0], found[1]


def _extended(session: _Session, stats: TableStats) -> None:
    objects = {}
    for name, kinds, columns, has_expr in session.run(EXTENDED_SQL, (stats.relation.oid,)).fetchall():
        objects[name] = ExtendedStats(name=name, columns=tuple(columns or ()), kinds=tuple(kinds or ()),
                                      has_expressions=bool(has_expr))
    if objects:
        params = (stats.relation.schema, stats.relation.name)
        for name, n_distinct, dependencies, items in session.run(EXTENDED_DATA_SQL, params).fetchall():
            if name in objects:
                objects[name].n_distinct, objects[name].dependencies = n_distinct, dependencies
                objects[name].mcv_items = int(items) if items is not None else None
        if stats.server_version >= 140000 and any(o.has_expressions for o in objects.values()):
            for name, expr, null_frac, n_distinct in session.run(EXPRESSIONS_SQL, params).fetchall():
                stats.expressions.append({"statistics": printable(name, 63), "expression": printable(expr or "", 200),
                                          "null_frac": null_frac, "n_distinct": n_distinct})
    stats.extended = list(objects.values())


__all__ = ["ColumnStats", "ExtendedStats", "TableStats", "read_table_stats", "table_stats", "scans_by_table"]
