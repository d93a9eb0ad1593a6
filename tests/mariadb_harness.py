"""A throw-away MariaDB server for the tests and plans/capture_engines.py, and its scenario.

:class:`MariaDBServer` runs ``mariadb-install-db`` into a fresh temporary folder, starts
``mariadbd`` there on a Unix socket only (``--skip-networking``) and removes everything on
:meth:`MariaDBServer.stop`. Statements go through the ``mariadb`` client binary, so no
Python driver is needed. Every external step has a deadline; nothing here can hang.

The scenario, a bike-share's rental desk (schema, deterministic data, planted defects, one
read-only SELECT per case), is :data:`SETUP` and :data:`CASES` at the bottom.

pytest fixture: ``mariadb_server`` (module scope, scenario built). Where no MariaDB is
installed the fixture skips, except under ``CI=true``, where that is a failure.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import tempfile
import time
from pathlib import Path

INSTALL_TIMEOUT = 120
START_TIMEOUT = 60
STOP_TIMEOUT = 30
CLIENT_TIMEOUT = 120

BINARIES = ("mariadbd", "mariadb-install-db", "mariadb")


def _find(name: str) -> str | None:
    return shutil.which(name) or next(
        (str(p) for p in (Path("/usr/sbin") / name, Path("/usr/bin") / name) if p.exists()), None)


def available() -> str | None:
    """None when a server can be started here, else why not."""
    missing = [b for b in BINARIES if _find(b) is None]
    if missing:
        return "MariaDB is not installed (missing " + ", ".join(missing) + "; apt-get install mariadb-server)"
    return None


class MariaDBError(RuntimeError):
    pass


class MariaDBServer:
    """One mariadbd on a socket in a temporary folder, root without a password."""

    def __init__(self) -> None:
        self.folder = Path(tempfile.mkdtemp(prefix="planview-mariadb-"))
        self.datadir = self.folder / "data"
        self.socket = self.folder / "mariadb.sock"
        self.log = self.folder / "error.log"
        self.process: subprocess.Popen | None = None
        self.version: str | None = None

    # -- lifetime ------------------------------------------------------------------
    def start(self) -> MariaDBServer:
        why = available()
        if why:
            raise MariaDBError(why)
        user = ["--user=root"] if os.geteuid() == 0 else []
        install = subprocess.run(
            [_find("mariadb-install-db"), "--no-defaults", f"--datadir={self.datadir}",
             "--auth-root-authentication-method=normal", "--skip-test-db", *user],
            capture_output=True, text=True, timeout=INSTALL_TIMEOUT)
        if install.returncode != 0:
            raise MariaDBError(f"mariadb-install-db failed: {install.stderr[-2000:]}")
        self.process = subprocess.Popen(
            [_find("mariadbd"), "--no-defaults", f"--datadir={self.datadir}",
             f"--socket={self.socket}", "--skip-networking", f"--log-error={self.log}",
             f"--pid-file={self.folder / 'mariadbd.pid'}", "--innodb-buffer-pool-size=64M",
             "--skip-log-bin", *user],
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
        deadline = time.monotonic() + START_TIMEOUT
        while time.monotonic() < deadline:
            if self.process.poll() is not None:
                raise MariaDBError(f"mariadbd exited at start: {self._log_tail()}")
            if self.socket.exists():
                try:
                    self.version = self.query("SELECT VERSION()", timeout=10).strip()
                    return self
                except (MariaDBError, subprocess.TimeoutExpired):
                    pass
            time.sleep(0.2)
        self.stop()
        raise MariaDBError(f"mariadbd did not answer within {START_TIMEOUT} s: {self._log_tail()}")

    def stop(self) -> None:
        if self.process is not None and self.process.poll() is None:
            self.process.send_signal(signal.SIGTERM)
            try:
                self.process.wait(timeout=STOP_TIMEOUT)
            except subprocess.TimeoutExpired:
                self.process.kill()
                self.process.wait(timeout=STOP_TIMEOUT)
        self.process = None
        shutil.rmtree(self.folder, ignore_errors=True)

    def __enter__(self) -> MariaDBServer:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.stop()

    def _log_tail(self) -> str:
        try:
            return self.log.read_text(errors="replace")[-2000:]
        except OSError:
            return "(no error log)"

    # -- statements ----------------------------------------------------------------
    def _client(self, *options: str, sql: str, database: str | None, timeout: float) -> str:
        args = [_find("mariadb"), "--no-defaults", f"--socket={self.socket}", "-uroot", *options]
        if database:
            args.append(f"--database={database}")
        done = subprocess.run(args, input=sql, capture_output=True, text=True, timeout=timeout)
        if done.returncode != 0:
            raise MariaDBError(done.stderr.strip() or f"mariadb client exit {done.returncode}")
        return done.stdout

    def query(self, sql: str, database: str | None = None, timeout: float = CLIENT_TIMEOUT) -> str:
        """The result rows, tab-separated, no header, values unescaped (``-N -B --raw``)."""
        return self._client("-N", "-B", "--raw", sql=sql, database=database, timeout=timeout)

    def table(self, sql: str, database: str | None = None, timeout: float = CLIENT_TIMEOUT) -> str:
        """The result as the client draws it for a person (``--table``)."""
        return self._client("--table", sql=sql, database=database, timeout=timeout)

    def execute_script(self, sql: str, database: str | None = None, timeout: float = 600) -> None:
        self._client(sql=sql, database=database, timeout=timeout)


# ---------------------------------------------------------------------------------------
# The scenario: a bike-share's rental desk
# ---------------------------------------------------------------------------------------

DATABASE = "rentals"

SETUP = f"""
CREATE DATABASE {DATABASE};
USE {DATABASE};
SET SESSION max_recursive_iterations = 100000;
CREATE TABLE seq (n INT PRIMARY KEY) ENGINE=InnoDB;
INSERT INTO seq WITH RECURSIVE r(n) AS (SELECT 0 UNION ALL SELECT n + 1 FROM r WHERE n < 59999)
  SELECT n FROM r;
