#!/usr/bin/env python3
"""Capture real PostgreSQL plans of the planted-defect scenario.

    python plans/capture_postgresql.py                 # every available source
    python plans/capture_postgresql.py --sources debian --cases correlated,limit

For each server source (see tests/pgharness.py) this starts a throw-away
cluster, builds the scenario, EXPLAINs every case and writes

    plans/postgresql/pg<major>/<case>.text.txt   TEXT, as the server sends it
    plans/postgresql/pg<major>/<case>.json       JSON
    plans/postgresql/pg<major>/<case>.xml        XML
    plans/postgresql/pg<major>/<case>.yaml       YAML
    plans/postgresql/pg<major>/<case>.psql.txt       TEXT through the psql client
    plans/postgresql/pg<major>/<case>.psql.json.txt  JSON through the psql client
    plans/postgresql/pg<major>/multi.array.json  both multi plans in one JSON array

Every server-output file is the output exactly as returned (rows of the
``QUERY PLAN`` column joined with newlines) plus one final newline; the psql
files are psql's stdout unchanged.  It also writes ``scenario.sql``,
``manifest.json`` (options, settings and the measured planted numbers per file)
and refreshes the generated blocks of ``plans/README.md``.  Every statement
runs in a transaction that is rolled back; only the scenario set-up writes,
and only in its own throw-away cluster.
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

import pgharness as h  # noqa: E402

OUT = HERE / "postgresql"
README = HERE / "README.md"
EXT = {"text": "text.txt", "json": "json", "xml": "xml", "yaml": "yaml"}


def capture_source(source: str, cases, out_root: Path) -> dict:
    t0 = time.monotonic()
    with h.PgServer(source) as srv:
        started = time.monotonic() - t0
        scen = h.build_scenario(srv)
        outdir = out_root / f"pg{srv.version}"
        outdir.mkdir(parents=True, exist_ok=True)
        info = {
            "source": source,
            "server_version": srv.version_string,
            "server_version_num": srv.version_num,
            "start_seconds": round(started, 2),
            "build_seconds": round(scen.build_seconds, 2),
            "cases": {},
        }
        t1 = time.monotonic()
        for case in cases:
            files = {}
            outputs = {}
            for fmt, ext in EXT.items():
                outputs[fmt] = scen.explain_case(case.name, fmt)
                files[fmt] = _write(outdir / f"{case.name}.{ext}", outputs[fmt] + "\n")
            if len(case.sql) > 1:
                merged = scen.explain_case(case.name, "json", as_one_array=True)
                files["json_one_array"] = _write(outdir / f"{case.name}.array.json", merged + "\n")
            files["psql_text"] = _write(outdir / f"{case.name}.psql.txt", scen.psql_case(case.name, "text"))
            files["psql_json"] = _write(outdir / f"{case.name}.psql.json.txt", scen.psql_case(case.name, "json"))
            entry = {
                "statements": list(case.sql),
                "what": case.what,
                "explain_options": list(case.options),
                "settings": dict(case.settings),
                "files": {k: str(Path(v).relative_to(out_root)) for k, v in files.items()},
            }
            if case.analyze:
                chk = h.check_case(case, outputs["json"], outputs["text"])
                entry["check"] = {
                    "expect": case.expect, "ok": chk.ok, "message": chk.message,
                    "planted_node": chk.node, "plan_rows": chk.plan_rows,
                    "actual_rows": chk.actual_rows, "loops": chk.loops,
                    "factor": None if chk.factor is None else round(chk.factor, 1),
                    **({"nested_loop": chk.extra} if chk.extra else {}),
                }
                if case.planted is not None:
                    entry["check"]["planted_match"] = dict(case.planted)
                status = "ok " if chk.ok else "BAD"
                print(f"  [{status}] {case.name:24} {chk.node or '':38} est={chk.plan_rows} "
                      f"actual={chk.actual_rows} loops={chk.loops} {chk.message}")
                if not chk.ok:
                    info.setdefault("failed", []).append(case.name)
            else:
                print(f"  [ - ] {case.name:24} (no ANALYZE)")
            info["cases"][case.name] = entry
        info["capture_seconds"] = round(time.monotonic() - t1, 2)
    info["total_seconds"] = round(time.monotonic() - t0, 2)
    info["major"] = int(outdir.name[2:])
    return info


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8", newline="")
    return path


# --------------------------------------------------------------------------
# README blocks


def _block(text: str, name: str, body: str) -> str:
    start, end = f"<!-- BEGIN GENERATED {name} -->", f"<!-- END GENERATED {name} -->"
    if start not in text or end not in text:
        return text.rstrip("\n") + f"\n\n{start}\n{body}\n{end}\n"
    head, rest = text.split(start, 1)
    _, tail = rest.split(end, 1)
    return f"{head}{start}\n{body}\n{end}{tail}"


def _cases_table() -> str:
    rows = ["| case | EXPLAIN options (plus `FORMAT x`) | settings (`SET LOCAL`) | statement(s) |",
            "| --- | --- | --- | --- |"]
    for c in h.CASES:
        opts = ", ".join(c.options)
        sets = ", ".join(f"`{k}={v}`" for k, v in c.settings.items()) or "-"
        sql = "<br>".join(f"`{s}`" for s in c.sql)
        rows.append(f"| `{c.name}` | {opts} | {sets} | {sql} |")
    return "\n".join(rows)


def _numbers_table(manifest: dict) -> str:
    out = []
    for major in sorted(manifest["servers"], reverse=True):
        info = manifest["servers"][major]
        out.append(f"**{info['server_version']}** ({info['source']}): start {info['start_seconds']} s, "
                   f"scenario build {info['build_seconds']} s, capture of all files {info['capture_seconds']} s.\n")
        out.append("| case | planted node | estimated rows | actual rows | loops | off by | check |")
        out.append("| --- | --- | ---: | ---: | ---: | ---: | --- |")
        for name, entry in info["cases"].items():
            chk = entry.get("check")
            if chk is None:
                out.append(f"| `{name}` | (plain EXPLAIN, nothing run) | | | | | |")
                continue
            if chk["planted_node"] is None:
                out.append(f"| `{name}` | (shape only) | | | | | {chk['message']} |")
                continue
            note = chk["message"]
            if "nested_loop" in chk:
                nl = chk["nested_loop"]
                note += (f"; inner `{nl['inner']}` ran {nl['inner_loops']} loops for an outer "
                         f"estimate of {nl['outer_plan_rows']}")
            if chk["expect"] == "within":
                note += " (worst node of the plan)"
            out.append(f"| `{name}` | {chk['planted_node']} | {chk['plan_rows']} | {chk['actual_rows']} | "
                       f"{chk['loops']} | x{chk['factor']} | {note} |")
        out.append("")
    return "\n".join(out).rstrip("\n")


def update_readme(manifest: dict) -> None:
    text = README.read_text(encoding="utf-8") if README.exists() else "# Captured query plans\n"
    text = _block(text, "SCENARIO", "```sql\n" + h.scenario_sql().rstrip("\n") + "\n```")
    conf = "\n".join(f"{k} = {v}" for k, v in h.SERVER_CONF.items())
    text = _block(text, "SERVER", "```ini\n" + conf + "\nunix_socket_directories = '<the temporary folder>'\n```")
    text = _block(text, "CASES", _cases_table())
    text = _block(text, "NUMBERS", _numbers_table(manifest))
    README.write_text(text, encoding="utf-8")


# --------------------------------------------------------------------------


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sources", default=",".join(h.SOURCES),
                    help="comma-separated server sources (default: %(default)s)")
    ap.add_argument("--cases", default="", help="comma-separated case names (default: all)")
    ap.add_argument("--out", type=Path, default=OUT, help="output folder (default: %(default)s)")
    ap.add_argument("--no-readme", action="store_true", help="do not refresh plans/README.md")
    args = ap.parse_args(argv)

    cases = h.CASES
    if args.cases:
        wanted = [c.strip() for c in args.cases.split(",") if c.strip()]
        unknown = [c for c in wanted if c not in h.CASES_BY_NAME]
        if unknown:
            ap.error(f"unknown case(s) {unknown}; known: {[c.name for c in h.CASES]}")
        cases = tuple(h.CASES_BY_NAME[c] for c in wanted)

    args.out.mkdir(parents=True, exist_ok=True)
    (args.out / "scenario.sql").write_text(h.scenario_sql(), encoding="utf-8")
    manifest_path = args.out / "manifest.json"
    manifest = {"servers": {}}
    if manifest_path.exists():
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    manifest["note"] = ("written by plans/capture_postgresql.py; files are relative to this folder; "
                        "plan_rows/actual_rows are per loop, as PostgreSQL reports them")
    failed, missing = [], []
    for source in [s.strip() for s in args.sources.split(",") if s.strip()]:
        try:
            h.find_bindir(source)
        except h.SourceUnavailable as exc:
            print(f"skipping {source}: {exc}", file=sys.stderr)
            missing.append(source)
            continue
        print(f"== {source}")
        info = capture_source(source, cases, args.out)
        key = str(info["major"])
        old = manifest["servers"].get(key, {}).get("cases", {})
        if args.cases:  # partial run: keep the other cases' entries
            info["cases"] = {**old, **info["cases"]}
        manifest["servers"][key] = info
        failed += [f"pg{key}:{c}" for c in info.get("failed", [])]
        print(f"   pg{key}: start {info['start_seconds']} s, build {info['build_seconds']} s, "
              f"capture {info['capture_seconds']} s, total {info['total_seconds']} s")
    manifest_path.write_text(json.dumps(manifest, indent=2) + "\n", encoding="utf-8")
    if not args.no_readme and manifest["servers"]:
        update_readme(manifest)
    if failed:
        print(f"planted defects that did not show: {failed}", file=sys.stderr)
        return 1
    return 2 if missing and not manifest["servers"] else 0


if __name__ == "__main__":
    sys.exit(main())
