"""What the statistics hold against what the data holds, for each origin of a PostgreSQL plan.

From the plan alone a cause is an inference. With a connection planview reads what the
optimizer had (``pg_class``, ``pg_stats``, ``pg_stat_user_tables``, the column's statistics
target) and measures the data with bounded queries: a value's frequency, the distinct count
of a column group, a range's count, its column's minimum and maximum. Everything runs in the
read-only probe's transaction (``planview.probe.postgresql._read_only``: READ ONLY, a
statement and a lock timeout, pinned settings, always rolled back), each origin in a savepoint
of its own so that one timed-out query costs only its origin. A table past the row budget is
read through ``TABLESAMPLE SYSTEM`` (whole pages, a fixed seed) and the counts are scaled.

Clauses reach SQL only as `clause_sql.render_clause` re-wrote them; names only through
`quote_ident`; values of columns that look secret are counted, never shown.

`apply(plan, measured)` attaches each result as ``finding.measured`` and lets the measurement
change the cause where the plan alone guessed wrong (a value that looks skewed but arrived
after the last ANALYZE is stale statistics), recomputing the fix through the engine.

>>> stale_share(modified=20_000, reltuples=50_000)
0.4
>>> group_far_below(group_distinct=1_000, product=40_000)
True
"""

from __future__ import annotations

import math
from typing import Any

from ..errors import ProbeError
from ..probe import Budget
from ..probe.clause_sql import UnsafeClause, quote_ident, render_clause
from ..probe.postgresql import (
    _compare,
    _message,
    _read_only,
    _Session,
    printable,
    scans_by_table,
    shown,
)
from .stats import TableStats, table_stats

ROW_BUDGET = 1_000_000
"""Past this many rows (as last counted) a table is measured through a sample."""
SAVEPOINT = "planview_measure"

STALE_SHARE = 0.1
"""Rows changed since the last ANALYZE, as a share of the rows it counted, from which the
statistics count as out of date: PostgreSQL's own default for auto-analyze
(autovacuum_analyze_scale_factor = 0.1, the manual's "Automatic Vacuuming")."""
FAR = 10.0
"""How far a measured figure must be from the statistics' to confirm a cause (rule of thumb:
the diagnosis' own threshold for an origin is ten times off)."""

_RESTRICTION_SOURCES = ("filter", "index_cond", "recheck_cond", "tid_cond")


def stale_share(modified: float | None, reltuples: float | None) -> float | None:
    """Rows changed since the last ANALYZE per row it counted."""
    if modified is None:
        return None
    return float(modified) / max(float(reltuples or 0.0), 1.0)


def group_far_below(group_distinct: float, product: float) -> bool:
    """A column group's distinct count far below the product of its columns' counts."""
    return group_distinct * FAR <= product


def distinct_count(n_distinct: float | None, reltuples: float) -> float | None:
    """pg_stats.n_distinct as a count (negative: a share of the rows; the manual, pg_stats)."""
    if n_distinct is None:
        return None
    return float(n_distinct) if n_distinct >= 0 else -float(n_distinct) * max(reltuples, 0.0)


# ---- measuring -------------------------------------------------------------------------


def measure_plan(plan, conn, *, budget: Budget, row_budget: int = ROW_BUDGET) -> dict[int, dict]:
    """Measure every origin of `plan` on `conn` (an idle psycopg connection), read-only.

    Returns origin node id -> {"fields", "says", "cause", "sampled"}. Raises ProbeError only
    when no transaction could be had at all; an origin that cannot be measured says why."""
    if plan.engine != "postgresql":
        raise ProbeError(f"no live measurement for {plan.engine} plans yet")
    scans = scans_by_table(plan)
    results: dict[int, dict] = {}
    with _read_only(conn, budget) as session:
        for finding in plan.findings:
            results[finding.node] = _in_savepoint(session, plan, finding, scans, row_budget)
    return results


def _in_savepoint(session: _Session, plan, finding, scans, row_budget) -> dict:
    cur = session.cur
    cur.execute(f"SAVEPOINT {SAVEPOINT}")
    try:
        result = _measure(session, plan, finding, scans, row_budget)
    except ProbeError as exc:
        result = _nothing(finding, f"not measured: {exc}")
    except Exception as exc:  # a server error (a timeout): this origin only
        result = _nothing(finding, f"not measured: {_message(exc)}")
    try:
        cur.execute(f"ROLLBACK TO SAVEPOINT {SAVEPOINT}")
        cur.execute(f"RELEASE SAVEPOINT {SAVEPOINT}")
    finally:
        session.timeout_ms = None  # SET LOCAL inside the savepoint was undone with it
    return result


