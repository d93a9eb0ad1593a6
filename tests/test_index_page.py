"""The index over many reviews (`planview check FOLDER`, `planview demo`), on the bundled plans.

What each row must say is read from outside planview: the fixture file beside each case
(`plans/<engine>/.../<case>.expected.json`, decided by hand from the raw captures, see
plans/FIXTURES.md) lists every plan file of the case with its operator count and all its
origins, so the plans of a folder are exactly the files those fixtures list, and every other
file in it (the fixtures themselves, the capture manifest, the scenario SQL, the READMEs) is
not a plan and must be skipped without being called unreadable. Times are read from the raw
PostgreSQL JSON (its ``Execution Time`` per statement, summed).
"""

from __future__ import annotations

import base64
import hashlib
import html.parser
import json
import re
import shutil
import subprocess
import sys
from pathlib import Path
from urllib.parse import unquote

import pytest

from planview import words

ROOT = Path(__file__).resolve().parents[1]
PLANS = ROOT / "plans"


def _cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "planview.cli", *args], capture_output=True, text=True,
                          timeout=300, cwd=ROOT)


class _Index(html.parser.HTMLParser):
    """The index page's table as the browser builds it: headings, and per row each cell's
    text, sort value and link."""

    def __init__(self):
        super().__init__()
        self.headings: list[str] = []
        self.rows: list[list[dict]] = []
        self.scripts: list[str] = []
        self.policy = ""
        self.unreadable: list[str] = []
        self._cell = None
        self._in = []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self._in.append(tag)
        if tag == "meta" and attrs.get("http-equiv") == "Content-Security-Policy":
            self.policy = attrs["content"]
        if tag == "tr" and "tbody" in self._in:
            self.rows.append([])
        if tag == "td" and self.rows:
            self._cell = {"text": "", "sort": attrs.get("data-sort"), "href": None}
            self.rows[-1].append(self._cell)
        if tag == "a" and self._cell is not None:
            self._cell["href"] = attrs.get("href")
        if tag == "th":
            self.headings.append("")
        if tag == "script":
            self.scripts.append("")
        if tag == "li" and "ul" in self._in:
            self.unreadable.append("")

    def handle_endtag(self, tag):
        if tag == "td":
            self._cell = None
        while self._in and self._in.pop() != tag:
            pass

    def handle_data(self, data):
        if self._cell is not None:
            self._cell["text"] += data
        elif self._in and self._in[-1] in ("button",) and "th" in self._in:
            self.headings[-1] += data
        elif self._in and self._in[-1] == "script":
            self.scripts[-1] += data
        elif "li" in self._in:
            self.unreadable[-1] += data


def _read_index(path: Path) -> _Index:
    parser = _Index()
    parser.feed(path.read_text(encoding="utf-8"))
    return parser


def _fixtures(folder: Path) -> dict[str, dict]:
    """Every plan file the fixtures under `folder` list, by its path in the folder, with what
    the fixture says of it: operators, origins (None where the fixture marks planview wrong)."""
    expected = {}
    for fixture in sorted(folder.rglob("*.expected.json")):
        case = json.loads(fixture.read_text(encoding="utf-8"))
        wrong = {name for item in case.get("xfail") or [] for name in item.get("files") or []}
        for name, facts in case["files"].items():
            rel = (fixture.parent / name).relative_to(folder).as_posix()
            # "A file that lacks estimates or actual counts must have no origin at all" (FIXTURES.md)
            unjudged = facts.get("estimates_only") or {"est_rows", "actual_rows"} & set(facts.get("lacks") or ())
            origins = 0 if unjudged else len(case.get("origins") or [])
            expected[rel] = {"operators": facts["node_count"],
                             "origins": None if name in wrong else origins,
                             "path": fixture.parent / name}
    return expected


def _column(index: _Index, heading: str) -> int:
    return index.headings.index(heading)