-- 300 kiosks: 15 in each of 20 neighbourhoods, 2 neighbourhoods to a borough (10 boroughs)
CREATE TABLE kiosks (
  kiosk_id INT PRIMARY KEY, neighbourhood INT NOT NULL, borough INT NOT NULL,
  opened_year INT NOT NULL, KEY k_neighbourhood (neighbourhood)) ENGINE=InnoDB;
INSERT INTO kiosks SELECT n, n DIV 15, n DIV 30, 2010 + n % 12 FROM seq WHERE n < 300;
-- 60,000 rentals.
--   kiosk_id:              skew: kiosk 42 (the central station) takes every other rental
--   neighbourhood,
--   borough:               correlated: both follow from kiosk_id (borough = neighbourhood DIV 2)
--   minutes:               a hole: 1..49 or 130..190 minutes, never 50..129
--   plan_code:             skew: 'day' for 1 in 2, the rest spread over 400 monthly codes
CREATE TABLE rentals (
  rental_id INT PRIMARY KEY, kiosk_id INT NOT NULL, neighbourhood INT NOT NULL,
  borough INT NOT NULL, minutes INT NOT NULL, plan_code VARCHAR(12) NOT NULL,
  rented_day INT NOT NULL,
  KEY r_kiosk (kiosk_id), KEY r_minutes (minutes)) ENGINE=InnoDB;
INSERT INTO rentals
  SELECT n,
         IF(n % 2 = 0, 42, (n * 7) % 300),
         IF(n % 2 = 0, 42, (n * 7) % 300) DIV 15,
         IF(n % 2 = 0, 42, (n * 7) % 300) DIV 30,
         IF(n % 3 = 0, 130 + n % 61, 1 + n % 49),
         IF(n % 2 = 1, 'day', CONCAT('m', n % 400)),
         n % 365
  FROM seq;
