"""The proven fix: run planview's fix in a transaction, plan the statement again, roll back.

Opt-in (``session.prove(finding)``, ``--prove``). Before anything runs, `plan_of_action` says
what will run and what it locks: ANALYZE and CREATE STATISTICS take a SHARE UPDATE EXCLUSIVE
lock (reads and writes go on; VACUUM, other ANALYZEs and DDL on the table wait), ANALYZE reads
a sample of the table (I/O on a large one), ALTER TABLE ... SET STATISTICS takes the same lock
briefly. The fix runs on a temporary copy of the table (`WHY_A_COPY`): ANALYZE updates the row and
page counts in pg_class and the activity counters of the table it reads in place, which no
ROLLBACK undoes, and a copy made in the transaction takes them away with it. So the user's
table is only read (ACCESS SHARE), and the data, pg_class, pg_statistic, pg_statistic_ext and
its data, pg_attribute and the activity counters are as before. Then, in one transaction of its own (not read-only: the fix writes
the catalogue) with ``SET LOCAL statement_timeout`` and ``lock_timeout``:

1. plain ``EXPLAIN (FORMAT JSON)`` of the user's statement, the estimate before;
2. a temporary copy of the origin's table (same name, ``LIKE ... INCLUDING ALL``, its rows,
   its columns' statistics targets), and the fix's statements on it, each one of three kinds only (``CREATE STATISTICS``, ``ALTER TABLE
   ... ALTER COLUMN ... SET STATISTICS``, ``ANALYZE``), every name double-quoted as planview's
   fix generator wrote it, every table the origin's own (never VACUUM, which cannot run in a
   transaction block and is not needed);
3. ``EXPLAIN (VERBOSE, FORMAT JSON)`` again with ``pg_temp`` first in the search path (a
   statement naming the table with its schema cannot be proved this way, and says so), the
   estimate after, at the node matching the origin
   (`planview.fleet.compare`'s node matching: place, operator, relation);
4. ROLLBACK, always, in a ``finally``.

The user's statement is planned, never run (no EXPLAIN ANALYZE here), and is first checked:
a statement that writes is refused unless `allow_writes`, and even then only planned and
rolled back. It is sent with the extended query protocol, which the server refuses for more
than one statement.

>>> fix_statements('ANALYZE "public"."t";\\n-- a comment')[0]
[('analyze', 'ANALYZE "public"."t"')]
>>> fix_statements('ANALYZE "t"; DROP TABLE "t"')[2][:40]
'the fix holds a statement that is not CR'
"""

from __future__ import annotations

import json
import re
from typing import Any

from ..errors import ProbeError
from ..probe import Budget
from ..probe.postgresql import (
    _INTRANS,
    _message,
    _relation,
    _Session,
    _transaction_status,
    printable,
    scans_by_table,
)

LOCK_TIMEOUT_MS = 2000
NOT_PROVABLE = {
    "join_selectivity": "no statistic of one table changes a semi or anti join's share of matches",
    "filter_combination": "the engine's way of combining filters is not a statistic",
    "planner_guess": "the planner's built-in guess does not read statistics",
    "unexplained": "no cause was found, so there is no fix to prove",
    "not_diagnosed": "the origin was not diagnosed",
}

_IDENT = r'"(?:[^"\x00]|"")+"'
_NAME = rf"{_IDENT}(?:\.{_IDENT})?"
_KINDS = r"\((?:dependencies|ndistinct|mcv)(?:, (?:dependencies|ndistinct|mcv))*\)"
_STATEMENTS = {
    "analyze": re.compile(rf"ANALYZE (?P<table>{_NAME})(?: \({_IDENT}(?:, {_IDENT})*\))?"),
    "set_statistics": re.compile(
        rf"ALTER TABLE (?P<table>{_NAME}) ALTER COLUMN {_IDENT} SET STATISTICS \d{{1,5}}"),
    "create_statistics": re.compile(
        rf"CREATE STATISTICS IF NOT EXISTS {_NAME}(?: {_KINDS})?\s+ON (?P<on>.+?) FROM (?P<table>{_NAME})",
        re.S),
}
_LEFT_OUT = {
    "reloptions": (re.compile(rf"ALTER TABLE {_NAME} SET \((?:\s*autovacuum_analyze_(?:scale_factor|threshold)"
                              r" = [0-9.]+,?)+\s*\)"),
                   "changes when auto-analyze runs from now on, not this estimate"),
}
LOCKS = {
    "analyze": "ANALYZE takes a SHARE UPDATE EXCLUSIVE lock on the table (reads and writes go on; "
               "VACUUM, other ANALYZEs and DDL wait) and reads a sample of it: I/O on a large table",
    "set_statistics": "ALTER TABLE ... SET STATISTICS takes a SHARE UPDATE EXCLUSIVE lock briefly",
    "create_statistics": "CREATE STATISTICS takes a SHARE UPDATE EXCLUSIVE lock on the table",
}