def _nothing(finding, says: str) -> dict:
    return {"fields": {}, "says": says, "cause": finding.cause, "sampled": False}


class _Table:
    """What the optimizer had for one relation (`planview.live.stats`), and the FROM clause
    that reads it (whole, or a sample)."""

    def __init__(self, stats: TableStats, row_budget: int):
        self.stats = stats
        self.relation = relation = stats.relation
        self.modified = int(stats.modified_since_analyze) if stats.modified_since_analyze is not None else None
        self.live = int(stats.live_rows) if stats.live_rows is not None else None
        self.analyzed = max([t for t in (stats.last_analyze, stats.last_autoanalyze) if t is not None],
                            default=None)
        rows = max(relation.reltuples, float(self.live or 0))
        self.sampled = rows > row_budget
        self.percent = min(100.0, max(0.0001, 100.0 * row_budget / rows)) if self.sampled else 100.0
        sample = f" TABLESAMPLE SYSTEM ({self.percent:.6f}) REPEATABLE (0)" if self.sampled else ""
        self.from_sql = relation.from_sql + sample
        self.scale = 100.0 / self.percent

    def column(self, name: str):
        return self.stats.columns.get(name)

    def fields(self) -> dict:
        out = {"reltuples": self.relation.reltuples, "relpages": self.relation.relpages,
               "current_pages": self.stats.current_pages,
               "n_live_tup": self.live, "n_mod_since_analyze": self.modified,
               "modified_share": stale_share(self.modified, self.relation.reltuples),
               "last_analyzed": str(self.analyzed) if self.analyzed else None}
        if self.sampled:
            out["sample_percent"] = self.percent
        return out


def _measure(session: _Session, plan, finding, scans, row_budget) -> dict:
    node = plan.nodes[finding.node]
    evidence = finding.evidence or {}
    table_name = evidence.get("table")
    if not table_name:
        return _nothing(finding, "not measured: no single table for this origin")
    scan = node if node.relation else scans.get(table_name)
    name = scan.relation if scan is not None else table_name.split(".")[-1]
    alias = (scan.alias if scan is not None and scan.alias else None) or name
    # the qualifiers the clauses may use, all written as the alias the FROM clause gives
    clauses, refused = _rendered(evidence, {name: alias, alias: alias})
    columns = [c for c in evidence.get("columns") or [] if isinstance(c, str)]
    names = sorted({*columns, *(n for _, r in clauses for _, n in r.columns)})
    table = _Table(table_stats(session, node, names, scans=scans, table=table_name), row_budget)
    relation = table.relation
    attributes = table.stats.columns
    fields = table.fields()
    counts = _counts(session, table, clauses)
    fields.update(counts)
    if refused:
        fields["clauses_not_measured"] = refused
    cause = finding.cause
    says: list[str] = []
    new_cause = cause
    column_clause = _one_column_clause(clauses)
    if cause in ("skew", "stale_statistics") and column_clause is not None and \
            column_clause[1].columns and _is_equality(column_clause[0]):
        new_cause = _value(session, table, column_clause, attributes, fields, says, cause, node)
    elif cause == "range_gap" and column_clause is not None:
        _range(session, table, column_clause, attributes, fields, says)
    elif cause == "stale_statistics":
        _stale(session, table, column_clause, attributes, fields, says, node)
    joined = evidence.get("join_clauses") or []
    if cause == "correlation" and len(joined) >= 2 and len(evidence.get("tables") or []) == 2:
        _join(session, evidence, scans, node, row_budget, fields, says)
    elif cause == "correlation" or (len(columns) >= 2 and cause not in ("skew", "range_gap")):
        _group(session, table, columns, attributes, fields, says)
    if not says:
        says.append(_count_words(table, fields, node))
    if table.sampled:
        says.append(f"measured on a {table.percent:.3g}% sample of {relation.label} (whole pages, "
                    "scaled up): the counts are estimates")
    text = "; ".join(says)
    return {"fields": fields, "says": text + ".", "cause": new_cause,
            "sampled": table.sampled}


