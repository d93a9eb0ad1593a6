"""The batch review of real server logs with auto_explain output, and compare and gate on a real
before/after pair.

Every log here is made in the test by a throw-away PostgreSQL (tests/autoexplain_harness.py).
The counts are checked against numbers from outside planview: the statements the workload ran
and PostgreSQL's own EXPLAIN (FORMAT JSON) operator count for each; the before/after pair is the
same query before and after CREATE STATISTICS in a throw-away database, and its q-errors are
recomputed here from the engine's JSON ("Plan Rows" against "Actual Rows").
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from autoexplain_harness import PREFIXES, AutoExplainServer, capture, count_operators
from pgharness import SourceUnavailable, in_ci

import planview
from planview.fleet.logread import fingerprint, iter_entries

ROOT = Path(__file__).resolve().parent.parent
CORRELATED = "SELECT count(*) FROM pets WHERE town = 'town7' AND postcode = 'pc7'"
FIX = "CREATE STATISTICS pets_town_postcode (dependencies, mcv) ON town, postcode FROM pets"


def _has_auto_explain(server) -> bool:
    base = server.client_bindir.parent
    return any((base / sub / "auto_explain.so").is_file() for sub in ("lib", "lib/postgresql"))


@pytest.fixture(scope="module", params=("debian", "18", "pgserver"))
def captured(request, tmp_path_factory):
    try:
        server = AutoExplainServer(request.param)
    except SourceUnavailable as exc:
        if in_ci():
            pytest.fail(f"PostgreSQL source unavailable in CI: {exc}")
        pytest.skip(str(exc))
    if not _has_auto_explain(server):
        pytest.skip(f"{request.param}: this build ships no auto_explain module")
    server.start()
    try:
        folder = tmp_path_factory.mktemp(f"ae-{request.param}")
        log = capture(server, folder / "server.log")
        pair = _before_after(server, folder)
        yield log, pair
    finally:
        server.stop()


def _before_after(server, folder: Path) -> dict:
    """The same query before and after the fix, as EXPLAIN (ANALYZE, FORMAT JSON) files."""
    out = {}
    with server.connect("aelog", autocommit=True) as conn:
        conn.execute("SET auto_explain.log_min_duration = -1")
        for when in ("before", "after"):
            if when == "after":
                conn.execute(FIX)
                conn.execute("ANALYZE pets")
            (doc,), = conn.execute(f"EXPLAIN (ANALYZE, FORMAT JSON) {CORRELATED}").fetchall()
            doc = doc if isinstance(doc, list) else json.loads(doc)
            (folder / when).mkdir()
            (folder / when / "pets_by_town.json").write_text(json.dumps(doc))
            out[when] = doc
        conn.execute("DROP STATISTICS pets_town_postcode")
        conn.execute("ANALYZE pets")
    out["folder"] = folder
    return out


def _scan_q_error(doc) -> float:
    """The q-error of the pets scan, from PostgreSQL's own JSON."""
    todo = [doc[0]["Plan"]]
    while todo:
        node = todo.pop()
        if node.get("Relation Name") == "pets":
            est, act = max(node["Plan Rows"], 1), max(node["Actual Rows"], 1)
            return max(est / act, act / est)
        todo.extend(node.get("Plans", []))
    raise AssertionError("no scan of pets")


# -- reading the log --------------------------------------------------------------------

def test_counts_match_the_statements_and_the_engines_own_operator_count(captured):
    log, _ = captured
    frame = planview.batch(log.path, workers=1)
    queries = frame[frame["row"] == "query"]
    nodes = frame[frame["row"] == "node"]
    assert len(queries) == log.statements  # one entry a statement the workload ran
    assert len(nodes) == log.operators     # PostgreSQL's own EXPLAIN (FORMAT JSON) count
    assert frame.attrs["unreadable"] == []
    assert (queries["format"] == "text").sum() == log.text_entries
    assert (queries["format"] == "json").sum() == log.json_entries
    assert list(queries["nodes"]) == log.operators_per_statement


