"""Read-only probes of a PostgreSQL finding: the statistics the planner used, and its estimates.

Nothing from the plan is sent as SQL text. Names and values go as parameters or through
`quote_ident`; conditions are re-rendered from their parsed tree (`clause_sql`). Every
statement runs in a READ ONLY transaction that is rolled back (``BEGIN READ ONLY`` ...
``ROLLBACK``), or, when the caller's connection is already inside a transaction, in a
savepoint made read-only (``SET LOCAL transaction_read_only = on`` may always make a
transaction stricter) and rolled back to, so the caller's work survives. The settings the
probe relies on are pinned first with ``SET LOCAL``: ``standard_conforming_strings = on`` (so a
string means what the renderer wrote), ``search_path`` to ``pg_catalog``, the probed
relation's schema and ``pg_temp`` last, a statement and a lock timeout. Catalogue names are
written qualified with ``pg_catalog``.

Refused: relations of the system (a relation, or a namespace other than ``public``, below
FirstNormalObjectId, 16384, or a schema named ``pg_*`` or ``information_schema``); relations
that are not local tables (planning a foreign table may ask its remote server); columns the
connected role may not SELECT itself. Statistics of columns whose name or type marks them
secret are counted, never shown; what is shown of other columns is capped and quoted.
"""

from __future__ import annotations

import json
import math
import re
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

from ..errors import ProbeError
from ..redact import redact
from . import Budget, ProbeCheck, ProbeResult
from .clause_sql import RenderedClause, UnsafeClause, quote_ident, render_clause

FIRST_NORMAL_OBJECT_ID = 16384  # PostgreSQL's src/include/access/transam.h
SAVEPOINT = "planview_probe"
LOCK_TIMEOUT_MS = 2000
SHOWN_VALUES = 10
SHOWN_CHARS = 60
MESSAGE_CHARS = 300

# libpq's transaction states (PQtransactionStatus), shared by psycopg 3 and psycopg2.
_IDLE, _ACTIVE, _INTRANS, _INERROR = 0, 1, 2, 3

_SECRET_WORDS = ("password", "passwd", "passphrase", "secret", "token", "verifier", "credential",
                 "apikey", "privatekey", "private_key", "api_key")
_SECRET_PARTS = {"pass", "pwd", "pw", "hash", "hashed", "salt", "key", "pin", "otp", "totp", "mfa",
                 "ssn", "auth", "iban", "cvv"}
_SECRET_TYPES = {"bytea"}


def connect(dsn: str, budget: Budget):
    try:
        import psycopg
    except ImportError:
        raise ProbeError("probing PostgreSQL needs psycopg: pip install 'psycopg[binary]'") from None
    seconds = max(2, min(10, math.ceil(budget.next_statement_ms() / 1000)))
    failure = None
    try:
        return psycopg.connect(dsn, autocommit=True, connect_timeout=seconds)
    except Exception as exc:  # psycopg raises several types, and some quote the DSN
        failure = _message(exc, dsn)
    raise ProbeError(f"cannot connect: {failure}")


def _message(exc: BaseException, dsn: str | None = None) -> str:
    """A driver error as one capped line, passwords masked."""
    lines = str(exc).strip().splitlines()
    text = redact(lines[0] if lines else type(exc).__name__, dsn)
    return text if len(text) <= MESSAGE_CHARS else text[:MESSAGE_CHARS] + "..."


def safe_clause(text: str) -> bool:
    """True when the clause holds only columns, constants, casts and comparisons.

    >>> safe_clause("(o.town = 'Larkhollow'::text)")
    True
    >>> safe_clause("(lower(o.email) = 'x'::text)"), safe_clause("(1 = 1); DROP TABLE t")
    (False, False)
    """
    try:
        render_clause(text)
    except UnsafeClause:
        return False
    return True


def looks_secret(column: str, type_name: str | None = None) -> bool:
    """A column whose values must not be printed, by its name or its type.

    >>> looks_secret("rolpassword"), looks_secret("api_key"), looks_secret("o_custkey")
    (True, True, False)
    """
    lowered = column.lower()
    if any(word in lowered for word in _SECRET_WORDS):
        return True
    parts = re.sub(r"([a-z])([A-Z])", r"\1_\2", column).lower()
    if any(part in _SECRET_PARTS for part in re.split(r"[^a-z0-9]+", parts)):
        return True
    return (type_name or "").lower() in _SECRET_TYPES