def _rendered(evidence, qualifiers) -> tuple[list[tuple[dict, Any]], list[dict]]:
    """The origin's restriction clauses on its own table, re-written by planview, and the ones
    refused (with the reason)."""
    usable, refused = [], []
    for clause in evidence.get("clauses") or []:
        if clause.get("source") not in _RESTRICTION_SOURCES:
            continue
        try:
            usable.append((clause, render_clause(str(clause.get("text", "")), qualifiers=qualifiers)))
        except UnsafeClause as exc:
            refused.append({"clause": printable(str(clause.get("text", ""))), "reason": str(exc)})
    return usable, refused


def _counts(session: _Session, table: _Table, clauses) -> dict:
    """The table's rows and the rows all the clauses keep, in one scan."""
    if clauses:
        where = " AND ".join(f"({r.sql})" for _, r in clauses)
        sql = (f"SELECT pg_catalog.count(*), pg_catalog.count(*) FILTER (WHERE {where}) "
               f"FROM {table.from_sql}")
        total, matching = session.one(sql)
    else:
        total, matching = session.one(f"SELECT pg_catalog.count(*) FROM {table.from_sql}")[0], None
    out = {"rows_counted": total * table.scale}
    if matching is not None:
        out["rows_matching"] = matching * table.scale
        out["measured_frequency"] = matching / total if total else None
    return out


def _one_column_clause(clauses):
    columns = {n for _, r in clauses for _, n in r.columns}
    if len(columns) != 1:
        return None
    return clauses[0]


def _is_equality(clause: dict) -> bool:
    return clause.get("op_class") in ("equality", "in_list")


def _column_stats(session: _Session, table: _Table, column: str) -> dict | None:
    """A column's statistics as the planner had them, or None when it has none (never analyzed)."""
    stats = table.column(column)
    if stats is None or not stats.analyzed:
        return None
    return {"null_frac": stats.null_frac or 0.0, "n_distinct": stats.n_distinct,
            "mcv": list(stats.most_common_vals or []), "mcf": list(stats.most_common_freqs or []),
            "bounds": list(stats.histogram_bounds or []), "target": stats.stats_target}


def _secret(attributes, column: str) -> bool:
    found = attributes.get(column)
    return True if found is None else bool(found.secret)


def _value(session, table: _Table, found, attributes, fields, says, cause, node) -> str:
    """An equality's value: listed or not, its frequency by the statistics and in the data;
    stale statistics when it is unknown to them and the table changed a lot since."""
    clause, rendered = found
    column = rendered.columns[0][1]
    secret = _secret(attributes, column)
    stats = _column_stats(session, table, column)
    label = f"{table.relation.label}.{printable(column, 63)}"
    if stats is None:
        fields["column_statistics"] = None
        says.append(f"{label} has no statistics at all (never analyzed)")
        return "stale_statistics"
    value = rendered.literals[0] if rendered.literals else None
    reltuples = table.relation.reltuples
    listed = value is not None and value in stats["mcv"]
    nd = distinct_count(stats["n_distinct"], reltuples) or 0.0
    rest = max(nd - len(stats["mcv"]), 1.0)
    unlisted = max(0.0, 1 - sum(stats["mcf"]) - stats["null_frac"]) / rest
    stats_frequency = stats["mcf"][stats["mcv"].index(value)] if listed else unlisted
    measured = fields.get("measured_frequency")
    bounds = stats["bounds"]
    beyond = bool(bounds) and value is not None and not listed and (
        _compare(value, bounds[-1]) or _compare(bounds[0], value))
    full = stats["target"] is not None and len(stats["mcv"]) >= stats["target"]
    share = fields.get("modified_share") or 0.0
    ratio = (measured / stats_frequency) if measured is not None and stats_frequency > 0 else None
    fields.update({"column": column, "listed": listed, "stats_frequency": stats_frequency,
                   "frequency_ratio": ratio, "n_distinct": stats["n_distinct"],
                   "mcv_count": len(stats["mcv"]), "statistics_target": stats["target"],
                   "mcv_list_full": full, "beyond_histogram": beyond})
    shown_value = "the value" if secret else shown(value)
    said = (f"{shown_value} is {'in' if listed else 'not in'} the most-common-values list of {label} "
            f"({len(stats['mcv'])} of at most {stats['target']} values); the statistics give it a "
            f"frequency of {stats_frequency:.3g}")
    if measured is not None:
        said += f", the data {measured:.3g}"
    says.append(said)
    if table.modified is not None:
        says.append(f"{table.modified:,} rows changed since the last ANALYZE "
                    f"({share:.0%} of the {reltuples:,.0f} it counted)")
    far_more = ratio is not None and ratio >= FAR
    if not listed and share >= STALE_SHARE and (beyond or far_more) and (not full or beyond):
        says.append("a value this common would be in the list had it been there when the "
                    "statistics were taken: it arrived after the last ANALYZE")
        fields["confirms"] = "stale_statistics"
        return "stale_statistics"
    if cause == "skew" and not listed and far_more:
        says.append("the statistics were up to date, and the list " + (
            "is full (its statistics target), so the value did not fit" if full else
            "missed the value"))
        fields["confirms"] = "skew"
    return cause


