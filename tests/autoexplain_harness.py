"""Real server logs with auto_explain output, made by a throw-away PostgreSQL (tests/pgharness.py).

The server loads auto_explain for every session (``session_preload_libraries``) and logs every
plan with ``log_analyze``; the workload runs under two ``log_line_prefix`` values, switches
``auto_explain.log_format`` between text and JSON statement by statement, and makes real noise
lines between the entries (``log_statement = 'all'``, a failing statement, a NOTICE).

The independent counts the tests check against come from outside planview: how many plannable
statements the workload ran, and how many operators PostgreSQL's own ``EXPLAIN (FORMAT JSON)``
shows for each (walked here with the json module, with auto_explain off in that session).
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass, field
from pathlib import Path

from pgharness import PgServer

AUTO_EXPLAIN_CONF = {
    "session_preload_libraries": "'auto_explain'",
    "auto_explain.log_min_duration": "0",
    "auto_explain.log_analyze": "on",
    "auto_explain.log_timing": "on",
    "log_min_messages": "info",
}

PREFIXES = ("%m [%p] %q%u@%d ", "%n:pid=%p:app=%a:%e: ")
"""Two log_line_prefix values: the packaged default with user and database, and one with a
Unix-epoch stamp and labelled fields."""

SETUP = """
DROP TABLE IF EXISTS visits, pets;
CREATE TABLE pets (id int PRIMARY KEY, species text, breed text, town text, postcode text);
INSERT INTO pets SELECT i,
   CASE WHEN i % 4 = 0 THEN 'cat' ELSE 'dog' END,
   'breed' || (i % 40),
   'town' || (i % 50),
   'pc' || (i % 50)
 FROM generate_series(1, 20000) i;
CREATE TABLE visits (id int PRIMARY KEY, pet_id int, fee int, kind text);
INSERT INTO visits SELECT i, 1 + (i * 7) % 20000, (i * 13) % 500, CASE WHEN i % 3 = 0 THEN 'check' ELSE 'care' END
 FROM generate_series(1, 60000) i;
CREATE INDEX ON visits (pet_id);
ANALYZE pets; ANALYZE visits;
"""
"""town and postcode go together (the same i % 50): the planner, without extended statistics,
multiplies their selectivities and underestimates every query filtering on both."""


def workload(round_no: int) -> list[str]:
    """Plannable statements; the same shapes come back with other constants."""
    statements = []
    for k in range(4):
        town = (round_no * 7 + k) % 50
        statements += [
            f"SELECT count(*) FROM pets WHERE town = 'town{town}' AND postcode = 'pc{town}'",
            f"SELECT p.species, count(*) FROM pets p JOIN visits v ON v.pet_id = p.id "
            f"WHERE p.town = 'town{town}' AND p.postcode = 'pc{town}' GROUP BY p.species",
            f"SELECT * FROM visits WHERE fee < {10 + k} ORDER BY fee LIMIT 5",
            f"SELECT v.kind, sum(v.fee)\n  FROM visits v\n WHERE v.pet_id IN "
            f"(SELECT id FROM pets WHERE breed = 'breed{k}')\n GROUP BY v.kind",
        ]
    return statements


SHAPE_SETTING = "SET enable_nestloop = off"
"""Set in the second round before the join: the same query planned another way by the engine."""


def shape_of(plan_json: list) -> tuple:
    """Each operator's node type and relation, in pre-order, from PostgreSQL's own JSON."""
    out = []
    todo = [doc["Plan"] for doc in reversed(plan_json)]
    while todo:
        node = todo.pop()
        out.append((node["Node Type"], node.get("Relation Name")))
        todo.extend(reversed(node.get("Plans", [])))
    return tuple(out)


def _settings_for(round_no: int, i: int) -> list[str]:
    return [SHAPE_SETTING] if round_no == 1 and i % 4 == 1 else []


def count_operators(plan_json: list) -> int:
    """Operators in PostgreSQL's own EXPLAIN (FORMAT JSON) output, counted here."""
    count = 0
    todo = [doc["Plan"] for doc in plan_json]
    while todo:
        node = todo.pop()
        count += 1
        todo.extend(node.get("Plans", []))
    return count


@dataclass
class CapturedLog:
    path: Path
    version: int
    statements: int = 0
    text_entries: int = 0
    json_entries: int = 0
    operators: int = 0
    operators_per_statement: list[int] = field(default_factory=list)
    templates: list[int] = field(default_factory=list)        # which of the 4 statement shapes
    engine_shapes: list[tuple] = field(default_factory=list)  # from EXPLAIN (FORMAT JSON)
    sql: list[str] = field(default_factory=list)
    copies: dict[str, Path] = field(default_factory=dict)  # log kind -> the captured part of it


class AutoExplainServer(PgServer):
    """A PgServer whose postgresql.conf loads auto_explain for every session."""

    def _append_conf(self, text: str) -> None:
        super()._append_conf(text + "".join(f"{k} = {v}\n" for k, v in AUTO_EXPLAIN_CONF.items()))