def shown(value: Any, limit: int = SHOWN_CHARS) -> str:
    """A value from the statistics or the plan as printed: quoted, one line, capped.

    >>> shown("a\\nb"), shown("x" * 70)[-5:]
    ("'a\\\\nb'", "x...'")
    """
    text = str(value)
    cut = text[:limit] + "..." if len(text) > limit else text
    return repr(cut)


def printable(text: str, limit: int = 160) -> str:
    """Plan text on one line with control and invisible characters escaped, capped."""
    out = "".join(ch if ch.isprintable() else ch.encode("unicode_escape").decode("ascii") for ch in text[:limit])
    return out + ("..." if len(text) > limit else "")


def _capped(values: list | None) -> list | None:
    if values is None:
        return None
    head = [shown(v) for v in values[:SHOWN_VALUES]]
    return head + ([f"... {len(values) - SHOWN_VALUES} more"] if len(values) > SHOWN_VALUES else [])


# ---- the transaction ------------------------------------------------------------------


class _Session:
    """The probe's statements on one connection, each under the remaining time."""

    def __init__(self, cur, budget: Budget, schemas: list[str]):
        self.cur = cur
        self.budget = budget
        self.schemas = schemas
        """The caller's search path, to find a relation the plan names without a schema."""
        self.timeout_ms: int | None = None

    def run(self, sql: str, params: tuple | None = None):
        limit = self.budget.next_statement_ms()
        if limit != self.timeout_ms:
            self.cur.execute(f"SET LOCAL statement_timeout = {int(limit)}")
            self.timeout_ms = limit
        self.cur.execute(sql, params)
        return self.cur

    def one(self, sql: str, params: tuple | None = None) -> tuple | None:
        return self.run(sql, params).fetchone()


def _transaction_status(conn) -> int:
    info = getattr(conn, "info", None)
    status = getattr(info, "transaction_status", None)
    if status is None:
        raise ProbeError("probing needs a psycopg connection or a connection string")
    return int(status)


@contextmanager
def _read_only(conn, budget: Budget, *, writable: bool = False, pin_settings: bool = True):
    """A read-only transaction of the probe's own, or a read-only savepoint inside the caller's;
    rolled back whatever happens, the connection left as it was found.

    `writable` leaves out READ ONLY (a live review whose caller allowed writes: still rolled
    back). `pin_settings=False` keeps the caller's ``search_path`` and string settings, for a
    statement of the user's own rather than SQL planview wrote. A `ProbeError` raised inside
    keeps its class (a `LiveError` stays one)."""
    status = _transaction_status(conn)
    if status == _INERROR:
        raise ProbeError("the connection's transaction has failed: roll it back first, or pass "
                         "a connection string")
    if status not in (_IDLE, _INTRANS):
        raise ProbeError("the connection is busy or broken: pass an idle connection or a connection string")
    nested = status == _INTRANS
    previous_autocommit = getattr(conn, "autocommit", None)
    failure = None
    failure_type: type[ProbeError] = ProbeError
    cur = None
    try:
        if not nested and previous_autocommit is False:
            conn.autocommit = True  # idle, so allowed; BEGIN below is then the probe's own
        cur = conn.cursor()
        if nested:
            cur.execute(f"SAVEPOINT {SAVEPOINT}")
            if not writable:
                cur.execute("SET LOCAL transaction_read_only = on")
        else:
            cur.execute("BEGIN" if writable else "BEGIN TRANSACTION READ ONLY")
        if pin_settings:
            cur.execute("SET LOCAL standard_conforming_strings = on")
        cur.execute(f"SET LOCAL lock_timeout = {min(budget.statement_ms, LOCK_TIMEOUT_MS)}")
        timeout_ms = budget.next_statement_ms()
        cur.execute(f"SET LOCAL statement_timeout = {int(timeout_ms)}")
        cur.execute("SELECT pg_catalog.current_schemas(false)::pg_catalog.text[]")
        session = _Session(cur, budget, list(cur.fetchone()[0] or []))
        session.timeout_ms = timeout_ms
        if pin_settings:
            cur.execute("SET LOCAL search_path = pg_catalog, pg_temp")
        yield session
    except ProbeError as exc:
        failure, failure_type = str(exc), type(exc)
    except Exception as exc:  # a driver or server error: one clean line
        failure = f"probe failed: {_message(exc)}"
    finally:
        ended = _end(conn, cur, nested)
        if previous_autocommit is False and not nested:
            try:
                conn.autocommit = False
            except Exception:
                pass
    if failure:
        raise failure_type(failure)
    if ended:
        raise ProbeError(ended)