def _range(session, table: _Table, found, attributes, fields, says) -> None:
    """A range's rows in the data against the share the histogram gives it."""
    _clause, rendered = found
    column = rendered.columns[0][1]
    stats = _column_stats(session, table, column) or {}
    col = quote_ident(column)
    low, high = session.one(f"SELECT pg_catalog.min({col})::pg_catalog.text, "
                            f"pg_catalog.max({col})::pg_catalog.text FROM {table.from_sql}")
    secret = _secret(attributes, column)
    share = _histogram_share(stats.get("bounds") or [], *_range_ends(_clause, rendered.literals))
    reltuples = table.relation.reltuples
    matching = fields.get("rows_matching")
    fields.update({"column": column, "histogram_share": share,
                   "histogram_rows": share * reltuples if share is not None else None,
                   "min": None if secret else low, "max": None if secret else high})
    label = f"{table.relation.label}.{printable(column, 63)}"
    said = f"{label} holds values from {shown(low)} to {shown(high)}" if not secret else f"{label} is secret"
    if share is not None:
        said += (f"; the histogram gives the range {share:.3g} of the rows ({share * reltuples:,.0f}), "
                 f"the data holds {matching:,.0f}")
        if matching is not None and share * reltuples >= FAR * max(matching, 1.0) and share > 0:
            said += ": the range falls in a gap the histogram's buckets spread rows over"
            fields["confirms"] = "range_gap"
    says.append(said)


def _range_ends(clause: dict, literals) -> tuple[float | None, float | None]:
    """The range's lower and upper ends as numbers (None: open on that side, or not numeric)."""
    try:
        values = sorted(float(v) for v in literals)
    except (TypeError, ValueError):
        return None, None
    if not values:
        return None, None
    if len(values) >= 2:
        return values[0], values[-1]
    text = str(clause.get("text") or "")
    if "<" in text and ">" not in text:
        return -math.inf, values[0]
    if ">" in text and "<" not in text:
        return values[0], math.inf
    return None, None


def _histogram_share(bounds: list, low: float | None, high: float | None) -> float | None:
    """The share of the histogram's rows between `low` and `high`, by linear interpolation
    inside each bucket (PostgreSQL's ineq_histogram_selectivity, for numbers), without the
    most-common values' part.

    The manual's "Row Estimation Examples": tenk1.unique1's bounds, ``unique1 < 1000``:
    (1 + (1000 - 993) / (1997 - 993)) / 10 = 0.100697, 1007 of 10,000 rows.

    >>> bounds = [0, 993, 1997, 3050, 4040, 5036, 5957, 7057, 8029, 9016, 9995]
    >>> round(_histogram_share(bounds, -math.inf, 1000) * 10_000)
    1007
    """
    if low is None or high is None:
        return None
    try:
        edges = [float(b) for b in bounds]
    except (TypeError, ValueError):
        return None
    if len(edges) < 2:
        return None
    buckets = len(edges) - 1
    share = 0.0
    for a, b in zip(edges, edges[1:]):
        lo, hi = max(a, low), min(b, high)
        if hi > lo and b > a:
            share += (hi - lo) / (b - a) / buckets
    return share


