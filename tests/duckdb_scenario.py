"""A city bike-share in DuckDB with planted defects, for the tests and plans/capture_engines.py.

Everything is built from ``range()`` and arithmetic, so every run holds the same rows.
Each case is one read-only SELECT; its planted defect and where it should show are said
beside it. What DuckDB really estimates was measured with duckdb 2.0.1 (plans/ENGINES.md).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

SETUP = """
-- 400 docking stations: 20 in each of 20 districts, 4 districts to a zone (5 zones)
CREATE TABLE stations AS
  SELECT s AS station_id, s // 20 AS district, s // 80 AS zone, 10 + s % 30 AS docks
  FROM range(400) r(s);
-- 5,000 bikes, every tenth one is a cargo bike
CREATE TABLE bikes AS
  SELECT b AS bike_id, CASE WHEN b % 10 = 0 THEN 'cargo' ELSE 'city' END AS model,
         2015 + b % 10 AS built_year
  FROM range(5000) r(b);
-- 300,000 trips.
--   bike_id:        skew: bike 7 (the depot's test bike) takes every other trip
--   start_district,
--   start_zone:     correlated: both follow from start_station (zone = district // 4)
--   duration_min:   a hole: 1..59 minutes or 120..180 minutes, never 60..119
CREATE TABLE trips AS
  SELECT i AS trip_id,
         CASE WHEN i % 2 = 0 THEN 7 ELSE i % 5000 END AS bike_id,
         (i * 7) % 400 AS start_station,
         ((i * 7) % 400) // 20 AS start_district,
         ((i * 7) % 400) // 80 AS start_zone,
         (i * 13) % 400 AS end_station,
         CASE WHEN i % 3 = 0 THEN 120 + i % 61 ELSE 1 + i % 59 END AS duration_min,
         i % 365 AS start_day
  FROM range(300000) r(i);
"""

# case -> (query, what is planted, the operator where it shows)
CASES: dict[str, tuple[str, str, str]] = {
    "skewed_bike": (
        "SELECT count(*) FROM trips WHERE bike_id = 7",
        "skew: bike 7 has half the trips; DuckDB estimates an equality from the distinct count",
        "SEQ_SCAN trips",
    ),
    "range_gap": (
        "SELECT count(*) FROM trips WHERE duration_min BETWEEN 60 AND 119",
        "a hole in a range: no trip lasts 60..119 minutes, min/max cannot see it",
        "SEQ_SCAN trips",
    ),
    "correlated_consistent": (
        "SELECT count(*) FROM trips WHERE start_district = 13 AND start_zone = 3",
        "correlated columns, a combination that exists (district 13 is in zone 3)",
        "SEQ_SCAN trips",
    ),
    "correlated_contradiction": (
        "SELECT count(*) FROM trips WHERE start_district = 13 AND start_zone = 2",
        "correlated columns, a combination that never occurs (district 13 is not in zone 2)",
        "SEQ_SCAN trips",
    ),
    "inherited_join": (
        "SELECT b.model, count(*) FROM trips t JOIN bikes b ON b.bike_id = t.bike_id "
        "WHERE t.bike_id = 7 GROUP BY b.model",
        "an inherited error: the skewed scan's underestimate passes through the join",
        "SEQ_SCAN trips (origin); HASH_JOIN inherits",
    ),
    "dynamic_filter_join": (
        "SELECT count(*) FROM trips t JOIN stations s ON s.station_id = t.end_station "
        "WHERE t.bike_id = 7 AND s.district = 3",
        "skew under a join that pushes a run-time filter into its probe side",
        "SEQ_SCAN trips (origin); the join's own share is not separable",
    ),
}


def connect():
    import duckdb

    con = duckdb.connect()
    for statement in SETUP.split(";"):
        if statement.strip():
            con.execute(statement)
    return con


def analyze_json(con, query: str) -> str:
    """EXPLAIN (ANALYZE, FORMAT json): DuckDB's JSON profile of one run, as DuckDB writes it."""
    return con.execute(f"EXPLAIN (ANALYZE, FORMAT json) {query}").fetchall()[0][1]


def analyze_text(con, query: str) -> str:
    """EXPLAIN ANALYZE: the box-drawn rendering (actual rows only in 1.1 and later)."""
    return con.execute(f"EXPLAIN ANALYZE {query}").fetchall()[0][1]


def explain_text(con, query: str) -> str:
    """EXPLAIN: the box-drawn rendering of the estimates alone."""
    return con.execute(f"EXPLAIN {query}").fetchall()[0][1]


def profile_json(con, query: str, path: str | os.PathLike) -> str:
    """PRAGMA enable_profiling='json': the profile written to a file by a plain run."""
    con.execute("PRAGMA enable_profiling='json'")
    con.execute(f"PRAGMA profiling_output='{Path(path).as_posix()}'")
    try:
        con.execute(query).fetchall()
    finally:
        con.execute("PRAGMA disable_profiling")
    return Path(path).read_text(encoding="utf-8")


_OTHER_VERSION_SCRIPT = r"""
import json, sys, tempfile, os
sys.path.insert(0, sys.argv[1])
import duckdb
sys.path.insert(0, sys.argv[2])
import duckdb_scenario as s
out = {"version": duckdb.__version__, "cases": {}}
for name in sys.argv[3].split(","):
    query = s.CASES[name][0]
    con = s.connect()
    path = os.path.join(tempfile.mkdtemp(), "profile.json")
    out["cases"][name] = {"json": s.profile_json(con, query, path),
                          "text": s.connect().execute("EXPLAIN ANALYZE " + query).fetchall()[0][1]}
print(json.dumps(out))
"""


def run_other_version(site_dir: str, cases: list[str], timeout: float = 300) -> dict:
    """Run the scenario under another duckdb build installed in `site_dir` (pip --target)."""
    here = str(Path(__file__).resolve().parent)
    done = subprocess.run([sys.executable, "-c", _OTHER_VERSION_SCRIPT, site_dir, here, ",".join(cases)],
                          capture_output=True, text=True, timeout=timeout, check=True)
    return json.loads(done.stdout)