@pytest.mark.parametrize("engine", ["postgresql", "mysql", "mariadb", "duckdb"])
def test_check_folder_lists_every_plan_file_and_skips_the_rest(engine, tmp_path):
    folder = PLANS / engine
    expected = _fixtures(folder)
    every_file = {p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file()}
    not_plans = every_file - set(expected)
    assert expected and not_plans  # the fixtures, and at least one manifest or README, are there
    out = tmp_path / "review"
    run = _cli("check", str(folder), "--out", str(out))
    assert run.returncode in (0, 1), run.stderr
    assert "unreadable" not in run.stdout  # no file of the folder is unreadable, none skipped is called so
    index = _read_index(out / "index.html")
    file_col, ops_col, origins_col = (_column(index, h) for h in ("plan file", "operators", "origins"))
    rows = {row[file_col]["text"]: row for row in index.rows}
    assert len(index.rows) == len(every_file) - len(not_plans) == len(expected)
    assert set(rows) == set(expected)
    for name, facts in expected.items():
        row = rows[name]
        assert int(row[ops_col]["sort"]) == facts["operators"], name
        if facts["origins"] is not None:
            assert int(row[origins_col]["sort"]) == facts["origins"], name
        link = row[file_col]["href"]
        assert link and (out / unquote(link)).is_file(), name
        assert name in run.stdout  # the terminal line of the plan
        if engine == "mariadb" and facts["path"].suffix == ".txt":
            # MariaDB's tabular ANALYZE prints r_rows and r_filtered but no time (the manual,
            # "ANALYZE Statement"; times are in ANALYZE FORMAT=JSON only): no time, not 0 ms
            assert row[_column(index, "time")]["text"] == "–", name
    # the exit code: 1 when a plan has an origin at --fail-at or worse (fixtures' origins are
    # at 10x or more, plans/FIXTURES.md), 0 with a bar no plan reaches
    has_origins = any(f["origins"] for f in expected.values())
    assert run.returncode == (1 if has_origins else 0)
    assert _cli("check", str(folder), "--out", str(tmp_path / "again"), "--fail-at", "1e300").returncode == 0


def _execution_ms(path: Path) -> float | None:
    """The sum of a raw PostgreSQL JSON capture's ``Execution Time``, read without planview."""
    text = path.read_text(encoding="utf-8")
    decoder, at, total, found = json.JSONDecoder(), 0, 0.0, False
    while at < len(text):  # a paste may hold several JSON documents one after another
        while at < len(text) and text[at].isspace():
            at += 1
        if at >= len(text):
            break
        doc, at = decoder.raw_decode(text, at)
        for item in doc:
            if "Execution Time" in item:
                total += item["Execution Time"]
                found = True
    return total if found else None


def test_the_time_column_sums_each_statement_as_printed(tmp_path):
    """PostgreSQL 16's `multi` case: two statements in one paste (plans/README.md); the time is
    the two Execution Times of the raw JSON summed."""
    folder = tmp_path / "plans"
    folder.mkdir()
    for name in ("multi.json", "multi.array.json", "bitmap.json"):
        shutil.copy(PLANS / "postgresql" / "pg16" / name, folder / name)
    out = tmp_path / "review"
    run = _cli("check", str(folder), "--out", str(out))
    assert run.returncode in (0, 1), run.stderr
    index = _read_index(out / "index.html")
    file_col, time_col, stmt_col = (_column(index, h) for h in ("plan file", "time", "statements"))
    rows = {row[file_col]["text"]: row for row in index.rows}
    for name in ("multi.json", "multi.array.json", "bitmap.json"):
        printed = _execution_ms(folder / name)
        assert printed is not None
        assert float(rows[name][time_col]["sort"]) == pytest.approx(printed, abs=1e-3)
        assert rows[name][time_col]["text"] == words.ms(printed)
    assert rows["multi.json"][stmt_col]["text"] == "2" and rows["bitmap.json"][stmt_col]["text"] == "1"


HOSTILE = '<img src=x onerror=alert(1)>&"q"#?.json'


