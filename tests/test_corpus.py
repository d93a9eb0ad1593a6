"""Every engine's own output: plans from the engines' manuals and regression suites.

Each file under tests/corpus/ is one plan as the engine (or its test suite) printed it;
tests/corpus/sources.json names its repository and path or manual page, the statement, and
what planview must do with it: read it into the node count counted by hand, or refuse it
with one clear line. Where planview is wrong today the case is xfail(strict=True) with the
reason, so that a fix shows up as an unexpected pass to un-mark.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import planview
from planview import PlanParseError

CORPUS = Path(__file__).parent / "corpus"
SOURCES = json.loads((CORPUS / "sources.json").read_text(encoding="utf-8"))["files"]
ROOT = Path(__file__).resolve().parent.parent

# Files planview gets wrong today, with what goes wrong (none at present).
KNOWN_WRONG: dict[str, str] = {}


def _case(name: str):
    marks = [pytest.mark.xfail(strict=True, reason=KNOWN_WRONG[name])] if name in KNOWN_WRONG else []
    return pytest.param(name, id=name, marks=marks)


def _files(**flags) -> list[str]:
    return sorted(n for n, s in SOURCES.items() if all(s.get(k) == v for k, v in flags.items()))


def test_every_corpus_file_has_a_source_and_every_source_a_file():
    on_disk = {str(p.relative_to(CORPUS)) for p in CORPUS.rglob("*") if p.is_file() and p.name != "sources.json"}
    assert on_disk == set(SOURCES)
    for name, source in SOURCES.items():
        assert source.get("repository") and source.get("statement") and source.get("shows"), name
        assert source["expect"] in ("reads", "refuse"), name
        assert ("node_count" in source) == (source["expect"] == "reads"), name


@pytest.mark.parametrize("name", [_case(n) for n in sorted(SOURCES)])
def test_corpus_plan(name):
    source = SOURCES[name]
    path = CORPUS / name
    if source["expect"] == "refuse":
        with pytest.raises(PlanParseError) as caught:
            planview.load(path)
        message = str(caught.value)
        assert "\n" not in message and "line" in message, message
        return
    plan = planview.load(path)
    assert len(plan.nodes) == source["node_count"], [n.label for n in plan.nodes]


# -- the issue's specific items, each on the engines' own plans -------------------------


@pytest.mark.parametrize("name", _files(null_table=True))
def test_mariadb_null_table_is_not_a_table_named_null(name):
    """analyze_stmt.result: 'Impossible WHERE', 'Deleting all rows' rows carry no table."""
    try:
        plan = planview.load(CORPUS / name)
    except PlanParseError as exc:
        pytest.fail(f"refused: {exc}")
    assert all((node.relation or "").upper() != "NULL" and node.label.strip() != "NULL"
               for node in plan.nodes), [(n.label, n.relation) for n in plan.nodes]
    printed = (CORPUS / name).read_text().splitlines()[1].split("\t")[-1]
    assert [n.extra.get("message") for n in plan.nodes] == [printed]


def test_mariadb_range_checked_for_each_record_reads():
    """analyze_format_json.result, MDEV-7833: the wrapped table is an ordinary table access."""
    plan = planview.load(CORPUS / "mariadb/suite-analyze-json-range-checked.json")
    relations = [n.relation for n in plan.nodes if n.relation]
    assert relations == ["t1", "t2"]
    assert len(plan.nodes) == 3
    t2 = next(n for n in plan.nodes if n.relation == "t2")
    # r_loops 5, r_rows 203.8 per loop, r_filtered 98.13542689 (the suite's figures)
    assert t2.starts == 5 and t2.actual_rows == pytest.approx(203.8 * 0.9813542689)
    assert t2.extra["range-checked-for-each-record"]["keys"] == ["key1", "key2", "key3", "key4"]


@pytest.mark.parametrize("name", [n for n in _files() if n.startswith("mariadb/") and n.endswith(".json")
                                  and "REPLACED" in (CORPUS / n).read_text()])
def test_mariadb_masked_timings_read_as_unknown_with_a_note(name):
    """analyze_format_json.result replaces every timing with "REPLACED": the rows stay readable."""
    plan = planview.load(CORPUS / name)
    assert any("masked" in note and "REPLACED" in note for note in plan.notes), plan.notes
    assert all(n.actual_total_ms is None for n in plan.nodes)


def test_mariadb_masked_rows_are_unknown_not_never_executed():
    doc = json.loads((CORPUS / "mariadb/suite-analyze-json-single-table.json").read_text())
    doc["query_block"]["nested_loop"][0]["table"]["r_rows"] = "REPLACED"  # as the suite masks a varying count
    node = planview.load(json.dumps(doc)).nodes[0]
    assert node.actual_total is None and node.not_judged_reason != "never executed"


@pytest.mark.parametrize("name", [n for n in _files(costs_off=True) if "-analyze-" not in n])
def test_costs_off_without_analyze_is_not_refused_as_not_a_query_plan(name):
    try:
        planview.load(CORPUS / name)
    except PlanParseError as exc:
        assert "not look like a query plan" not in str(exc), str(exc)
        raise


@pytest.mark.parametrize("name", _files(costs_off=True))
def test_costs_off_plans_carry_a_plan_level_note_that_estimates_are_missing(name):
    """EXPLAIN (COSTS OFF) prints no estimates: there is nothing to judge, and the plan says so."""
    plan = planview.load(CORPUS / name)
    assert any("estimate" in note.lower() for note in plan.notes), plan.notes
    assert not plan.findings
    assert not any(n.judged for n in plan.nodes)


@pytest.mark.parametrize("name", _files(all_actuals_zero=True))
def test_all_zero_actuals_are_not_described_as_explain_without_analyze(name):
    plan = planview.load(CORPUS / name)
    assert plan.has_actuals
    assert not any("without analyze" in note.lower() for note in plan.notes), plan.notes


def test_masked_loops_are_unknown_not_one_loop_and_not_never_executed():
    """memoize.out prints loops=N: the rows per loop are real, the loops (so the totals) unknown."""
    plan = planview.load(CORPUS / "postgresql/regress-memoize-analyze-costs-off.txt")
    assert [n.actual_rows for n in plan.nodes] == [80, 40, 2, 2]
    assert all(n.starts is None and n.actual_total is None and not n.judged for n in plan.nodes)
    assert all(n.not_judged_reason != "never executed" for n in plan.nodes)
    assert any("masked" in note for note in plan.notes), plan.notes


def test_mysql_masked_figures_are_unknown_with_a_note():
    """The suite prints '(...)' for each line's figures: the tree reads, nothing is judged."""
    plan = planview.load(CORPUS / "mysql/suite-explain-tree-masked-numbers.txt")
    assert all(n.est_rows is None and not n.judged for n in plan.nodes)
    assert any("masked" in note for note in plan.notes) and not plan.findings


