"""Read-only probes of a PostgreSQL finding: the statistics the planner used, and its estimates.

Every query here is parameterised or built from identifiers quoted by `_ident`; clause text
from the plan passes `safe_clause` first. All of it runs in one READ ONLY transaction that is
rolled back (``BEGIN READ ONLY`` ... ``ROLLBACK``), with ``statement_timeout`` and
``lock_timeout`` set locally, so nothing can write and nothing can wait for long.
"""

from __future__ import annotations

import json
import math
import re
from contextlib import contextmanager
from typing import Any

import sqlglot
from sqlglot import exp

from ..errors import ProbeError
from . import ProbeCheck, ProbeResult

# Expression types a clause may hold to be planned on the user's server.
_SAFE = (exp.Column, exp.Identifier, exp.Literal, exp.Cast, exp.DataType, exp.Paren, exp.EQ,
         exp.NEQ, exp.GT, exp.GTE, exp.LT, exp.LTE, exp.In, exp.Any, exp.Array, exp.Like,
         exp.ILike, exp.Is, exp.Null, exp.Boolean, exp.Not, exp.And, exp.Or, exp.Between,
         exp.Tuple, exp.Neg, exp.DataTypeParam, exp.Var)


def connect(dsn: str):
    try:
        import psycopg
    except ImportError:
        raise ProbeError("probing PostgreSQL needs psycopg: pip install 'psycopg[binary]'") from None
    try:
        return psycopg.connect(dsn, autocommit=True)
    except Exception as exc:
        raise ProbeError(f"cannot connect: {str(exc).splitlines()[0]}") from None