WHY_A_COPY = (
    "the fix runs on a temporary copy of the table made inside the proof's transaction: ANALYZE "
    "writes a table's row and page counts into pg_class in place (vac_update_relstats, as VACUUM "
    "does) and updates its activity counters (pg_stat_user_tables), and no ROLLBACK undoes that; "
    "on a copy created in the same transaction both vanish with it")
PROOF_LOCKS = ("the proof itself reads the table as a SELECT does (ACCESS SHARE) to copy it into a "
               "temporary table: I/O and temporary space the size of the table; the fix's locks "
               "below are taken on the copy only")


def _split(text: str) -> list[str]:
    """The fix's statements without comments, split at semicolons outside quotes."""
    body = "\n".join(line for line in text.splitlines() if not line.lstrip().startswith("--"))
    out, current, quote = [], [], None
    for ch in body:
        if quote:
            quote = None if ch == quote else quote
        elif ch in "\"'":
            quote = ch
        elif ch == ";":
            out.append("".join(current).strip())
            current = []
            continue
        current.append(ch)
    out.append("".join(current).strip())
    return [s for s in out if s]


def fix_statements(fix: str) -> tuple[list[tuple[str, str]], list[dict], str | None]:
    """(kind, statement) for each statement a proof runs, those left out with the reason,
    and the refusal when the fix holds a statement of any other kind."""
    from ..engines.postgresql import safe_expression

    run: list[tuple[str, str]] = []
    left_out: list[dict] = []
    for statement in _split(fix or ""):
        flat = re.sub(r"\s+", " ", statement) if not statement.startswith("CREATE STATISTICS") else statement
        for kind, pattern in _STATEMENTS.items():
            match = pattern.fullmatch(flat)
            if match is None:
                continue
            if kind == "create_statistics" and not _safe_targets(match.group("on"), safe_expression):
                return [], [], "the fix's CREATE STATISTICS holds an expression planview did not write"
            run.append((kind, flat))
            break
        else:
            for pattern, why in _LEFT_OUT.values():
                if pattern.fullmatch(re.sub(r"\s+", " ", statement)):
                    left_out.append({"statement": printable(statement, 300), "why": why})
                    break
            else:
                return [], [], ("the fix holds a statement that is not CREATE STATISTICS, ALTER TABLE "
                                f"... SET STATISTICS or ANALYZE: {printable(statement, 120)}")
    return run, left_out, None


def _safe_targets(on: str, safe_expression) -> bool:
    """The ON list of CREATE STATISTICS: quoted columns, or expressions in brackets that
    planview's renderer writes back unchanged (a fixed point of `safe_expression`)."""
    if re.fullmatch(rf"{_IDENT}(?:, {_IDENT})+", on):
        return True
    items = re.fullmatch(r"\((.+)\)", on.strip())
    if items is None:
        return False
    parts = items.group(1).split("), (")
    return all(safe_expression(p) == p for p in parts)


