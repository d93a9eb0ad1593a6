"""The terminal report on real plans: the shared caution once, ids and ranks apart, the
relation kept when a label is cut, --width, --query and a plain --help with the exit codes."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import planview
from planview import engines
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