def _stale(session, table: _Table, found, attributes, fields, says, node) -> None:
    """The rows the table holds against those last counted; an open range's rows past the
    histogram's upper bound."""
    counted = fields.get("rows_counted") or 0.0
    reltuples = table.relation.reltuples
    said = (f"{table.relation.label} holds {counted:,.0f} rows; the statistics counted "
            f"{reltuples:,.0f}")
    if table.modified is not None:
        said += (f", and {table.modified:,} changed since the last ANALYZE "
                 f"({fields.get('modified_share') or 0:.0%})")
    says.append(said)
    if found is not None:
        _clause, rendered = found
        column = rendered.columns[0][1]
        stats = _column_stats(session, table, column) or {}
        bounds = stats.get("bounds") or []
        col = quote_ident(column)
        top = session.one(f"SELECT pg_catalog.max({col})::pg_catalog.text FROM {table.from_sql}")[0]
        secret = _secret(attributes, column)
        fields.update({"column": column, "histogram_upper_bound": None if secret or not bounds else bounds[-1],
                       "max": None if secret else top})
        if bounds and top is not None and not secret:
            says.append(f"the histogram of {printable(column, 63)} ends at {shown(bounds[-1])}, "
                        f"the data reaches {shown(top)}")
    if (fields.get("modified_share") or 0) >= STALE_SHARE or \
            (reltuples > 0 and max(counted, 1) / max(reltuples, 1) >= 2) or \
            (reltuples > 0 and max(reltuples, 1) / max(counted, 1) >= 2):
        fields["confirms"] = "stale_statistics"


def _group(session, table: _Table, columns, attributes, fields, says) -> None:
    """The distinct count of the column group against the product of its columns' counts."""
    columns = [c for c in dict.fromkeys(columns) if c in attributes][:8]
    if len(columns) < 2:
        return
    cols = ", ".join(quote_ident(c) for c in columns)
    singles = ", ".join(f"pg_catalog.count(DISTINCT {quote_ident(c)})" for c in columns)
    row = session.one(f"SELECT (SELECT pg_catalog.count(*) FROM (SELECT DISTINCT {cols} "
                      f"FROM {table.from_sql}) g), {singles} FROM {table.from_sql}")
    group, measured_singles = float(row[0]), [float(v) for v in row[1:]]
    reltuples = table.relation.reltuples
    stats_nd, targets = [], []
    for column in columns:
        stats = _column_stats(session, table, column)
        stats_nd.append(distinct_count(stats["n_distinct"], reltuples) if stats else None)
        targets.append((stats or {}).get("target") or 0)
    known = [n if n is not None else m for n, m in zip(stats_nd, measured_singles)]
    product = min(math.prod(known), max(reltuples, fields.get("rows_counted") or 0.0))
    fields.update({"group_columns": columns, "group_distinct": group,
                   "columns_distinct": measured_singles, "stats_n_distinct": stats_nd,
                   "independent_group_distinct": product})
    names = ", ".join(printable(c, 63) for c in columns)
    said = (f"({names}) take {group:,.0f} distinct combinations in the data; independent columns "
            f"with the statistics' distinct counts ({', '.join(f'{k:,.0f}' for k in known)}) "
            f"would take up to {product:,.0f}")
    if group_far_below(group, product):
        said += ": the columns are correlated"
        fields["confirms"] = fields.get("confirms") or "correlation"
        # extended statistics take the largest of their columns' targets (CREATE STATISTICS
        # in the manual): an MCV list of that many combinations cannot hold a larger group
        target = max(targets) if targets else 0
        fields["statistics_target"] = target
        if target and group > target:
            fields["fix_details"] = {"statistics_kinds": ["dependencies", "ndistinct"]}
            said += (f"; an MCV list holds at most {target:,} of the {group:,.0f} combinations and "
                     "PostgreSQL would estimate the rest as independent, so the fix leaves it out "
                     "and relies on the functional dependency")
    says.append(said)