def plan_of_action(plan, finding) -> dict:
    """What a proof of `finding`'s fix would run and lock, before anything runs."""
    cause = finding.cause
    if cause in NOT_PROVABLE:
        return {"provable": False, "why": NOT_PROVABLE[cause]}
    evidence = finding.evidence or {}
    if not finding.fix:
        return {"provable": False, "why": "the finding has no fix SQL"}
    run, left_out, refusal = fix_statements(finding.fix)
    if refusal:
        return {"provable": False, "why": refusal}
    if not run and cause == "correlation":
        return {"provable": False, "why": "a correlation across tables: extended statistics are per "
                                           "table, and the fix is a rewrite of the schema or the query"}
    if not run:
        return {"provable": False, "why": "the fix is a rewrite of the query or the schema (comments only), "
                                           "not a statistics change that can be tried and rolled back"}
    steps = ["BEGIN (a transaction of its own; it will be rolled back)",
             "SET LOCAL statement_timeout and lock_timeout",
             "EXPLAIN (FORMAT JSON) of the statement: plans it, does not run it",
             "CREATE TEMPORARY TABLE of the same name (LIKE the table INCLUDING ALL), filled with its rows",
             *(statement + ";  -- on the copy" for _, statement in run),
             "EXPLAIN (VERBOSE, FORMAT JSON) of the statement again, the copy first in the search path",
             "ROLLBACK: the data, the column and extended statistics and the catalogue are as before"]
    locks = [PROOF_LOCKS, *dict.fromkeys("when run for real: " + LOCKS[kind] for kind, _ in run)]
    kept: list[str] = []
    return {"provable": True, "fix": "\n".join(s + ";" for _, s in run), "statements": run,
            "left_out": left_out, "locks": locks, "steps": steps, "kept": kept,
            "table": evidence.get("table")}


# ---- the user's statement --------------------------------------------------------------


_WRITES = ("Insert", "Update", "Delete", "Merge", "Create", "Drop", "Alter", "Command", "Into",
           "Lock", "TruncateTable", "Copy", "Grant", "Set", "Use", "Commit", "Rollback", "Transaction")


def write_check(sql: str) -> str | None:
    """Why the statement may write (or cannot be vouched for), or None for a plain query.

    The live session's classification (planview/live/safety.py) decides where it is present;
    the minimal sqlglot classification below stands in where it is not."""
    from ..engines.postgresql import SQL_DIALECT

    try:
        from .safety import classify
    except ImportError:
        classify = None
    if classify is not None:
        verdict = classify(sql, SQL_DIALECT)
        return None if verdict.allowed and not verdict.writes else (verdict.reason or "it writes")
    import sqlglot
    from sqlglot import exp

    try:
        trees = [t for t in sqlglot.parse(sql, read=SQL_DIALECT) if t is not None]
    except Exception:
        return "the statement could not be parsed, so planview cannot vouch that it only reads"
    if len(trees) != 1:
        return "one statement only, please"
    tree = trees[0]
    if not isinstance(tree, (exp.Select, exp.Union, exp.Intersect, exp.Except, exp.Values)):
        return f"a {type(tree).__name__.upper()} statement changes data or the schema"
    for node in tree.walk():
        name = type(node).__name__
        if name in _WRITES:
            return f"the statement holds a {name.upper()} (a part that writes or locks rows)"
    return None


# ---- the proof -------------------------------------------------------------------------