def test_hostile_names_unreadable_files_and_non_plans(tmp_path):
    folder = tmp_path / "plans"
    folder.mkdir()
    real = PLANS / "postgresql" / "pg16" / "multi.json"
    shutil.copy(real, folder / HOSTILE)
    shutil.copy(real, folder / "plain.json")
    shutil.copy(real, folder / "clear\x1b[2Jscreen\u202eevil.json")  # ECMA-48 ESC, a direction override
    (folder / "broken.json").write_text('[{"Plan": {"Node Type": ', encoding="utf-8")
    shutil.copy(PLANS / "postgresql" / "manifest.json", folder / "manifest.json")
    shutil.copy(PLANS / "postgresql" / "pg16" / "multi.expected.json", folder / "multi.expected.json")
    shutil.copy(PLANS / "README.md", folder / "README.md")
    shutil.copy(PLANS / "capture_postgresql.py", folder / "capture.py")
    out = tmp_path / "review"
    run = _cli("check", str(folder), "--out", str(out))
    assert run.returncode == 1, run.stderr  # multi.json has origins at 30x and 50x (its fixture)
    page = (out / "index.html").read_text(encoding="utf-8")
    assert "<img" not in page and "&lt;img src=x onerror=alert(1)&gt;&amp;&quot;q&quot;#?.json" in page
    index = _read_index(out / "index.html")
    names = [row[0]["text"] for row in index.rows]
    assert sorted(names) == sorted([HOSTILE, "plain.json", "clear\\x1b[2Jscreen\\u202eevil.json"])
    assert "\x1b" not in run.stdout and "\u202e" not in run.stdout and "\u202e" not in page
    assert "clear\\x1b[2Jscreen\\u202eevil.json: postgresql" in run.stdout
    hostile_row = index.rows[names.index(HOSTILE)]
    href = hostile_row[0]["href"]
    assert not re.search(r'[<>"#?&]', href)  # percent-encoded: one relative path, no query or fragment
    assert (out / unquote(href)).is_file()
    # the one truly unreadable file is listed with its one-line reason; the non-plans are not
    assert len(index.unreadable) == 1 and index.unreadable[0].startswith("broken.json")
    assert "broken.json: unreadable:" in run.stdout
    for name in ("manifest.json", "multi.expected.json", "README.md", "capture.py"):
        assert name not in run.stdout and name not in page
    assert "4 files skipped" in run.stdout


def test_the_sorting_script_is_present_and_allowed_by_its_hash(tmp_path):
    out = tmp_path / "review"
    run = _cli("check", str(PLANS / "mysql"), "--out", str(out))
    assert run.returncode in (0, 1), run.stderr
    index = _read_index(out / "index.html")
    assert len(index.scripts) == 1 and "sortBy" in index.scripts[0]
    digest = base64.b64encode(hashlib.sha256(index.scripts[0].encode("utf-8")).digest()).decode()
    assert f"script-src 'sha256-{digest}'" in index.policy and "default-src 'none'" in index.policy
    page = (out / "index.html").read_text(encoding="utf-8")
    assert "http://" not in page and "https://" not in page  # no external asset
    assert index.headings == ["plan file", "engine", "statements", "operators", "origins", "worst error",
                              "top cause", "time"]
    number_columns = [index.headings.index(h) for h in ("statements", "operators", "origins", "worst error",
                                                        "time")]
    for row in index.rows:
        for column in number_columns:
            float(row[column]["sort"])  # every numeric cell sorts by a number


def test_demo_writes_the_index(tmp_path):
    out = tmp_path / "demo"
    run = _cli("demo", "--plans", str(PLANS / "mariadb"), "--out", str(out))
    assert run.returncode == 0, run.stderr
    index = _read_index(out / "index.html")
    assert len(index.rows) == len(_fixtures(PLANS / "mariadb"))
    # the worst error and top cause are said in the report's words
    worst_col, cause_col = index.headings.index("worst error"), index.headings.index("top cause")
    for row in index.rows:
        if float(row[worst_col]["sort"]) > 0:
            assert re.fullmatch(r"×[\d,.]+( million| billion)? too (low|high)", row[worst_col]["text"])
            assert row[cause_col]["text"] in set(words.CAUSE_WORDS.values()) | {"not diagnosed"}