def _join(session, evidence, scans, node, row_budget, fields, says) -> None:
    """Two tables joined on several columns: the share of the rows the first join condition
    pairs that the others keep, against the share the planner gives them (about 1 / the larger
    distinct count of their columns, eqjoinsel without most-common values)."""
    from ..probe.postgresql import _relation

    tables = [str(t) for t in evidence["tables"]][:2]
    relations = [_relation(session, node, t, scans) for t in tables]
    if relations[0].alias == relations[1].alias:
        return
    qualifiers = {}
    for table, relation in zip(tables, relations):
        scan = scans.get(table)
        for name in (relation.alias, relation.name, scan.alias if scan is not None else None):
            if name:
                qualifiers[name] = relation.alias
    rendered = []
    for text in evidence["join_clauses"][:8]:
        try:
            rendered.append(render_clause(str(text), qualifiers=qualifiers))
        except UnsafeClause as exc:
            says.append(f"the join condition {printable(str(text))} is not measured: {exc}")
            return
    biggest = max(max(r.reltuples, 0.0) for r in relations)
    if biggest > row_budget:
        says.append("the tables are past the row budget, so the join is not measured")
        return
    first, rest = rendered[0].sql, " AND ".join(f"({r.sql})" for r in rendered[1:])
    paired, kept = session.one(
        f"SELECT pg_catalog.count(*), pg_catalog.count(*) FILTER (WHERE {rest}) "
        f"FROM {relations[0].from_sql} JOIN {relations[1].from_sql} ON ({first})")
    distinct = []
    for clause in rendered[1:]:
        for qualifier, column in clause.columns:
            relation = next(r for r in relations if r.alias == qualifier)
            row = session.one(f"SELECT pg_catalog.count(DISTINCT {quote_ident(column)}) FROM {relation.from_sql}")
            distinct.append(float(row[0] or 0))
    planned = 1.0 / max(max(distinct, default=1.0), 1.0)
    share = kept / paired if paired else None
    fields.update({"join_rows_first_condition": paired, "join_rows_all_conditions": kept,
                   "kept_share": share, "independent_share": planned,
                   "join_tables": [r.label for r in relations]})
    if share is None:
        says.append("the first join condition pairs no rows")
        return
    said = (f"of the {paired:,} pairs the join condition {printable(evidence['join_clauses'][0])} makes, the "
            f"other conditions keep {kept:,} ({share:.3g}); independent columns would keep about "
            f"{planned:.3g}")
    if share >= FAR * planned:
        said += ": the join columns are correlated across the tables"
        fields["confirms"] = "correlation"
    says.append(said)


def _count_words(table: _Table, fields, node) -> str:
    said = f"{table.relation.label} holds {fields.get('rows_counted') or 0:,.0f} rows"
    if fields.get("rows_matching") is not None:
        said += f", {fields['rows_matching']:,.0f} of them match the origin's conditions"
    if table.modified is not None:
        said += f"; {table.modified:,} changed since the last ANALYZE"
    return said


# ---- applying --------------------------------------------------------------------------


def apply(plan, measured: dict[int, dict]) -> None:
    """Attach each origin's measurement, and let it change the cause where the plan alone
    guessed wrong: the fix is then the engine's for the measured cause, and the old cause
    stays in `also` with a note."""
    from ..diagnose import fix_for, table_parts
    from ..diagnose.context import Candidate

    names = None
    for finding in plan.findings:
        result = measured.get(finding.node)
        if result is None:
            continue
        finding.measured = result
        new = result.get("cause")
        details = (result.get("fields") or {}).get("fix_details") or {}
        changed = bool(new) and new != finding.cause
        if not changed and not details:
            continue
        if names is None:
            names = table_parts(plan)
        old = finding.cause
        evidence = finding.evidence
        reason = "the live measurement: " + result["says"].rstrip(".")
        candidate = Candidate(cause=new or old, score=0.9, reason=reason, table=evidence.get("table"),
                              columns=list(evidence.get("columns") or []), details=dict(details))
        fix = fix_for(plan, candidate, names)
        if fix:
            finding.fix, finding.caution = fix
        elif changed:
            finding.fix, finding.caution = None, None
        if not changed:
            continue
        finding.also = [old, *(c for c in finding.also if c not in (old, new))]
        evidence.setdefault("also_fits", {})
        evidence["also_fits"][old] = (f"the plan alone pointed to {old.replace('_', ' ')} "
                                      f"({finding.confidence_reason}); the data measured on the "
                                      f"server points to {new.replace('_', ' ')}")
        evidence.setdefault("lines", []).append(f"Measured on the server: {result['says']}")
        finding.cause = new
        finding.confidence = 0.9
        finding.confidence_reason = reason
        finding.summary = f"{new.replace('_', ' ')}: measured on the server, {result['says'][0].lower()}{result['says'][1:]}"
    plan._report = None