def _end(conn, cur, nested: bool) -> str | None:
    if cur is None:
        return None
    try:
        if nested:
            cur.execute(f"ROLLBACK TO SAVEPOINT {SAVEPOINT}")
            cur.execute(f"RELEASE SAVEPOINT {SAVEPOINT}")
        else:
            cur.execute("ROLLBACK")
        cur.close()
    except Exception as exc:
        return f"probe could not end its transaction: {_message(exc)}"
    return None


# ---- the relation ---------------------------------------------------------------------


@dataclass
class Relation:
    oid: int
    schema: str
    name: str
    alias: str
    reltuples: float
    relpages: int

    @property
    def label(self) -> str:
        return printable(f"{self.schema}.{self.name}", 120)

    @property
    def from_sql(self) -> str:
        return f"{quote_ident(self.schema)}.{quote_ident(self.name)} AS {quote_ident(self.alias)}"


RELATION_SQL = f"""SELECT c.oid::pg_catalog.int8, n.nspname::pg_catalog.text, c.relname::pg_catalog.text,
       c.relkind::pg_catalog.text, c.reltuples::pg_catalog.float8, c.relpages::pg_catalog.int8,
       (c.oid < {FIRST_NORMAL_OBJECT_ID} OR (n.oid < {FIRST_NORMAL_OBJECT_ID} AND n.nspname <> 'public')
        OR pg_catalog.left(n.nspname::pg_catalog.text, 3) = 'pg_' OR n.nspname = 'information_schema')
FROM pg_catalog.pg_class c JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace
WHERE c.oid = pg_catalog.to_regclass(%s::pg_catalog.text)"""

TABLE_SQL = """SELECT s.last_analyze, s.last_autoanalyze, s.n_mod_since_analyze, s.n_live_tup
FROM pg_catalog.pg_stat_user_tables s WHERE s.relid = %s::pg_catalog.oid"""

ATTRIBUTES_SQL = """SELECT a.attname::pg_catalog.text, t.typname::pg_catalog.text,
       pg_catalog.has_column_privilege(a.attrelid, a.attnum, 'SELECT')
FROM pg_catalog.pg_attribute a JOIN pg_catalog.pg_type t ON t.oid = a.atttypid
WHERE a.attrelid = %s::pg_catalog.oid AND a.attnum > 0 AND NOT a.attisdropped
  AND a.attname::pg_catalog.text = ANY (%s::pg_catalog.text[])"""

COLUMN_SQL = """SELECT s.null_frac::pg_catalog.float8, s.n_distinct::pg_catalog.float8,
       s.most_common_vals::pg_catalog.text::pg_catalog.text[], s.most_common_freqs::pg_catalog.float8[],
       s.histogram_bounds::pg_catalog.text::pg_catalog.text[]
FROM pg_catalog.pg_stats s
WHERE s.schemaname = %s::pg_catalog.name AND s.tablename = %s::pg_catalog.name
  AND s.attname = %s::pg_catalog.name
ORDER BY s.inherited LIMIT 1"""

EXTENDED_SQL = """SELECT stxname::pg_catalog.text, stxkind::pg_catalog.text[]
FROM pg_catalog.pg_statistic_ext WHERE stxrelid = %s::pg_catalog.oid"""


def _display(sql: str, params: tuple) -> str:
    """The statement as run, its parameters written in (for the reader, not for the server)."""
    parts = sql.split("%s")
    written = [parts[0]]
    for param, rest in zip(params, parts[1:]):
        written.append(("'" + param.replace("'", "''") + "'" if isinstance(param, str) else str(param)) + rest)
    return printable("".join(written), 2000)


def scans_by_table(plan) -> dict:
    """Each relation's name as the diagnosis writes it -> its first scan, in one pass."""
    scans: dict = {}
    for scan in plan.nodes:
        if scan.relation:
            scans.setdefault(f"{scan.schema}.{scan.relation}" if scan.schema else scan.relation, scan)
    return scans


