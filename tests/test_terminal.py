"""The terminal report on real plans: the shared caution once, ids and ranks apart, the
relation kept when a label is cut, --width, --query and a plain --help with the exit codes."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest
from plan_files import raw_json_statements

import planview
from planview import engines, words
from planview.textreport import render

ROOT = Path(__file__).resolve().parents[1]
# real captures (plans/capture_tpch.py): DuckDB's TPC-H Q17 profile has several origins,
# PostgreSQL 16's Q8 a deep tree of 22 operators
MANY_ORIGINS = ROOT / "plans" / "tpch" / "duckdb" / "q17.profile.json"
DEEP = ROOT / "plans" / "tpch" / "pg16" / "q08.serial.json"


def _cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "planview.cli", *args], capture_output=True, text=True,
                          timeout=120, cwd=ROOT)


def test_a_caution_shared_by_many_origins_is_printed_once():
    plan = planview.load(MANY_ORIGINS)
    assert len(plan.findings) >= 2
    text = render(plan, width=160)
    cautions = {f.caution for f in plan.findings if f.caution}
    for caution in cautions:
        assert text.count(caution) == 1
    ranks = re.findall(r"^origin (\d+) at #(\d+) ", text, re.M)
    assert [int(r) for r, _ in ranks] == list(range(1, len(plan.findings) + 1))
    assert [int(n) for _, n in ranks] == [f.node for f in plan.findings]


def test_a_cut_label_keeps_the_relation_and_the_width_is_honoured():
    plan = planview.load(DEEP)
    deepest = max(plan.nodes, key=lambda n: n.depth)
    text = render(plan, width=120)
    row = next(line for line in text.splitlines() if re.match(rf"\s*#{deepest.id}\s", line))
    assert deepest.relation and deepest.relation[-3:] in row
    for width in (120, 160, 200):
        rows = [line for line in render(plan, width=width).splitlines() if re.match(r"\s*#\d+\s", line)]
        label_cut = any("~" in line for line in rows)
        assert label_cut or width > 120
        assert max(len(line) for line in rows) <= width + 40  # the mark column may run past


def test_query_text_given_on_the_command_line_is_shown(tmp_path):
    sql = tmp_path / "q8.sql"
    sql.write_text("SELECT o_year, sum(volume)\nFROM all_nations GROUP BY o_year\n", encoding="utf-8")
    out = _cli("check", str(DEEP), "--query", str(sql), "--width", "150", "--fail-at", "1e9")
    assert out.returncode == 0, out.stderr
    assert "query: SELECT o_year, sum(volume)" in out.stdout
    md = tmp_path / "ticket.md"
    _cli("check", str(DEEP), "--query", str(sql), "--markdown", str(md), "--fail-at", "1e9")
    assert "FROM all_nations GROUP BY o_year" in md.read_text(encoding="utf-8")
    missing = _cli("check", str(DEEP), "--query", str(tmp_path / "nope.sql"))
    assert missing.returncode == 2 and len(missing.stderr.strip().splitlines()) == 1
    assert "--query" in missing.stderr


def test_help_is_plain_text_with_exit_codes_and_valid_values():
    out = _cli("check", "--help")
    assert out.returncode == 0
    assert "\x1b" not in out.stdout
    for code in ("0 ", "1 ", "2 ", "3 "):
        assert re.search(rf"^\s+{code}", out.stdout, re.M), code
    flat = " ".join(out.stdout.split())
    for name in engines.names() if hasattr(engines, "names") else ("duckdb", "mariadb", "mysql", "postgresql"):
        assert name in flat
    for fmt in ("json", "text", "xml", "yaml"):
        assert fmt in flat


# -- a paste of several statements, and one time format ---------------------------------------

MULTI = ROOT / "plans" / "postgresql" / "pg16" / "multi.json"  # two statements (plans/README.md)


def test_a_paste_of_several_statements_is_shown_statement_by_statement():
    raw = raw_json_statements(MULTI)
    assert len(raw) == 2
    plan = planview.load(MULTI)
    report = plan.report()
    execution = [s["Execution Time"] for s in raw]
    planning = [s["Planning Time"] for s in raw]
    # the JSON report sums what the engine printed for each statement
    assert report["execution_ms"] == pytest.approx(sum(execution), abs=1e-6)
    assert report["total_ms"] == pytest.approx(sum(execution), abs=1e-6)
    assert report["planning_ms"] == pytest.approx(sum(planning), abs=1e-6)
    text = render(plan, width=160)
    lines = text.splitlines()
    assert f"time: {words.ms(sum(execution))}, the sum of 2 statements " \
           f"({words.ms(execution[0])} + {words.ms(execution[1])})" in text
    first = lines.index(f"== statement 1 of 2, ran {words.ms(execution[0])}, planning {words.ms(planning[0])}")
    second = lines.index(f"== statement 2 of 2, ran {words.ms(execution[1])}, planning {words.ms(planning[1])}")
    # each statement's root sits right under its heading: the raw plans' top operators
    assert raw[0]["Plan"]["Node Type"] in lines[first + 1] and raw[1]["Plan"]["Node Type"] in lines[second + 1]
    # the origins name their statement: the first statement's scan of owners, the second's of invoices
    # (the case's fixture, plans/postgresql/pg16/multi.expected.json)
    origin_lines = [line for line in lines if re.match(r"origin \d+ at #", line)]
    assert any("owners" in line and line.endswith("in statement 1") for line in origin_lines)
    assert any("invoices" in line and line.endswith("in statement 2") for line in origin_lines)


def test_every_time_cell_is_said_in_the_one_format():
    """The root's time with its inputs is PostgreSQL's Actual Total Time of the top operator
    (per loop, one loop here; the manual, "Using EXPLAIN"), printed as words.ms says."""
    raw = raw_json_statements(DEEP)[0]["Plan"]
    assert raw["Actual Loops"] == 1
    text = render(planview.load(DEEP), width=200)
    root_row = next(line for line in text.splitlines() if re.match(r"\s*#0\s", line))
    assert f" {words.ms(raw['Actual Total Time'])} " in root_row
    table = [line for line in text.splitlines() if re.match(r"\s*#\d+\s", line)]
    for line in table:  # two time cells per row, each a number with its unit
        assert len(re.findall(r"\d(?:[\d,.]*) (?:ms|s)\b", line)) == 2, line
    slowest = [line for line in text.splitlines() if re.match(r"\d+\. #\d+ ", line)]
    assert slowest
    for line in slowest:  # "19.2 ms own, 76.0%; 25.0 ms with its inputs": each time once, with its unit
        assert re.search(r": \d[\d,.]* (?:ms|s) own, [\d.]+%; \d[\d,.]* (?:ms|s) with its inputs", line), line