def test_a_folder_refuses_single_plan_options_and_an_empty_one_is_refused(tmp_path):
    empty = tmp_path / "empty"
    empty.mkdir()
    (empty / "notes.md").write_text("not a plan\n", encoding="utf-8")
    run = _cli("check", str(empty), "--out", str(tmp_path / "o"))
    assert run.returncode == 2 and "no plan file" in run.stderr and "Traceback" not in run.stderr
    run = _cli("check", str(PLANS / "mysql"), "--html", str(tmp_path / "x.html"))
    assert run.returncode == 2 and "--html" in run.stderr
    run = _cli("check", str(PLANS / "mysql" / "8.0-filter.txt"), "--out", str(tmp_path / "o"))
    assert run.returncode == 2 and "--out" in run.stderr
    run = _cli("check", str(PLANS / "mysql"), "--out", str(tmp_path / "o"), "--threshold", "0.5")
    assert run.returncode == 2 and "--threshold" in run.stderr and not run.stdout  # once, not a line a file


# -- in a real browser, offline --------------------------------------------------------------

@pytest.mark.browser
def test_the_index_sorts_in_a_browser_offline_and_links_to_each_review(tmp_path):
    """Chromium (tests/browser_harness.py) opens the index from file:// with the network blocked:
    a click on a heading sorts by it (the fixtures' operator counts give the expected order),
    a second click reverses it, the CSP lets the sorting script run, and a row's link opens
    its review, drawn."""
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from browser_harness import browser_context, offline, require_chromium

    require_chromium()
    folder = tmp_path / "plans"
    shutil.copytree(PLANS / "mariadb", folder)
    shutil.copy(PLANS / "postgresql" / "pg16" / "multi.json", folder / HOSTILE)
    expected = _fixtures(PLANS / "mariadb")
    expected[HOSTILE] = {"operators": 6}  # plans/postgresql/pg16/multi.expected.json
    out = tmp_path / "review"
    run = _cli("check", str(folder), "--out", str(out))
    assert run.returncode in (0, 1), run.stderr
    with browser_context() as context:
        blocked = offline(context)
        page = context.new_page()
        errors, console, dialogs = [], [], []
        page.on("pageerror", lambda e: errors.append(str(e)))
        page.on("console", lambda m: console.append(m.text) if m.type == "error" else None)
        page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
        page.goto((out / "index.html").as_uri())

        def column(number: int) -> list[str]:
            return page.locator("#pv-index tbody tr").evaluate_all(
                f"rows => rows.map(r => r.cells[{number}].textContent)")

        files = column(0)
        assert sorted(files) == sorted(expected)
        operators = [int(expected[f]["operators"]) for f in files]
        page.get_by_role("button", name="operators").click()
        sorted_files = column(0)
        assert [expected[f]["operators"] for f in sorted_files] == sorted(operators)
        assert page.locator("th", has=page.get_by_role("button", name="operators")).get_attribute(
            "aria-sort") == "ascending"
        page.get_by_role("button", name="operators").click()
        assert [expected[f]["operators"] for f in column(0)] == sorted(operators, reverse=True)
        page.get_by_role("button", name="plan file").click()
        assert column(0) == sorted(files, key=str.lower)
        page.get_by_role("link", name=HOSTILE).click()
        page.wait_for_selector(".pv-review[data-drawn]", timeout=15_000)
        assert page.url.startswith((out).as_uri())
        assert not errors and not dialogs and not blocked
        assert not [m for m in console if "Content Security Policy" in m]
        page.close()


def test_check_folder_json_lists_the_rows_the_unreadable_and_the_skipped(tmp_path):
    folder = tmp_path / "plans"
    folder.mkdir()
    shutil.copy(PLANS / "mysql" / "8.0-filter.txt", folder / "filter.txt")
    shutil.copy(PLANS / "mysql" / "README.md", folder / "README.md")
    (folder / "empty.json").write_text("", encoding="utf-8")
    run = _cli("check", str(folder), "--out", str(tmp_path / "review"), "--json")
    assert run.returncode == 0, run.stderr  # the MySQL manual's example has no origin (its fixture)
    doc = json.loads(run.stdout)
    assert [p["file"] for p in doc["plans"]] == ["filter.txt"]
    assert doc["plans"][0]["values"]["operators"] == 2  # plans/mysql/8.0-filter.expected.json
    assert [u["file"] for u in doc["unreadable"]] == ["empty.json"] and doc["unreadable"][0]["reason"]
    assert doc["skipped"] == ["README.md"]
    assert (tmp_path / "review" / doc["plans"][0]["review"]).is_file()