def prove_finding(plan, finding, conn, sql: str, params=None, *, budget: Budget,
                  allow_writes: bool = False) -> dict:
    """Prove `finding`'s fix on `conn` for the statement `sql`; see the module's docstring.

    Sets ``finding.proof`` and returns {"fix", "est_before", "est_after", "actual", "plan_changed", "cost_before",
    "cost_after", "locks", "steps", ...} or {"provable": False, "why": ...}. Raises ProbeError
    with one line when the statement is refused or the server fails."""
    action = plan_of_action(plan, finding)
    if not action.get("provable"):
        return _attach(plan, finding, action)
    refusal = write_check(sql)
    if refusal and not allow_writes:
        raise ProbeError(f"not proved: {refusal}; planview plans only reading statements unless "
                         "writes are allowed (and even then it only plans them, and rolls back)")
    status = _transaction_status(conn)
    if status != 0:
        raise ProbeError("proving needs an idle connection outside any transaction "
                         + ("(this one is inside a transaction)" if status == _INTRANS else ""))
    previous_autocommit = getattr(conn, "autocommit", None)
    failure = None
    result: dict[str, Any] = {}
    cur = None
    try:
        if previous_autocommit is False:
            conn.autocommit = True
        cur = conn.cursor()
        cur.execute("BEGIN")
        cur.execute("SET LOCAL standard_conforming_strings = on")
        cur.execute(f"SET LOCAL lock_timeout = {int(min(budget.statement_ms, LOCK_TIMEOUT_MS))}")
        cur.execute(f"SET LOCAL statement_timeout = {int(budget.next_statement_ms())}")
        cur.execute("SELECT pg_catalog.current_setting('search_path')")
        user_path = cur.fetchone()[0]
        result = _run(cur, plan, finding, action, sql, params, budget, user_path)
    except ProbeError as exc:
        failure = str(exc)
    except Exception as exc:  # a server error: one clean line
        failure = f"proof failed: {_message(exc)}"
    finally:
        ended = None
        if cur is not None:
            try:
                cur.execute("ROLLBACK")
                cur.close()
            except Exception as exc:
                ended = f"proof could not roll back: {_message(exc)}"
        if previous_autocommit is False:
            try:
                conn.autocommit = False
            except Exception:
                pass
    failure = failure or ended
    if failure:
        raise ProbeError(failure)
    return _attach(plan, finding, result)


def _attach(plan, finding, result: dict) -> dict:
    """The proof goes on the finding (``proof`` in the report, a line in every view)."""
    finding.proof = {k: v for k, v in result.items() if k != "statements"}
    plan._report = None
    return result


def _run(cur, plan, finding, action, sql, params, budget, user_path) -> dict:
    session = _Session(cur, budget, [s.strip().strip('"') for s in user_path.split(",")
                                     if s.strip() and s.strip() != "$user"])
    node = plan.nodes[finding.node]
    relation = _relation(session, node, action["table"], scans_by_table(plan))
    for kind, statement in action["statements"]:
        table = _STATEMENTS[kind].fullmatch(statement).group("table")
        oid = session.one("SELECT pg_catalog.to_regclass(%s::pg_catalog.text)::pg_catalog.oid::pg_catalog.int8",
                          (table,))
        if not oid or oid[0] != relation.oid:
            raise ProbeError(f"not proved: the fix names {printable(table, 120)}, not the origin's "
                             f"table {relation.label}")
    before = _explain(session, sql, params, user_path)
    copy = _copy(session, relation)
    cur.execute("SET LOCAL search_path = pg_catalog, pg_temp")
    for kind, statement in action["statements"]:
        session.run(_on_copy(kind, statement, copy))
    # the copy, a temporary table of the same name, comes first for the statement's names
    after = _explain(session, sql, params, "pg_temp, " + user_path, verbose=True)
    return _compare(plan, finding, action, before, after)


def _copy(session: _Session, relation) -> str:
    """A temporary copy of the origin's table, made in the proof's transaction, so that the
    fix's ANALYZE writes nothing that outlives the ROLLBACK: ANALYZE updates pg_class and the
    activity counters of the table it reads in place, and those of a table created in this
    transaction vanish with it."""
    rows = session.run("""SELECT a.attname::pg_catalog.text FROM pg_catalog.pg_attribute a
        WHERE a.attrelid = %s::pg_catalog.oid AND a.attnum > 0 AND NOT a.attisdropped
          AND a.attgenerated = '' ORDER BY a.attnum""", (relation.oid,)).fetchall()
    columns = ", ".join(_quoted(r[0]) for r in rows)
    original = f"{_quoted(relation.schema)}.{_quoted(relation.name)}"
    copy = f"pg_temp.{_quoted(relation.name)}"
    session.run(f"CREATE TEMPORARY TABLE {_quoted(relation.name)} (LIKE {original} INCLUDING ALL)")
    session.run(f"INSERT INTO {copy} ({columns}) OVERRIDING SYSTEM VALUE SELECT {columns} FROM {original}")
    # the columns' statistics targets, as the original has them (LIKE does not copy them)
    targets = session.run("""SELECT a.attname::pg_catalog.text, a.attstattarget::pg_catalog.int4
        FROM pg_catalog.pg_attribute a WHERE a.attrelid = %s::pg_catalog.oid AND a.attnum > 0
          AND NOT a.attisdropped AND a.attstattarget IS NOT NULL AND a.attstattarget >= 0""",
                          (relation.oid,)).fetchall()
    for name, target in targets:
        session.run(f"ALTER TABLE {copy} ALTER COLUMN {_quoted(name)} SET STATISTICS {int(target)}")
    return copy