ANALYZE TABLE kiosks PERSISTENT FOR ALL;
ANALYZE TABLE rentals PERSISTENT FOR ALL;
"""

# case -> (query, what is planted, the operator where it shows)
CASES: dict[str, tuple[str, str, str]] = {
    "correlated": (
        "SELECT count(*) FROM rentals WHERE neighbourhood = 11 AND borough = 5",
        "correlated columns: neighbourhood 11 lies in borough 5; the optimizer multiplies the "
        "two histograms' selectivities as if they were independent",
        "ALL on rentals (attached_condition)",
    ),
    "range_gap": (
        "SELECT count(*) FROM rentals IGNORE INDEX (r_minutes) WHERE minutes BETWEEN 50 AND 129",
        "a hole in a range: no rental lasts 50..129 minutes; the histogram bucket that spans "
        "the hole promises rows",
        "ALL on rentals (attached_condition)",
    ),
    "skewed_value": (
        "SELECT count(*) FROM rentals IGNORE INDEX (r_kiosk) WHERE plan_code = 'day'",
        "a heavy value: half the rentals have plan_code 'day' (the histogram sees it: a check "
        "that a well-estimated plan has no origin)",
        "ALL on rentals",
    ),
    "skewed_ref": (
        "SELECT count(*) FROM kiosks k STRAIGHT_JOIN rentals r ON r.kiosk_id = k.kiosk_id "
        "WHERE k.kiosk_id IN (41, 42, 43)",
        "skew on a join key: the ref lookup on rentals.kiosk_id is estimated from the average "
        "rows per key, and kiosk 42 has half the table",
        "ref on r (r_kiosk)",
    ),
    "inherited_join": (
        "SELECT k.opened_year, count(*) FROM rentals r STRAIGHT_JOIN kiosks k "
        "ON k.kiosk_id = r.kiosk_id WHERE r.neighbourhood = 11 AND r.borough = 5 "
        "GROUP BY k.opened_year",
        "an inherited error: the correlated filter's underestimate on rentals passes through "
        "the eq_ref join on kiosks",
        "ALL on r (origin); the nested loop inherits",
    ),
    "join_without_index": (
        "SELECT count(*) FROM kiosks k STRAIGHT_JOIN rentals r "
        "ON k.opened_year = r.rented_day + 1700 WHERE k.borough = 3",
        "a join condition no index serves (block nested loop): the optimizer gives it no "
        "selectivity at all",
        "block-nl-join (origin)",
    ),
}


def build_scenario(server: MariaDBServer) -> None:
    server.execute_script(SETUP)


def analyze_json(server: MariaDBServer, query: str) -> str:
    """ANALYZE FORMAT=JSON: runs the SELECT and returns MariaDB's JSON, unchanged."""
    out = server.query(f"ANALYZE FORMAT=JSON {query}", database=DATABASE)
    return out.rstrip("\n")


def analyze_table(server: MariaDBServer, query: str) -> str:
    """ANALYZE: the tabular output, as the mariadb client draws it."""
    return server.table(f"ANALYZE {query}", database=DATABASE).rstrip("\n")


def real_count(server: MariaDBServer, sql_from_where: str) -> int:
    return int(server.query(f"SELECT count(*) {sql_from_where}", database=DATABASE).strip())


# ---------------------------------------------------------------------------------------
# pytest fixture
# ---------------------------------------------------------------------------------------

try:
    import pytest
except ImportError:  # the capture script does not need pytest
    pytest = None

if pytest is not None:

    @pytest.fixture(scope="module")
    def mariadb_server():
        why = available()
        if why:
            if os.environ.get("CI") == "true":
                pytest.fail(f"CI needs MariaDB: {why}")
            pytest.skip(why)
        server = MariaDBServer()
        try:
            server.start()
            build_scenario(server)
        except Exception:
            server.stop()
            raise
        try:
            yield server
        finally:
            server.stop()