def test_mysql_cost_printed_as_a_range_reads_both_costs():
    """MySQL 8.0 prints a start-up cost apart for a materialized table's scan, as
    ``(cost=2.5..2.5 rows=0)`` (the form from memory of MySQL 8.0's EXPLAIN ANALYZE output; no
    copy of it was found in the engine's manual or test results, so no corpus file)."""
    plan = planview.load("-> Sort: ta.count DESC  (cost=2.6..2.6 rows=0) (actual time=1.75..1.75 rows=10 loops=1)\n"
                         "    -> Table scan on ta  (cost=2.5..3.5 rows=0) (actual time=1.74..1.74 rows=10 loops=1)\n")
    assert plan.engine == "mysql"
    assert [(n.startup_cost, n.total_cost, n.est_rows, n.actual_rows) for n in plan.nodes] == [
        (2.6, 2.6, 0.0, 10.0), (2.5, 3.5, 0.0, 10.0)]


def _cli(*args: str) -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "planview.cli", *args], capture_output=True,
                          text=True, env=env, cwd=ROOT, timeout=120)


def test_forced_text_format_on_a_json_plan_exits_2():
    """explain.out's JSON plan forced through the text reader must be refused, not read as '[' and ']'."""
    run = _cli("check", str(CORPUS / "postgresql/regress-explain-json-analyze-zeroed.json"), "--format", "text")
    assert run.returncode == 2, run.stdout
    assert run.stderr.count("\n") == 1 and "Traceback" not in run.stderr, run.stderr
    assert "json" in run.stderr and "'text'" in run.stderr, run.stderr


@pytest.mark.parametrize("option, valid", [("--format", ("text", "json")), ("--engine", ("postgresql", "mariadb"))])
def test_a_bad_option_value_names_the_option_and_lists_the_valid_values(option, valid):
    run = _cli("check", str(CORPUS / "postgresql/manual-using-explain-analyze-nestloop.txt"), option, "bogus")
    assert run.returncode == 2
    assert option in run.stderr and all(v in run.stderr for v in valid), run.stderr


@pytest.mark.parametrize("spelling", ["postgres", "pg", "PostgreSQL"])
def test_engine_postgres_is_accepted_for_postgresql(spelling):
    run = _cli("check", str(CORPUS / "postgresql/manual-using-explain-analyze-nestloop.txt"), "--engine", spelling)
    assert run.returncode in (0, 1), run.stderr
    assert "postgresql" in run.stdout.splitlines()[0]


@pytest.mark.parametrize("name, spelling", [("mariadb/suite-analyze-stmt-bnl-join.txt", "MariaDB"),
                                            ("mysql/suite-explain-tree-weedout.txt", "MySQL"),
                                            ("postgresql/manual-using-explain-merge-join.txt", "pg")])
def test_engine_spellings_name_the_engine(name, spelling):
    assert planview.load(CORPUS / name, engine=spelling).engine == name.split("/")[0]


def test_a_format_the_forced_engine_does_not_read_names_both_options():
    run = _cli("check", str(CORPUS / "postgresql/manual-using-explain-analyze-nestloop.txt"),
               "--engine", "postgresql", "--format", "table")
    assert run.returncode == 2 and run.stderr.count("\n") == 1, run.stderr
    assert "--format" in run.stderr and "--engine" in run.stderr and "yaml" in run.stderr, run.stderr