def _on_copy(kind: str, statement: str, copy: str) -> str:
    """The fix's statement aimed at the copy; a new statistics object goes with it into the
    session's temporary schema."""
    match = _STATEMENTS[kind].fullmatch(statement)
    start, end = match.span("table")
    statement = statement[:start] + copy + statement[end:]
    if kind == "create_statistics":
        head = re.match(rf"CREATE STATISTICS IF NOT EXISTS (?:{_IDENT}\.)?({_IDENT})(?=\s)", statement)
        if head is not None:
            statement = f"CREATE STATISTICS IF NOT EXISTS pg_temp.{head.group(1)}" + statement[head.end():]
    return statement


def _quoted(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _explain(session: _Session, sql: str, params, user_path: str, verbose: bool = False) -> str:
    # the user's statement resolves its names as the user's own session would
    session.cur.execute("SELECT pg_catalog.set_config('search_path', %s, true)", (user_path,))
    limit = session.budget.next_statement_ms()
    session.cur.execute(f"SET LOCAL statement_timeout = {int(limit)}")
    session.timeout_ms = limit
    # binary=True sends it with the extended query protocol: one statement, never two
    options = "VERBOSE, FORMAT JSON" if verbose else "FORMAT JSON"
    session.cur.execute(f"EXPLAIN ({options}) " + sql.strip().rstrip(";"), params, binary=True)
    doc = session.cur.fetchone()[0]
    if isinstance(doc, (bytes, bytearray, memoryview)):
        doc = bytes(doc).decode("utf-8")
    return doc if isinstance(doc, str) else json.dumps(doc)


def _compare(plan, finding, action, before_text: str, after_text: str) -> dict:
    import planview

    from ..fleet.compare import compare

    before_plan, after_plan = planview.load(before_text), planview.load(after_text)
    node = plan.nodes[finding.node]
    to_before = {m.before: m.after for m in compare(plan, before_plan).matches if m.before is not None}
    to_after = {m.before: m.after for m in compare(before_plan, after_plan).matches if m.before is not None}
    at_before = to_before.get(finding.node)
    at_after = to_after.get(at_before) if at_before is not None else None
    # the origin's per-start estimate, times what made its total (starts, parallel processes)
    scale = (node.est_total / node.est_rows) if node.est_rows else 1.0

    def estimate(p, i):
        return None if i is None or p.nodes[i].est_rows is None else p.nodes[i].est_rows * scale

    def cost(p):
        return p.nodes[p.statements[0].root].total_cost if p.statements else None

    if at_after is not None and not str(after_plan.nodes[at_after].schema or "pg_temp").startswith("pg_temp"):
        return {"provable": False, "why": "the statement names the table with its schema, so it cannot be "
                                           "planned against the proof's temporary copy"}
    est_before, est_after = estimate(before_plan, at_before), estimate(after_plan, at_after)
    actual = node.actual_total
    result = {"provable": True, "fix": action["fix"], "est_in_plan": node.est_total,
              "est_before": est_before, "est_after": est_after, "actual": actual,
              "plan_changed": _shape(before_plan) != _shape(after_plan),
              "cost_before": cost(before_plan), "cost_after": cost(after_plan),
              "locks": action["locks"], "steps": action["steps"], "left_out": action["left_out"],
              "kept": action["kept"],
              "node_found": at_after is not None}
    if actual is not None and est_after is not None:
        result["q_error_after"] = max(est_after, 1.0) / max(actual, 1.0) if est_after >= actual else \
            max(actual, 1.0) / max(est_after, 1.0)
    return result


def _shape(p) -> list:
    return [(n.operator, n.relation, n.parent) for n in p.nodes]