def _relation(session: _Session, node, table: str, scans: dict) -> Relation:
    scan = node if node.relation and table in (node.relation, f"{node.schema}.{node.relation}") else scans.get(table)
    schema, name = (scan.schema, scan.relation) if scan is not None else (None, table)
    if schema is None and scan is None and "." in table:
        schema, name = table.split(".", 1)
    if schema is None:
        session.cur.execute("SET LOCAL search_path = " + ", ".join(
            ["pg_catalog", *(quote_ident(s) for s in session.schemas), "pg_temp"]))
    regclass = f"{quote_ident(schema)}.{quote_ident(name)}" if schema else quote_ident(name)
    row = session.one(RELATION_SQL, (regclass,))
    if row is None:
        raise ProbeError(f"table {printable(table, 120)} not found on this connection")
    oid, nspname, relname, relkind, reltuples, relpages, system = row
    if system:
        raise ProbeError(f"{printable(nspname + '.' + relname, 120)} is a system catalogue: planview "
                         "does not probe the server's own tables")
    if relkind not in ("r", "m", "p"):  # planning a foreign table may ask its remote server
        raise ProbeError(f"{printable(nspname + '.' + relname, 120)} is not a local table "
                         f"(relkind {relkind!r})")
    session.cur.execute(f"SET LOCAL search_path = pg_catalog, {quote_ident(nspname)}, pg_temp")
    alias = (scan.alias if scan is not None and scan.alias else None) or relname
    return Relation(int(oid), nspname, relname, alias, float(reltuples), int(relpages))


def _attributes(session: _Session, relation: Relation, names: list[str]) -> dict[str, tuple[str, bool]]:
    """Column name -> (type name, may the role SELECT it), for the columns that exist."""
    rows = session.run(ATTRIBUTES_SQL, (relation.oid, sorted(set(names)))).fetchall()
    return {name: (type_name, bool(allowed)) for name, type_name, allowed in rows}


def _qualifiers(relation: Relation, scan_alias: str | None) -> dict[str, str]:
    names = {relation.alias, relation.name}
    if scan_alias:
        names.add(scan_alias)
    return {name: relation.alias for name in names}


# ---- the probes -----------------------------------------------------------------------


def probe_finding(plan, finding, conn, *, budget: Budget, scans: dict | None = None) -> ProbeResult:
    node = plan.nodes[finding.node]
    evidence = finding.evidence or {}
    table = evidence.get("table")
    result = ProbeResult(node=node.id, cause=finding.cause)
    if not table:
        result.summary = "no single table to probe for this finding"
        return result
    clauses = [c for c in evidence.get("clauses", []) if c.get("source") in
               ("filter", "index_cond", "recheck_cond", "tid_cond")]
    with _read_only(conn, budget) as session:
        relation = _relation(session, node, table, scans if scans is not None else scans_by_table(plan))
        facts = session.one(TABLE_SQL, (relation.oid,))
        last_analyze, last_auto, modified, live = facts if facts else (None, None, None, None)
        analyzed = max([t for t in (last_analyze, last_auto) if t is not None], default=None)
        result.checks.append(ProbeCheck(
            "table statistics", _display(TABLE_SQL, (relation.oid,)),
            {"reltuples": relation.reltuples, "relpages": relation.relpages,
             "last_analyzed": str(analyzed) if analyzed else None,
             "modified_since_analyze": modified, "live_rows": live},
            f"{relation.label}: {relation.reltuples:,.0f} rows as last counted"
            + (f", analyzed {analyzed:%Y-%m-%d %H:%M}" if analyzed else ", never analyzed")
            + (f", {modified:,} rows changed since" if modified is not None else "") + "."))
        cause = finding.cause
        qualifiers = _qualifiers(relation, node.alias if node.relation else None)
        if cause == "correlation":
            _correlation(session, result, relation, clauses, node, qualifiers)
        elif cause in ("skew", "range_gap", "stale_statistics"):
            _column(session, result, relation, clauses, node, cause, modified, qualifiers)
        elif cause == "default_selectivity":
            result.summary = ("the clause wraps its column, and PostgreSQL keeps statistics on bare "
                              "columns (and on expressions only when told to): see the fix")
            _extended(session, result, relation)
    return result


def _extended(session: _Session, result: ProbeResult, relation: Relation) -> list:
    rows = session.run(EXTENDED_SQL, (relation.oid,)).fetchall()[:50]
    names = [printable(r[0], 63) for r in rows]
    result.checks.append(ProbeCheck(
        "extended statistics", _display(EXTENDED_SQL, (relation.oid,)),
        [{"name": name, "kinds": r[1]} for name, r in zip(names, rows)],
        f"{len(rows)} extended statistics object(s) on {relation.label}"
        + (": " + ", ".join(names) if names else "") + "."))
    return rows


