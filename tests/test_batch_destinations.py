"""csvlog and jsonlog server logs, the .csv output's guard against formulas, and the comparison's
page and widget.

Every log here is written in the test by a throw-away PostgreSQL whose logging collector writes
each message three ways at once (``log_destination = 'stderr,csvlog,jsonlog'``, see
tests/autoexplain_harness.py). The counts are checked against numbers from outside planview:
the statements the workload ran, PostgreSQL's own EXPLAIN (FORMAT JSON) operator count, and the
auto_explain records read here with Python's csv and json modules directly (the record layouts
are the PostgreSQL manual's: "Using CSV-Format Log Output" and "Using JSON-Format Log Output").
The .csv guard follows OWASP's "CSV Injection" page: a cell beginning with =, +, -, @, tab or
carriage return is prefixed with a single quote.
"""

from __future__ import annotations

import csv
import json
import re
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import pytest
from autoexplain_harness import CollectorServer, capture
from pgharness import SourceUnavailable, in_ci

import planview
from planview.fleet.logread import log_kind

ROOT = Path(__file__).resolve().parent.parent
DURATION = re.compile(r"duration: (\d+(?:\.\d+)?) ms\s+plan:\n")

HOSTILE_A = '=HYPERLINK("http://example.invalid/x")'
HOSTILE_B = "@SUM(1+1)"
HOSTILE_COMMENT = "-- +cmd|' /C calc'!A0"
HTML_TABLE = "</script><b>pets</b><img src=x onerror=alert(1)>"