def _ident(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _qualified(table: str) -> str:
    return ".".join(_ident(part) for part in table.split(".", 1))


def safe_clause(text: str) -> bool:
    """True when the clause holds only columns, constants, casts and comparisons.

    >>> safe_clause("(o.town = 'Larkhollow'::text)")
    True
    >>> safe_clause("(lower(o.email) = 'x'::text)"), safe_clause("(1 = 1); DROP TABLE t")
    (False, False)
    """
    if ";" in text.replace("';'", ""):
        return False
    try:
        tree = sqlglot.parse_one(text, read="postgres")
    except Exception:
        return False
    return all(isinstance(node, _SAFE) for node in tree.walk())


@contextmanager
def _read_only(conn, timeout_ms: int):
    """One READ ONLY transaction, rolled back whatever happens."""
    previous = getattr(conn, "autocommit", None)
    try:
        if previous is not None and not previous:
            conn.rollback()
        if previous is not None:
            conn.autocommit = True
        cur = conn.cursor()
        cur.execute("BEGIN READ ONLY")
        cur.execute(f"SET LOCAL statement_timeout = {int(timeout_ms)}")
        cur.execute(f"SET LOCAL lock_timeout = {min(int(timeout_ms), 2000)}")
        try:
            yield cur
        finally:
            cur.execute("ROLLBACK")
    except ProbeError:
        raise
    except Exception as exc:
        raise ProbeError(f"probe failed: {str(exc).splitlines()[0]}") from None
    finally:
        if previous is not None:
            conn.autocommit = previous


TABLE_SQL = """SELECT c.reltuples::float8, c.relpages, s.last_analyze, s.last_autoanalyze,
       s.n_mod_since_analyze, s.n_live_tup
FROM pg_class c LEFT JOIN pg_stat_user_tables s ON s.relid = c.oid
WHERE c.oid = to_regclass(%s)"""

COLUMN_SQL = """SELECT s.null_frac::float8, s.n_distinct::float8,
       s.most_common_vals::text::text[], s.most_common_freqs::float8[],
       s.histogram_bounds::text::text[]
FROM pg_stats s
JOIN pg_class c ON c.relname = s.tablename
JOIN pg_namespace n ON n.oid = c.relnamespace AND n.nspname = s.schemaname
WHERE c.oid = to_regclass(%s) AND s.attname = %s"""

EXTENDED_SQL = """SELECT stxname::text, stxkind::text[]
FROM pg_statistic_ext WHERE stxrelid = to_regclass(%s)"""


def _one(cur, sql: str, params: tuple) -> tuple | None:
    cur.execute(sql, params)
    return cur.fetchone()


def _estimate(cur, table: str, alias: str | None, where: str) -> float | None:
    sql = f"EXPLAIN (FORMAT JSON) SELECT 1 FROM {_qualified(table)}"
    if alias:
        sql += f" AS {_ident(alias)}"
    sql += f" WHERE {where}"
    cur.execute(sql)
    doc = cur.fetchone()[0]
    doc = json.loads(doc) if isinstance(doc, str) else doc
    return float(doc[0]["Plan"]["Plan Rows"])


def probe_finding(plan, finding, conn, *, timeout_ms: int = 5000) -> ProbeResult:
    node = plan.nodes[finding.node]
    evidence = finding.evidence or {}
    table = evidence.get("table")
    result = ProbeResult(node=node.id, cause=finding.cause)
    if not table:
        result.summary = "no single table to probe for this finding"
        return result
    clauses = [c for c in evidence.get("clauses", []) if c.get("source") in
               ("filter", "index_cond", "recheck_cond", "tid_cond")]
    alias = node.alias if node.relation else None
    with _read_only(conn, timeout_ms) as cur:
        facts = _one(cur, TABLE_SQL, (table,))
        if facts is None:
            raise ProbeError(f"table {table} not found on this connection")
        reltuples, relpages, last_analyze, last_auto, modified, live = facts
        analyzed = max([t for t in (last_analyze, last_auto) if t is not None], default=None)
        result.checks.append(ProbeCheck(
            "table statistics", TABLE_SQL.replace("%s", repr(table)),
            {"reltuples": reltuples, "relpages": relpages, "last_analyzed": str(analyzed) if analyzed else None,
             "modified_since_analyze": modified, "live_rows": live},
            f"{table}: {reltuples:,.0f} rows as last counted"
            + (f", analyzed {analyzed:%Y-%m-%d %H:%M}" if analyzed else ", never analyzed")
            + (f", {modified:,} rows changed since" if modified is not None else "") + "."))
        cause = finding.cause
        if cause == "correlation":
            _correlation(cur, result, table, alias, clauses, node, reltuples)
        elif cause in ("skew", "range_gap", "stale_statistics"):
            _column(cur, result, table, clauses, node, cause, reltuples, modified)
        elif cause == "default_selectivity":
            result.summary = ("the clause wraps its column, and PostgreSQL keeps statistics on bare "
                              "columns (and on expressions only when told to): see the fix")
            _extended(cur, result, table)
    return result


def _extended(cur, result: ProbeResult, table: str) -> list:
    cur.execute(EXTENDED_SQL, (table,))
    rows = cur.fetchall()
    result.checks.append(ProbeCheck(
        "extended statistics", EXTENDED_SQL.replace("%s", repr(table)),
        [{"name": r[0], "kinds": r[1]} for r in rows],
        f"{len(rows)} extended statistics object(s) on {table}"
        + (": " + ", ".join(r[0] for r in rows) if rows else "") + "."))
    return rows


def _correlation(cur, result, table, alias, clauses, node, reltuples) -> None:
    usable = [c for c in clauses if safe_clause(c["text"])]
    if len(usable) < 2 or not reltuples:
        result.summary = "fewer than two clauses could be planned alone safely"
        return
    singles = []
    for clause in usable:
        estimate = _estimate(cur, table, alias, clause["text"])
        singles.append(estimate)
        result.checks.append(ProbeCheck(
            "one clause alone", f"EXPLAIN SELECT 1 FROM {table} WHERE {clause['text']}",
            {"clause": clause["text"], "estimate": estimate},
            f"{clause['text']} alone: {estimate:,.0f} rows estimated "
            f"(selectivity {estimate / reltuples:.4g})."))
    together = " AND ".join(c["text"] for c in usable)
    combined = _estimate(cur, table, alias, together)
    product = reltuples * math.prod(s / reltuples for s in singles)
    actual = node.actual_rows if node.actual_rows is not None else None
    result.checks.append(ProbeCheck(
        "independence", f"EXPLAIN SELECT 1 FROM {table} WHERE {together}",
        {"combined_estimate": combined, "product_of_selectivities": product, "actual_per_start": actual},
        f"Together: {combined:,.0f} rows estimated; the product of the single selectivities gives "
        f"{product:,.2f}" + (f"; the plan found {actual:,.0f}." if actual is not None else ".")))
    ext = _extended(cur, result, table)
    reproduces = abs(math.log10(max(combined, 1) / max(product, 1))) <= math.log10(2)
    if reproduces and actual is not None and actual > 3 * max(combined, 1):
        result.verdict = "supports"
        result.summary = ("independence reproduces the planner's estimate and the real rows are "
                          f"far more: the columns are correlated{'' if not ext else ' (extended statistics exist but do not cover this)'}")
    elif not reproduces:
        result.verdict = "contradicts"
        result.summary = "the planner already combines these clauses differently from independence"
    else:
        result.summary = "independence reproduces the estimate, but the rows found are not far off it"


def _array_floats(values: list[str] | None) -> list[float] | None:
    try:
        return [float(v) for v in values] if values else None
    except (TypeError, ValueError):
        return None


def _constant_of(clause: dict) -> str | None:
    constants = clause.get("constants") or []
    return str(constants[0]) if constants else None


def _column(cur, result, table, clauses, node, cause, reltuples, modified) -> None:
    columns = [c for c in clauses if len(c.get("columns") or []) >= 1]
    if not columns:
        result.summary = "no column clause to probe"
        return
    clause = columns[0]
    column = clause["columns"][0].split(".")[-1]
    row = _one(cur, COLUMN_SQL, (table, column))
    if row is None:
        result.checks.append(ProbeCheck("column statistics", COLUMN_SQL, None,
                                        f"No statistics at all for {table}.{column}: never analyzed."))
        result.verdict = "supports" if cause == "stale_statistics" else "inconclusive"
        result.summary = f"{table}.{column} has no statistics"
        return
    null_frac, n_distinct, mcv, mcf, bounds = row
    mcv = mcv or []
    mcf = mcf or []
    result.checks.append(ProbeCheck(
        "column statistics", COLUMN_SQL.replace("%s", repr(table), 1).replace("%s", repr(column)),
        {"null_frac": null_frac, "n_distinct": n_distinct, "most_common_vals": mcv[:20],
         "most_common_freqs": mcf[:20], "histogram_bounds": (bounds or [])[:5] + ["..."] + (bounds or [])[-5:]
         if bounds and len(bounds) > 10 else bounds},
        f"{table}.{column}: {len(mcv)} most-common values, "
        f"{len(bounds) - 1 if bounds else 0} histogram buckets, n_distinct {n_distinct:g}."))
    value = _constant_of(clause)
    if cause == "skew":
        distinct = n_distinct if n_distinct > 0 else -n_distinct * (reltuples or 0)
        rest = max(distinct - len(mcv), 1)
        average = max(0.0, 1 - sum(mcf) - (null_frac or 0)) / rest
        listed = value is not None and value in mcv
        actual_sel = (node.actual_total or 0) / reltuples if reltuples else None
        says = (f"{value!r} is {'in' if listed else 'not in'} the most-common-values list; values not "
                f"listed are estimated at {average:.3g} each")
        if actual_sel is not None:
            says += f", and it really has {actual_sel:.3g}"
        result.checks.append(ProbeCheck("most-common values", "(from the column statistics)",
                                        {"value": value, "listed": listed, "unlisted_frequency": average,
                                         "actual_selectivity": actual_sel}, says + "."))
        if value is not None and not listed and actual_sel is not None and \
                (actual_sel > 5 * average or actual_sel < average / 5):
            result.verdict = "supports"
            result.summary = says
        elif listed:
            result.verdict = "contradicts"
            result.summary = f"{value!r} is already a most-common value"
        else:
            result.summary = says
        return
    numbers = _array_floats(bounds)
    constants = [float(c) for c in (clause.get("constants") or []) if _is_number(c)]
    if cause == "range_gap":
        if numbers and len(constants) >= 1:
            low, high = min(constants), max(constants)
            inside = [(a, b) for a, b in zip(numbers, numbers[1:]) if a <= low and high <= b]
            says = (f"the range {low:g}..{high:g} lies inside one histogram bucket "
                    f"[{inside[0][0]:g}, {inside[0][1]:g}], which the planner assumes evenly filled"
                    if inside else f"the range {low:g}..{high:g} spans several histogram buckets")
            result.checks.append(ProbeCheck("histogram", "(from the column statistics)",
                                            {"range": [low, high], "bucket": list(inside[0]) if inside else None},
                                            says + "."))
            result.verdict = "supports" if inside else "inconclusive"
            result.summary = says
        else:
            result.summary = "the histogram or the range is not numeric; compare them by eye above"
        return
    # stale statistics
    top = bounds[-1] if bounds else None
    says = f"the histogram ends at {top!r}" if top is not None else "the column has no histogram"
    if value is not None and top is not None:
        newer = _compare(value, top)
        if newer:
            says += f"; the query asks for values from {value!r}, above all the planner knows of"
            result.verdict = "supports"
    if modified:
        says += f"; {modified:,} rows changed since the last analyze"
        result.verdict = "supports"
    result.checks.append(ProbeCheck("histogram upper bound", "(from the column statistics)",
                                    {"upper_bound": top, "value": value, "modified_since_analyze": modified},
                                    says + "."))
    result.summary = says


def _is_number(text: Any) -> bool:
    try:
        float(text)
        return True
    except (TypeError, ValueError):
        return False


def _compare(value: str, bound: str) -> bool:
    """Is `value` above `bound`? Numbers as numbers, timestamps and the rest as text (ISO
    timestamps and dates sort as text)."""
    if _is_number(value) and _is_number(bound):
        return float(value) > float(bound)
    return re.sub(r"[+]00$", "", str(value)) > re.sub(r"[+]00$", "", str(bound))