def _estimate(session: _Session, relation: Relation, where_sql: str) -> tuple[str, float]:
    sql = f"EXPLAIN (FORMAT JSON) SELECT 1 FROM {relation.from_sql} WHERE {where_sql}"
    doc = session.one(sql)[0]
    doc = json.loads(doc) if isinstance(doc, str) else doc
    return sql, float(doc[0]["Plan"]["Plan Rows"])


def _readable(session, relation, rendered: RenderedClause) -> str | None:
    """Why the role may not plan this clause (a column missing or not SELECT-able), or None."""
    names = [name for _, name in rendered.columns]
    attributes = _attributes(session, relation, names)
    for name in names:
        if name not in attributes:
            return f"{relation.label} has no column {shown(name)}"
        if not attributes[name][1]:
            return f"this role may not SELECT {relation.label}.{printable(name, 63)}"
    return None


def _correlation(session, result, relation: Relation, clauses, node, qualifiers) -> None:
    usable: list[tuple[dict, RenderedClause]] = []
    for clause in clauses:
        try:
            rendered = render_clause(clause["text"], qualifiers=qualifiers)
        except UnsafeClause as exc:
            reason = str(exc)
        else:
            reason = _readable(session, relation, rendered)
            if reason is None:
                usable.append((clause, rendered))
                continue
        result.checks.append(ProbeCheck("clause not planned", "", {"clause": printable(clause["text"]),
                                                                  "reason": reason},
                                        f"{printable(clause['text'])} was not planned: {reason}."))
    reltuples = relation.reltuples
    if len(usable) < 2 or not reltuples or reltuples <= 0:
        result.summary = "fewer than two clauses could be planned alone safely"
        return
    singles = []
    for clause, rendered in usable:
        sql, estimate = _estimate(session, relation, rendered.sql)
        singles.append(estimate)
        text = printable(clause["text"])
        result.checks.append(ProbeCheck(
            "one clause alone", sql, {"clause": text, "estimate": estimate},
            f"{text} alone: {estimate:,.0f} rows estimated (selectivity {estimate / reltuples:.4g})."))
    together = " AND ".join(f"({rendered.sql})" for _, rendered in usable)
    sql, combined = _estimate(session, relation, together)
    product = reltuples * math.prod(s / reltuples for s in singles)
    actual = node.actual_rows if node.actual_rows is not None else None
    result.checks.append(ProbeCheck(
        "independence", sql,
        {"combined_estimate": combined, "product_of_selectivities": product, "actual_per_start": actual},
        f"Together: {combined:,.0f} rows estimated; the product of the single selectivities gives "
        f"{product:,.2f}" + (f"; the plan found {actual:,.0f}." if actual is not None else ".")))
    ext = _extended(session, result, relation)
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


def _column_clause(clauses, qualifiers) -> tuple[dict, str, list[str]] | None:
    """The first clause on a column: the clause, the column as PostgreSQL names it, its constants."""
    for clause in clauses:
        if not clause.get("columns"):
            continue
        try:
            rendered = render_clause(clause["text"], qualifiers=qualifiers)
        except UnsafeClause:
            constants = [str(c) for c in clause.get("constants") or []]
            return clause, str(clause["columns"][0]).split(".")[-1], constants
        return clause, rendered.columns[0][1], list(rendered.literals)
    return None