def _quoted(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


@pytest.fixture(scope="module", params=("debian", "18"))
def collected(request, tmp_path_factory):
    try:
        server = CollectorServer(request.param)
    except SourceUnavailable as exc:
        if in_ci():
            pytest.fail(f"PostgreSQL source unavailable in CI: {exc}")
        pytest.skip(str(exc))
    base = server.client_bindir.parent
    if not any((base / sub / "auto_explain.so").is_file() for sub in ("lib", "lib/postgresql")):
        pytest.skip(f"{request.param}: this build ships no auto_explain module")
    server.start()
    try:
        if server.version < 15:
            pytest.skip(f"PostgreSQL {server.version} has no jsonlog (15+)")
        folder = tmp_path_factory.mktemp(f"dest-{request.param}")
        log = capture(server, folder / "server.log")
        hostile = _hostile(server, folder)
        pair = _html_pair(server, folder)
        yield log, hostile, pair
    finally:
        server.stop()


def _hostile(server, folder: Path) -> Path:
    """A stderr log of one plan whose query text and relation names start with formula
    characters (the names are ours, quoted identifiers PostgreSQL accepts as they are)."""
    from autoexplain_harness import _wait_for_log

    with server.connect("aelog", autocommit=True) as conn:
        conn.execute("SET auto_explain.log_min_duration = -1")
        for name in (HOSTILE_A, HOSTILE_B):
            conn.execute(f"DROP TABLE IF EXISTS {_quoted(name)}")
            conn.execute(f"CREATE TABLE {_quoted(name)} (id int, v int)")
            conn.execute(f"INSERT INTO {_quoted(name)} SELECT i, i % 3 FROM generate_series(1, 2000) i")
            conn.execute(f"ANALYZE {_quoted(name)}")
    _wait_for_log(server)
    start = server.logfile.stat().st_size
    with server.connect("aelog", autocommit=True) as conn:
        conn.execute("SET auto_explain.log_format = text")
        conn.execute(f"{HOSTILE_COMMENT}\nSELECT count(*) FROM {_quoted(HOSTILE_A)} a JOIN {_quoted(HOSTILE_B)} b "
                     "USING (id) WHERE a.v = 1").fetchall()
    _wait_for_log(server)
    out = folder / "hostile.log"
    with open(server.logfile, "rb") as src:
        src.seek(start)
        out.write_bytes(src.read())
    return out


def _html_pair(server, folder: Path) -> dict:
    """The same correlated query before and after CREATE STATISTICS, on a table whose name is
    markup, as EXPLAIN (ANALYZE, FORMAT JSON) files whose names are markup too."""
    table = _quoted(HTML_TABLE)
    sql = f"SELECT count(*) FROM {table} WHERE town = 'town7' AND postcode = 'pc7'"
    out = {}
    with server.connect("aelog", autocommit=True) as conn:
        conn.execute("SET auto_explain.log_min_duration = -1")
        conn.execute(f"DROP TABLE IF EXISTS {table}")
        conn.execute(f"CREATE TABLE {table} AS SELECT * FROM pets")
        conn.execute(f"ANALYZE {table}")
        for when in ("before", "after"):
            if when == "after":
                conn.execute(f"CREATE STATISTICS pv_html_stats (dependencies, mcv) ON town, postcode FROM {table}")
                conn.execute(f"ANALYZE {table}")
            (doc,), = conn.execute(f"EXPLAIN (ANALYZE, FORMAT JSON) {sql}").fetchall()
            doc = doc if isinstance(doc, list) else json.loads(doc)
            path = folder / f"<em>{when}.json"  # a file name cannot hold a slash
            path.write_text(json.dumps(doc))
            out[when] = (path, doc)
        conn.execute(f"DROP TABLE {table}")
    return out


def _csv_entries(path: Path) -> list[list[str]]:
    """The auto_explain records of a csvlog, read with the csv module alone."""
    with open(path, newline="", encoding="utf-8") as handle:
        return [r for r in csv.reader(handle) if len(r) > 13 and DURATION.match(r[13])]


def _json_entries(path: Path) -> list[dict]:
    """The auto_explain records of a jsonlog, read with the json module alone."""
    out = []
    with open(path, encoding="utf-8") as handle:
        for line in handle:
            record = json.loads(line)
            if DURATION.match(record.get("message", "")):
                out.append(record)
    return out


def _cli(*args):
    return subprocess.run([sys.executable, "-m", "planview.cli", *args], capture_output=True, text=True,
                          cwd=ROOT, timeout=300, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"})


# -- csvlog and jsonlog -------------------------------------------------------------------

@pytest.mark.parametrize("kind", ("csvlog", "jsonlog"))
def test_each_auto_explain_record_is_one_plan_with_the_engines_operator_count(collected, kind):
    log, _, _ = collected
    path = log.copies[kind]
    assert log_kind(path) == kind
    records = _csv_entries(path) if kind == "csvlog" else _json_entries(path)
    assert len(records) == log.statements  # one auto_explain message a statement the workload ran
    frame = planview.batch(path, workers=1)
    queries = frame[frame["row"] == "query"]
    assert frame.attrs["unreadable"] == []
    assert len(queries) == len(records)
    assert (frame["row"] == "node").sum() == log.operators  # PostgreSQL's own EXPLAIN (FORMAT JSON)
    assert list(queries["nodes"]) == log.operators_per_statement
    assert (queries["format"] == "json").sum() == log.json_entries
    assert (queries["format"] == "text").sum() == log.text_entries
    assert list(queries["query_text"]) == log.sql
    # the record's own fields: time, process, and the duration in its message
    if kind == "csvlog":
        times = [r[0] for r in records]
        pids = [int(r[3]) for r in records]
        messages = [r[13] for r in records]
    else:
        times = [r["timestamp"] for r in records]
        pids = [r["pid"] for r in records]
        messages = [r["message"] for r in records]
    assert list(queries["log_time"]) == times
    assert list(queries["pid"]) == pids
    assert list(queries["duration_ms"].astype(float)) == [float(DURATION.match(m).group(1)) for m in messages]


@pytest.mark.parametrize("kind", ("csvlog", "jsonlog"))
def test_the_three_destinations_give_the_same_plans(collected, kind):
    log, _, _ = collected
    stderr = planview.batch(log.copies["stderr"], workers=1)
    other = planview.batch(log.copies[kind], workers=1)
    cols = ["row", "fingerprint", "operator", "relation", "est_rows", "actual_rows", "q_error", "origin", "cause",
            "pid", "duration_ms"]
    assert stderr[cols].reset_index(drop=True).equals(other[cols].reset_index(drop=True))
    # the stderr log's first half is under a %m prefix: the same millisecond stamp as the record's
    half = (stderr["row"] == "query").astype(int).cumsum() <= log.statements // 2
    assert stderr["log_time"][half].equals(other["log_time"][half])


@pytest.mark.parametrize("kind", ("csvlog", "jsonlog"))
def test_two_processes_cutting_inside_multi_line_records_give_the_same_table(collected, kind):
    log, _, _ = collected
    one = planview.batch(log.copies[kind], workers=1)
    two = planview.batch(log.copies[kind], workers=2, task_bytes=2048)  # cuts inside quoted fields
    assert one.equals(two)


def test_a_cut_jsonlog_record_is_counted_with_its_line(collected, tmp_path):
    log, _, _ = collected
    lines = log.copies["jsonlog"].read_text(encoding="utf-8").splitlines()
    plans = [i for i, line in enumerate(lines) if '"message":"duration: ' in line]
    cut_at = plans[len(plans) // 2]
    out = []
    for i, line in enumerate(lines):
        out.append(line[: len(line) // 2] if i == cut_at else line)
        if i == 0:
            out += ["not json at all", "", "{\"half\": "]  # noise, never an entry
    last = lines[plans[-1]]
    out.append(last[: last.index('"message":') + 60])  # the log ends inside a last plan's message
    damaged = tmp_path / "damaged.json"
    damaged.write_text("\n".join(out) + "\n", encoding="utf-8")
    frame = planview.batch(damaged, workers=2, task_bytes=4096)
    bad = frame.attrs["unreadable"]
    assert len(bad) == 2, bad
    assert (frame["row"] == "query").sum() == log.statements - 1
    expected = [cut_at + 1 + 3, len(out)]  # 1-based, after the three noise lines
    assert sorted(int(item.split(": unreadable:")[0].rsplit(":", 1)[1]) for item in bad) == expected


def test_a_csvlog_cut_short_is_counted_and_the_rest_read(collected, tmp_path):
    log, _, _ = collected
    body = log.copies["csvlog"].read_bytes()
    last = body.rfind(b'"duration: ')
    damaged = tmp_path / "damaged.csv"
    damaged.write_bytes(body[: last + 60])  # inside the last auto_explain message
    frame = planview.batch(damaged, workers=1)
    bad = frame.attrs["unreadable"]
    assert len(bad) == 1 and "cut short" in bad[0], bad
    assert (frame["row"] == "query").sum() == log.statements - 1
    line = int(bad[0].split(": unreadable:")[0].rsplit(":", 1)[1])
    assert line == body[:last].count(b"\n") + 1  # the record's first line, counted here


def test_a_folder_with_all_three_logs_and_a_plan_file(collected, tmp_path):
    log, _, pair = collected
    folder = tmp_path / "mixed"
    folder.mkdir()
    for path in log.copies.values():
        (folder / path.name).write_bytes(path.read_bytes())
    (folder / "plan.json").write_bytes(pair["before"][0].read_bytes())  # a plan, not a jsonlog
    assert log_kind(folder / "plan.json") is None
    frame = planview.batch(folder, workers=2)
    assert (frame["row"] == "query").sum() == 3 * log.statements + 1
    assert frame.attrs["unreadable"] == []


# -- the .csv guard ----------------------------------------------------------------------

def test_csv_cells_that_would_be_formulas_are_quoted_and_numbers_stay_numbers(collected, tmp_path):
    _, hostile, _ = collected
    out_csv, out_pq = tmp_path / "h.csv", tmp_path / "h.parquet"
    for out in (out_csv, out_pq):
        run = _cli("batch", str(hostile), "--out", str(out), "--no-progress", "--fail-at", "1e9")
        assert run.returncode == 0, run.stderr
    import pyarrow.parquet as pq

    from planview.fleet.batch import COLUMNS

    raw = pq.read_table(out_pq).to_pylist()
    with open(out_csv, newline="", encoding="utf-8") as handle:
        cells = list(csv.DictReader(handle))
    assert len(cells) == len(raw) and len(raw) > 2
    relations = {r["relation"] for r in raw if r["relation"]}
    assert {HOSTILE_A, HOSTILE_B} <= relations  # Parquet keeps the names as PostgreSQL has them
    assert {c["relation"] for c in cells if c["relation"]} >= {"'" + HOSTILE_A, "'" + HOSTILE_B}
    query = next(c for c in cells if c["row"] == "query")
    assert query["query_text"].startswith("'" + HOSTILE_COMMENT)
    kinds = dict(COLUMNS)
    for got, want in zip(cells, raw):
        for name, kind in kinds.items():
            value, cell = want[name], got[name]
            if kind == "string":
                if value is not None and value[:1] in ("=", "+", "-", "@", "\t", "\r"):
                    assert cell == "'" + value
                elif value is not None:
                    assert cell == value
            elif kind in ("int64", "float64") and value is not None:
                assert not cell.startswith("'") and float(cell) == pytest.approx(value)


@pytest.mark.parametrize("first", ("=", "+", "-", "@", "\t", "\r"))
def test_each_formula_character_of_the_owasp_list_is_quoted(first):
    """OWASP "CSV Injection": cells beginning with these six characters."""
    from planview.fleet.batch import csv_safe, rows_frame

    frame = rows_frame([{"row": "query", "query_text": first + "1+2", "line": -1, "duration_ms": -2.5},
                        {"row": "query", "query_text": "SELECT 1" + first, "line": 3}])
    safe = csv_safe(frame)
    assert list(safe["query_text"]) == ["'" + first + "1+2", "SELECT 1" + first]
    assert list(safe["line"]) == [-1, 3] and safe["duration_ms"].iloc[0] == -2.5


# -- the comparison: its page and its widget ---------------------------------------------

def _scan_q_error(doc) -> float:
    node = doc[0]["Plan"]
    while node.get("Relation Name") != HTML_TABLE:
        node = node["Plans"][0]
    est, act = max(node["Plan Rows"], 1), max(node["Actual Rows"], 1)
    return max(est / act, act / est)


class _Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.scripts: list[str] = []
        self._in_script = False

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        self._in_script = tag == "script"
        if self._in_script:
            self.scripts.append("")

    def handle_endtag(self, tag):
        self._in_script = False

    def handle_data(self, data):
        if self._in_script:
            self.scripts[-1] += data


def test_the_comparison_page_is_written_escaped_and_holds_both_reviews(collected, tmp_path):
    import base64
    import hashlib

    _, _, pair = collected
    (before, doc_a), (after, doc_b) = pair["before"], pair["after"]
    assert _scan_q_error(doc_a) >= 10 and _scan_q_error(doc_b) < 2  # the engine's figures: the fix held
    result = planview.compare(before, after)
    out = tmp_path / "compare.html"
    page = result.to_html(out)
    assert out.read_text(encoding="utf-8") == page
    # the markup in the table name and the file names is text, never markup
    assert "<b>pets</b>" not in page and "<em>before" not in page and "<img" not in page
    assert html_escape(HTML_TABLE) in page and html_escape(str(before)) in page
    parsed = _Tags()
    parsed.feed(page)
    scripts = [a for t, a in parsed.tags if t == "script"]
    assert [a.get("type") for a in scripts] == ["application/json", "application/json", "module"]
    policy = next(a["content"] for t, a in parsed.tags if t == "meta" and a.get("http-equiv") ==
                  "Content-Security-Policy")
    digest = base64.b64encode(hashlib.sha256(parsed.scripts[-1].encode()).digest()).decode()
    assert f"script-src 'sha256-{digest}'" in policy and "default-src 'none'" in policy
    # each side's data is that plan's own report, and holds the table's real name
    data = [json.loads(s) for s in parsed.scripts[:2]]
    for side, plan_data in zip(("before", "after"), data):
        packed = plan_data["report"]["nodes_packed"]
        relations = [row[packed["columns"].index("relation")] for row in packed["rows"]]
        assert HTML_TABLE in relations, side
    rows = [a for t, a in parsed.tags if t == "tr" and "data-before" in a]
    assert len(rows) == len(result.matches)
    scan = next(i for i, m in enumerate(result.matches) if m.relation == HTML_TABLE)
    assert rows[scan]["class"] == "v-better"
    assert rows[scan]["data-before"] == str(result.matches[scan].before)


def html_escape(text: str) -> str:
    import html

    return html.escape(text)


def test_the_comparison_widget_moves_both_reviews_to_the_picked_row(collected):
    from planview.magic import comparison_mimebundle
    from planview.widget.compare_view import ComparisonWidget

    _, _, pair = collected
    result = planview.compare(pair["before"][0], pair["after"][0])
    widget = ComparisonWidget(result)
    scan = next(i for i, m in enumerate(result.matches) if m.relation == HTML_TABLE)
    widget.selected = scan
    assert widget.reviews["before"].selected == result.matches[scan].before
    assert widget.reviews["after"].selected == result.matches[scan].after
    # and back: a node picked in one review picks its row
    root = next(i for i, m in enumerate(result.matches) if m.before == 0)
    widget.reviews["after"].selected = result.matches[root].after
    assert widget.selected == root and widget.reviews["before"].selected == 0
    bundle = comparison_mimebundle(result)
    assert "application/vnd.jupyter.widget-view+json" in bundle
    assert "<b>pets</b>" not in bundle["text/html"] and "v-better" in bundle["text/html"]
