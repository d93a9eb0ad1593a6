#!/usr/bin/env python3
"""Capture real DuckDB and MariaDB outputs of the planted-defect scenarios into plans/.

    python plans/capture_engines.py                       # both engines
    python plans/capture_engines.py --engines duckdb
    python plans/capture_engines.py --duckdb-site 0.10.3=/tmp/duck_0_10 --duckdb-site 1.1.3=/tmp/duck_1_1

DuckDB (the installed version, embedded; scenario in tests/duckdb_scenario.py) writes

    plans/duckdb/<case>.json            EXPLAIN (ANALYZE, FORMAT json)
    plans/duckdb/<case>.txt             EXPLAIN ANALYZE (box-drawn text)
    plans/duckdb/<case>.explain.txt     EXPLAIN (estimates only)
    plans/duckdb/v<version>/<case>.json PRAGMA enable_profiling='json' under another duckdb
    plans/duckdb/v<version>/<case>.txt  EXPLAIN ANALYZE under that version

``--duckdb-site VERSION=DIR`` runs an older duckdb installed with ``pip install --target DIR
duckdb==VERSION`` in a child process, so the legacy profile shapes are real outputs too.

MariaDB (a throw-away server from tests/mariadb_harness.py; scenario there) writes

    plans/mariadb/<case>.json           ANALYZE FORMAT=JSON
    plans/mariadb/<case>.txt            ANALYZE (the tabular output, as the client prints it)

Every statement explained is a read-only SELECT on the throw-away scenario. The numbers the
planted defects produce are written to plans/ENGINES.md by hand from these files.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

import duckdb_scenario  # noqa: E402


def _write(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text if text.endswith("\n") else text + "\n", encoding="utf-8")
    print(f"wrote {path.relative_to(HERE.parent)}")


def capture_duckdb(sites: list[str]) -> None:
    import duckdb

    out = HERE / "duckdb"
    con = duckdb_scenario.connect()
    for name, (query, _planted, _where) in duckdb_scenario.CASES.items():
        _write(out / f"{name}.json", duckdb_scenario.analyze_json(con, query))
        _write(out / f"{name}.txt", duckdb_scenario.analyze_text(con, query))
        _write(out / f"{name}.explain.txt", duckdb_scenario.explain_text(con, query))
    with tempfile.TemporaryDirectory() as tmp:
        name = "inherited_join"
        _write(out / f"{name}.pragma.json",
               duckdb_scenario.profile_json(con, duckdb_scenario.CASES[name][0], Path(tmp) / "p.json"))
    print(f"duckdb {duckdb.__version__}")
    for site in sites:
        version, _, folder = site.partition("=")
        result = duckdb_scenario.run_other_version(folder, list(duckdb_scenario.CASES))
        if result["version"] != version:
            raise SystemExit(f"{folder} holds duckdb {result['version']}, not {version}")
        for name, outputs in result["cases"].items():
            _write(out / f"v{version}" / f"{name}.json", outputs["json"])
            _write(out / f"v{version}" / f"{name}.txt", outputs["text"])


def capture_mariadb() -> None:
    import mariadb_harness as h

    out = HERE / "mariadb"
    with h.MariaDBServer() as server:
        h.build_scenario(server)
        for name, (query, _planted, _where) in h.CASES.items():
            _write(out / f"{name}.json", h.analyze_json(server, query))
            _write(out / f"{name}.txt", h.analyze_table(server, query))
        print(f"mariadb {server.version}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--engines", default="duckdb,mariadb")
    parser.add_argument("--duckdb-site", action="append", default=[],
                        help="VERSION=DIR of another duckdb installed with pip --target")
    args = parser.parse_args(argv)
    engines = {e.strip() for e in args.engines.split(",")}
    if "duckdb" in engines:
        capture_duckdb(args.duckdb_site)
    if "mariadb" in engines:
        capture_mariadb()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