def test_every_entry_keeps_its_time_duration_and_query_under_both_prefixes(captured):
    log, _ = captured
    frame = planview.batch(log.path, workers=1)
    queries = frame[frame["row"] == "query"]
    assert queries["log_time"].notna().all() and queries["pid"].notna().all()
    assert (queries["duration_ms"] > 0).all()
    half = len(queries) // len(PREFIXES)  # the first half under %m, the second under %n (epoch)
    assert queries["log_time"].iloc[:half].str.match(r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d\.\d{3} UTC").all()
    assert queries["log_time"].iloc[half:].str.match(r"\d{10}\.\d{3}$").all()
    # the query text as run, a multi-line one included, in text and JSON entries alike
    assert list(queries["query_text"]) == log.sql
    # the workload has 4 statement shapes, repeated with other constants
    assert queries["fingerprint"].nunique() == 4
    assert queries["fingerprint"].nunique() == len({fingerprint(s) for s in log.sql})


def test_the_planted_correlation_is_found_in_every_entry_that_has_it(captured):
    log, _ = captured
    frame = planview.batch(log.path, workers=1)
    origins = frame[(frame["row"] == "node") & frame["origin"].fillna(False)]
    planted = sum("postcode = 'pc" in s for s in log.sql)  # the workload's town+postcode queries
    pets = origins[(origins["relation"] == "pets") & (origins["cause"] == "correlation")]
    assert pets["query_id"].nunique() == planted
    assert set(pets["columns"]) == {"postcode,town"}


def test_cut_entries_and_noise_are_counted_with_their_line_and_never_stop_the_batch(captured, tmp_path):
    log, _ = captured
    lines = log.path.read_text().splitlines()
    headers = [i for i, line in enumerate(lines) if line.endswith("plan:")]
    json_header = next(i for i in headers if lines[i + 1].lstrip().startswith("{"))
    text_header = next(i for i in headers if lines[i + 1].startswith("\tQuery Text:"))
    # a JSON entry cut in half, a text entry cut after its query, noise lines, and a log that
    # ends in the middle of a last entry's header
    json_end = next(i for i in range(json_header + 1, len(lines)) if not lines[i].startswith("\t"))
    cut_json = set(range(json_header + (json_end - json_header) // 2, json_end))
    text_end = next(i for i in range(text_header + 1, len(lines)) if not lines[i].startswith("\t"))
    cut_text = set(range(text_header + 2, text_end))
    kept = []
    damaged_at = []  # the damaged entries' first lines, numbered as in the damaged file
    for i, line in enumerate(lines):
        if i in cut_json or i in cut_text:
            continue
        kept.append(line)
        if i in (json_header, text_header):
            damaged_at.append(len(kept))
        if i == 0:
            kept += ["random noise \x01 not a log line", "\tan indented stray line", ""]
    kept.append("2026-12-02 10:00:00.000 UTC [1] LOG:  duration: 1.000 ms  plan:")
    damaged_at.append(len(kept))
    damaged = tmp_path / "damaged.log"
    damaged.write_text("\n".join(kept) + "\n")
    frame = planview.batch(damaged, workers=2, task_bytes=4096)  # ranges cut inside entries
    bad = frame.attrs["unreadable"]
    assert len(bad) == 3, bad
    assert len(frame[frame["row"] == "query"]) == log.statements - 2
    # each names the file and a line within the damaged entry (the JSON reader's own line)
    header_lines = [i + 1 for i, line in enumerate(kept) if line.endswith("plan:")]
    owners = []
    for item in bad:
        where = item.split(": unreadable:")[0]
        path, line = where.rsplit(":", 1)
        assert path == str(damaged)
        owners.append(max(h for h in header_lines if h <= int(line)))
    assert sorted(owners) == sorted(damaged_at)
    # the command line: reported on stderr, exit 1 for the origins found, never 2
    out = tmp_path / "damaged.parquet"
    run = _cli("batch", str(damaged), "--out", str(out), "--no-progress")
    assert run.returncode == 1, run.stderr
    assert run.stderr.count("unreadable") == 3
    import pyarrow.parquet as pq

    table = pq.read_table(out).to_pandas()
    assert (table["row"] == "query").sum() == log.statements - 2


def test_two_processes_give_the_same_table_as_one(captured):
    log, _ = captured
    one = planview.batch(log.path, workers=1)
    two = planview.batch(log.path, workers=2, task_bytes=4096)  # many ranges, cut inside entries
    assert one.equals(two)


def test_parquet_and_csv_hold_the_same_rows(captured, tmp_path):
    log, _ = captured
    import pandas as pd
    import pyarrow.parquet as pq

    for name in ("r.parquet", "r.csv"):
        run = _cli("batch", str(log.path), "--out", str(tmp_path / name), "--no-progress")
        assert run.returncode == 1, run.stderr  # the planted correlation is x50, over --fail-at 10
    parquet = pq.read_table(tmp_path / "r.parquet").to_pandas()
    csv = pd.read_csv(tmp_path / "r.csv")
    assert len(parquet) == len(csv) == log.statements + log.operators
    calm = _cli("batch", str(log.path), "--out", str(tmp_path / "r2.csv"), "--fail-at", "1000")
    assert calm.returncode == 0


def test_a_folder_of_mixed_plan_files_and_a_log(captured, tmp_path):
    log, pair = captured
    folder = tmp_path / "mixed"
    folder.mkdir()
    shutil.copy(log.path, folder / "server.log")
    shutil.copy(pair["folder"] / "before" / "pets_by_town.json", folder / "pg.json")
    shutil.copy(ROOT / "plans" / "duckdb" / "correlated_consistent.json", folder / "duck.json")
    (folder / "notes.txt").write_text("this is not a plan\n")
    frame = planview.batch(folder, workers=2, task_bytes=8192)
    queries = frame[frame["row"] == "query"]
    assert len(queries) == log.statements + 2
    assert set(queries["engine"]) == {"postgresql", "duckdb"}
    assert len(frame.attrs["unreadable"]) == 1 and frame.attrs["unreadable"][0].startswith("notes.txt")


def test_the_entry_stream_holds_one_entry_at_a_time(captured, tmp_path):
    """A log a hundred times longer is read through the same generator: what it keeps between
    entries does not grow (the entries are counted and dropped here)."""
    log, _ = captured
    body = log.path.read_bytes()
    big = tmp_path / "big.log"
    with open(big, "wb") as handle:
        for _ in range(100):
            handle.write(body)
    import tracemalloc

    tracemalloc.start()
    count = sum(1 for _ in iter_entries(big))
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert count == 100 * log.statements
    assert peak < 40 * len(body)  # about one entry's worth, far below the 100x log


# -- compare and gate on a real before/after pair --------------------------------------

def test_compare_sees_the_fix(captured):
    _, pair = captured
    before_q, after_q = _scan_q_error(pair["before"]), _scan_q_error(pair["after"])
    assert before_q >= 10 and after_q < 2  # the engine's own figures: the fix held
    folder = pair["folder"]
    result = planview.compare(folder / "before" / "pets_by_town.json", folder / "after" / "pets_by_town.json")
    scan = next(m for m in result.matches if m.relation == "pets")
    assert scan.before_q_error == pytest.approx(before_q, rel=1e-6)
    assert scan.after_q_error == pytest.approx(after_q, rel=1e-6)
    assert scan.verdict == "better"
    assert "better" in result.to_text() and "pets" in result.to_markdown()
    assert "<table" in result.to_html()


def test_gate_fails_on_the_misestimate_only_against_the_fixed_baseline(captured, tmp_path):
    _, pair = captured
    folder = pair["folder"]
    fixed = tmp_path / "fixed.json"
    broken = tmp_path / "broken.json"
    run = _cli("gate", str(folder / "after"), "--baseline", str(fixed), "--update-baseline")
    assert run.returncode == 0, run.stderr
    run = _cli("gate", str(folder / "before"), "--baseline", str(fixed))
    assert run.returncode == 1, run.stdout + run.stderr  # a new origin since the baseline
    assert "pets" in run.stdout and "new" in run.stdout
    run = _cli("gate", str(folder / "before"), "--baseline", str(broken), "--update-baseline")
    assert run.returncode == 0
    run = _cli("gate", str(folder / "before"), "--baseline", str(broken))
    assert run.returncode == 0, run.stdout  # the same origin, no worse: nothing new
    run = _cli("gate", str(folder / "after"), "--baseline", str(broken))
    assert run.returncode == 0, run.stdout  # better than the baseline


def _cli(*args):
    return subprocess.run([sys.executable, "-m", "planview.cli", *args], capture_output=True, text=True,
                          cwd=ROOT, timeout=300, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})


# -- the summary --------------------------------------------------------------------------

def test_summary_merges_the_fix_and_finds_the_shape_change(captured, tmp_path):
    from planview.fleet.summary import summary

    log, _ = captured
    frame = planview.batch(log.path, workers=1)
    report = summary(frame).report()
    planted = [i for i, s in enumerate(log.sql) if "postcode = 'pc" in s]
    pets = [t for t in report["targets"] if t["table"].endswith("pets") and t["cause"] == "correlation"]
    assert len(pets) == 1  # one fix for the pair, however many queries misestimate it
    target = pets[0]
    assert target["entries"] == len(planted)
    assert target["queries"] == len({log.templates[i] for i in planted})  # distinct statement shapes
    assert target["fix"].count("CREATE STATISTICS") == 1 and '"postcode", "town"' in target["fix"]
    assert "SHARE UPDATE EXCLUSIVE" in target["caution"] and report["statistics_caution"]
    # a plan shape changed for a fingerprint exactly where PostgreSQL's own JSON shows it did
    by_template: dict[int, set] = {}
    for template, shape in zip(log.templates, log.engine_shapes):
        by_template.setdefault(template, set()).add(shape)
    changed = {t for t, shapes in by_template.items() if len(shapes) > 1}
    assert changed, "enable_nestloop = off planned the join the same way: nothing to find"
    assert len(report["shape_changes"]) == len(changed)
    # the percentiles, against numpy's over the same judged q-errors
    import numpy as np

    judged = frame[(frame["row"] == "node") & frame["judged"].fillna(False)]["q_error"].astype(float).to_numpy()
    for share, key in ((50, "median"), (90, "p90"), (99, "p99")):
        assert report["q_error"][key] == pytest.approx(np.percentile(judged, share))
    md = summary(frame).to_markdown(tmp_path / "s.md")
    assert "1.81" in md and "51.8" in md and "CREATE STATISTICS" in md
    page = summary(frame).to_html(tmp_path / "s.html")
    assert "plotly" in page.lower() and "JOB-LIGHT" in page
    run = _cli("batch", str(log.path), "--summary", str(tmp_path / "cli.md"), "--no-progress")
    assert run.returncode == 1 and (tmp_path / "cli.md").read_text().count("CREATE STATISTICS IF NOT EXISTS") == 1


# -- Dask ---------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def dask_client():
    distributed = pytest.importorskip("distributed")  # the "dask" extra
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       dashboard_address=None)
    client = distributed.Client(cluster)
    yield client
    client.close()
    cluster.close()


def test_dask_on_a_local_cluster_gives_the_one_machine_table(captured, tmp_path, dask_client):
    from planview.fleet.dask_run import dask_batch

    log, pair = captured
    # small partitions, so ranges start and end inside entries
    folder = tmp_path / "in"
    folder.mkdir()
    shutil.copy(log.path, folder / "server.log")
    shutil.copy(pair["folder"] / "before" / "pets_by_town.json", folder / "pg.json")
    (folder / "junk.txt").write_text("not a plan\n")
    totals = dask_batch(folder, tmp_path / "out", client=dask_client, partition_bytes=4096)
    import pandas as pd

    parts = sorted((tmp_path / "out").glob("part.*.parquet"))
    assert len(parts) > 3
    got = pd.read_parquet(tmp_path / "out")
    one = planview.batch(folder, workers=1)
    assert totals.queries == log.statements + 1 and totals.nodes == log.operators + count_operators(pair["before"])
    assert len(totals.unreadable) == 1 and str(totals.unreadable[0]).startswith("junk.txt")
    key = ["query_id", "row", "node"]
    left = got.sort_values(key, na_position="first").reset_index(drop=True)
    right = one.sort_values(key, na_position="first").reset_index(drop=True)
    assert list(left["query_id"]) == list(right["query_id"])
    assert list(left["line"].astype(float)) == list(right["line"].astype(float))
    assert list(left["q_error"].astype(float).fillna(-1)) == list(right["q_error"].astype(float).fillna(-1))


def test_the_command_line_runs_on_a_local_cluster(captured, tmp_path):
    pytest.importorskip("distributed")
    log, _ = captured
    run = _cli("batch", str(log.path), "--dask", "local", "--out", str(tmp_path / "parts"))
    assert run.returncode == 1, run.stderr  # the planted x50 origins
    import pandas as pd

    assert (pd.read_parquet(tmp_path / "parts")["row"] == "query").sum() == log.statements


def test_compare_tells_a_shape_change_where_the_engine_planned_it_another_way(captured):
    from planview.fleet.logread import read_log

    log, _ = captured
    entries = [e for e in read_log(log.path)]
    assert len(entries) == log.statements
    pairs = {}
    for i, (template, shape) in enumerate(zip(log.templates, log.engine_shapes)):
        pairs.setdefault(template, []).append((i, shape))
    checked = 0
    for items in pairs.values():
        (i, shape_a), (j, shape_b) = items[0], items[-1]
        a, b = entries[i], entries[j]
        result = planview.compare(planview.load(a.text, engine=a.engine, fmt=a.fmt),
                                  planview.load(b.text, engine=b.engine, fmt=b.fmt))
        assert result.shape_changed == (shape_a != shape_b), (log.sql[i], log.sql[j])
        checked += shape_a != shape_b
    assert checked  # at least one template the engine planned two ways


def test_compare_names_the_file_it_cannot_read(tmp_path):
    bad = tmp_path / "not-a-plan.txt"
    bad.write_text("hello\n")
    run = _cli("compare", str(bad), str(bad))
    assert run.returncode == 2 and str(bad) in run.stderr and "Traceback" not in run.stderr


def test_the_comparison_view_holds_the_comparisons_report(captured):
    from planview.widget.compare_view import ComparisonView

    _, pair = captured
    folder = pair["folder"]
    result = planview.compare(folder / "before" / "pets_by_town.json", folder / "after" / "pets_by_town.json")
    view = ComparisonView(result)
    assert view.report == result.report()
    assert [n["verdict"] for n in view.report["nodes"] if n["relation"] == "pets"] == ["better"]
    # the front end only lays out these fields: each one it reads is in the report
    for key in ("position", "label", "before_rows", "before_q", "after_rows", "after_q", "verdict"):
        assert key in view.report["nodes"][0] and f"n.{key}" in view._esm