def _column(session, result, relation: Relation, clauses, node, cause, modified, qualifiers) -> None:
    found = _column_clause(clauses, qualifiers)
    if found is None:
        result.summary = "no column clause to probe"
        return
    clause, column, constants = found
    label = f"{relation.label}.{printable(column, 63)}"
    attributes = _attributes(session, relation, [column])
    if column not in attributes:
        result.summary = f"{relation.label} has no column {shown(column)}"
        return
    type_name, allowed = attributes[column]
    if not allowed:
        result.summary = f"this role may not SELECT {label}, so planview shows no statistics of it"
        return
    params = (relation.schema, relation.name, column)
    row = session.one(COLUMN_SQL, params)
    if row is None:
        result.checks.append(ProbeCheck("column statistics", _display(COLUMN_SQL, params), None,
                                        f"No statistics at all for {label}: never analyzed."))
        result.verdict = "supports" if cause == "stale_statistics" else "inconclusive"
        result.summary = f"{label} has no statistics"
        return
    null_frac, n_distinct, mcv, mcf, bounds = row
    mcv, mcf = mcv or [], mcf or []
    counts = (f"{label}: {len(mcv)} most-common values, "
              f"{len(bounds) - 1 if bounds else 0} histogram buckets, n_distinct {n_distinct:g}")
    if looks_secret(column, type_name):
        result.checks.append(ProbeCheck(
            "column statistics", _display(COLUMN_SQL, params),
            {"null_frac": null_frac, "n_distinct": n_distinct, "values": "withheld"},
            f"{counts}; its values are not shown, as its name or type marks it secret."))
        result.summary = f"{label} looks secret: its statistics are counted, not shown or compared"
        return
    result.checks.append(ProbeCheck(
        "column statistics", _display(COLUMN_SQL, params),
        {"null_frac": null_frac, "n_distinct": n_distinct, "most_common_vals": _capped(mcv),
         "most_common_freqs": mcf[:SHOWN_VALUES],
         "histogram_bounds": _capped(bounds[:3] + bounds[-3:]) if bounds and len(bounds) > 6 else _capped(bounds)},
        counts + "."))
    value = constants[0] if constants else None
    if cause == "skew":
        _skew(result, node, relation.reltuples, value, null_frac, n_distinct, mcv, mcf)
    elif cause == "range_gap":
        _range_gap(result, bounds, constants)
    else:
        _stale(result, bounds, value, modified)


def _skew(result, node, reltuples, value, null_frac, n_distinct, mcv, mcf) -> None:
    distinct = n_distinct if n_distinct > 0 else -n_distinct * (reltuples or 0)
    rest = max(distinct - len(mcv), 1)
    average = max(0.0, 1 - sum(mcf) - (null_frac or 0)) / rest
    listed = value is not None and value in mcv
    actual_sel = (node.actual_total or 0) / reltuples if reltuples else None
    says = (f"{shown(value)} is {'in' if listed else 'not in'} the most-common-values list; values not "
            f"listed are estimated at {average:.3g} each")
    if actual_sel is not None:
        says += f", and it really has {actual_sel:.3g}"
    result.checks.append(ProbeCheck("most-common values", "(from the column statistics)",
                                    {"value": shown(value), "listed": listed, "unlisted_frequency": average,
                                     "actual_selectivity": actual_sel}, says + "."))
    if value is not None and not listed and actual_sel is not None and \
            (actual_sel > 5 * average or actual_sel < average / 5):
        result.verdict = "supports"
        result.summary = says
    elif listed:
        result.verdict = "contradicts"
        result.summary = f"{shown(value)} is already a most-common value"
    else:
        result.summary = says


def _range_gap(result, bounds, constants) -> None:
    numbers = _array_floats(bounds)
    values = [float(c) for c in constants if _is_number(c)]
    if not numbers or not values:
        result.summary = "the histogram or the range is not numeric; compare them by eye above"
        return
    low, high = min(values), max(values)
    inside = [(a, b) for a, b in zip(numbers, numbers[1:]) if a <= low and high <= b]
    says = (f"the range {low:g}..{high:g} lies inside one histogram bucket "
            f"[{inside[0][0]:g}, {inside[0][1]:g}], which the planner assumes evenly filled"
            if inside else f"the range {low:g}..{high:g} spans several histogram buckets")
    result.checks.append(ProbeCheck("histogram", "(from the column statistics)",
                                    {"range": [low, high], "bucket": list(inside[0]) if inside else None},
                                    says + "."))
    result.verdict = "supports" if inside else "inconclusive"
    result.summary = says


def _stale(result, bounds, value, modified) -> None:
    top = bounds[-1] if bounds else None
    says = f"the histogram ends at {shown(top)}" if top is not None else "the column has no histogram"
    if value is not None and top is not None and _compare(value, top):
        says += f"; the query asks for values from {shown(value)}, above all the planner knows of"
        result.verdict = "supports"
    if modified:
        says += f"; {modified:,} rows changed since the last analyze"
        result.verdict = "supports"
    result.checks.append(ProbeCheck("histogram upper bound", "(from the column statistics)",
                                    {"upper_bound": shown(top) if top is not None else None,
                                     "value": shown(value) if value is not None else None,
                                     "modified_since_analyze": modified},
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