class CollectorServer(AutoExplainServer):
    """An AutoExplainServer whose logging collector writes every message three ways at once:
    a stderr-style log, a csvlog and a jsonlog (``log_destination = 'stderr,csvlog,jsonlog'``,
    PostgreSQL 15+ for jsonlog). `logfile` is moved to the collector's stderr file once started,
    so `capture` reads it as it reads the plain server's."""

    COLLECTOR_CONF = {
        "logging_collector": "on",
        "log_destination": "'stderr,csvlog,jsonlog'",
        "log_directory": "'pvlog'",
        "log_filename": "'server.log'",
        "log_rotation_age": "0",
        "log_rotation_size": "0",
    }

    def _append_conf(self, text: str) -> None:
        super()._append_conf(text + "".join(f"{k} = {v}\n" for k, v in self.COLLECTOR_CONF.items()))

    def start(self):
        super().start()
        folder = self.datadir / "pvlog"
        self.destinations = {"stderr": folder / "server.log", "csvlog": folder / "server.csv",
                             "jsonlog": folder / "server.json"}
        self.logfile = self.destinations["stderr"]
        return self


def _wait_for_log(server: PgServer) -> None:
    """Until the server's log files stop growing (the collector writes them a moment later)."""
    files = list(getattr(server, "destinations", {"stderr": server.logfile}).values())
    last = None
    for _ in range(50):
        time.sleep(0.2)
        sizes = [f.stat().st_size if f.exists() else -1 for f in files]
        if sizes == last:
            return
        last = sizes


def capture(server: PgServer, out: Path) -> CapturedLog:
    """Run the workload under both prefixes and both formats; copy the log's new part to `out`."""
    db = "aelog"
    with server.connect(autocommit=True) as conn:
        conn.execute(f"DROP DATABASE IF EXISTS {db}")
        conn.execute(f"CREATE DATABASE {db}")
    with server.connect(db, autocommit=True) as conn:
        conn.execute("SET auto_explain.log_min_duration = -1")
        for stmt in SETUP.split(";"):
            if stmt.strip():
                conn.execute(stmt)
    captured = CapturedLog(path=out, version=server.version)
    # the independent operator counts: PostgreSQL's own JSON, auto_explain off in this session
    shapes = {}
    with server.connect(db, autocommit=True) as conn:
        conn.execute("SET auto_explain.log_min_duration = -1")
        for round_no in range(len(PREFIXES)):
            for i, sql in enumerate(workload(round_no)):
                for setting in _settings_for(round_no, i):
                    conn.execute(setting)
                (doc,), = conn.execute(f"EXPLAIN (FORMAT JSON) {sql}").fetchall()
                doc = doc if isinstance(doc, list) else json.loads(doc)
                shapes[sql] = (count_operators(doc), shape_of(doc))
                conn.execute("RESET ALL")
                conn.execute("SET auto_explain.log_min_duration = -1")
    _wait_for_log(server)
    logs = getattr(server, "destinations", {"stderr": server.logfile})
    starts = {kind: f.stat().st_size for kind, f in logs.items()}
    for round_no, prefix in enumerate(PREFIXES):
        with server.connect(autocommit=True) as conn:
            conn.execute("SET auto_explain.log_min_duration = -1")
            conn.execute(f"ALTER SYSTEM SET log_line_prefix = '{prefix}'")
            conn.execute("ALTER SYSTEM SET log_statement = 'all'")
            conn.execute("SELECT pg_reload_conf()")
        time.sleep(0.5)
        with server.connect(db, autocommit=True) as conn:
            for i, sql in enumerate(workload(round_no)):
                fmt = "json" if i % 3 else "text"
                conn.execute(f"SET auto_explain.log_format = {fmt}")
                for setting in _settings_for(round_no, i):
                    conn.execute(setting)
                conn.execute(sql).fetchall()
                if _settings_for(round_no, i):
                    conn.execute("RESET enable_nestloop")
                captured.statements += 1
                captured.sql.append(sql)
                captured.templates.append(i % 4)
                captured.operators_per_statement.append(shapes[sql][0])
                captured.engine_shapes.append(shapes[sql][1])
                captured.operators += shapes[sql][0]
                if fmt == "json":
                    captured.json_entries += 1
                else:
                    captured.text_entries += 1
                if i == 3:  # noise: an error with its STATEMENT line, and a NOTICE
                    try:
                        conn.execute("DO $$ BEGIN RAISE NOTICE 'clinic maintenance at noon'; END $$")
                        conn.execute("SELECT 1 / (SELECT count(*) - count(*) FROM pets WHERE false)")
                    except Exception:
                        pass
    with server.connect(autocommit=True) as conn:
        conn.execute("SET auto_explain.log_min_duration = -1")
        conn.execute("ALTER SYSTEM RESET log_line_prefix")
        conn.execute("ALTER SYSTEM RESET log_statement")
        conn.execute("SELECT pg_reload_conf()")
    _wait_for_log(server)
    for kind, path in logs.items():
        target = out if kind == "stderr" else out.with_suffix({"csvlog": ".csv", "jsonlog": ".json"}[kind])
        with open(path, "rb") as src:
            src.seek(starts[kind])
            target.write_bytes(src.read())
        captured.copies[kind] = target
    return captured
