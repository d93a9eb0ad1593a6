"""The widget's Python side, the review entry points and the IPython magic, on captured plans."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import traitlets

import planview
from planview.export.html import compact_report
from planview.widget import PlanTree, PlanWidget, ReviewError, review

REPO = Path(__file__).resolve().parent.parent
PG16 = REPO / "plans" / "postgresql" / "pg16"


@pytest.fixture
def multi():
    return planview.load(PG16 / "multi.json")


def test_widget_syncs_the_report_and_the_selection(multi):
    w = PlanWidget(multi)
    assert isinstance(w.tree, PlanTree)
    assert w.tree.report == json.loads(json.dumps(compact_report(multi.report())))
    assert w.report is multi.report()
    assert w.tree.trait_metadata("report", "sync") and w.tree.trait_metadata("selected", "sync")
    # the review opens on the rank-1 origin
    top = min(multi.report()["findings"], key=lambda f: f["rank"])["node"]
    assert w.selected == top and w.tree.selected == top
    w.selected = None
    assert w.tree.selected is None
    origin = multi.report()["findings"][0]["node"]
    w.selected = origin
    assert w.tree.selected == origin
    w.tree.selected = 0  # what a click in the front end does
    assert w.selected == 0 and w.selected_node["id"] == 0
    with pytest.raises(traitlets.TraitError):
        w.selected = len(multi.report()["nodes"])
    assert w.selected == 0


def test_next_origin_walks_in_rank_order_and_wraps(multi):
    w = PlanWidget(multi)
    ranked = [f["node"] for f in sorted(multi.report()["findings"], key=lambda f: f["rank"])]
    assert w.selected == ranked[0]  # opened on the rank-1 origin
    seen = [w.next_origin() for _ in range(len(ranked))]
    assert seen == ranked[1:] + ranked[:1]
    assert w.next_origin(-1) == ranked[-1]
    w.selected = None
    assert w.next_origin() == ranked[0]


def test_mime_bundle_carries_widget_view_and_static_fallback(multi):
    bundle = PlanWidget(multi)._repr_mimebundle_()
    assert "application/vnd.jupyter.widget-view+json" in bundle
    assert bundle["text/html"] == multi._repr_html_()
    assert bundle["text/plain"] == repr(multi)
    assert not hasattr(multi, "_repr_mimebundle_")  # the core carries no notebook hook


def test_the_notebook_draws_the_same_svg_charts_as_the_exported_page(multi):
    """One chart implementation for the review: the widget asks the ES module for its SVG
    charts, as the exported page does (planview/export/html.py boots it with chart_mode svg)."""
    from planview.export.html import render_html

    w = PlanWidget(multi)
    assert w.tree.chart_mode == "svg" and w.children == (w.tree,)
    assert 'chart_mode: "svg"' in render_html(multi)
    assert PlanWidget(multi, charts=False).tree.chart_mode == "none"


def test_the_plotly_figure_kept_for_notebook_use_selects_on_click(multi):
    from planview.widget.charts import PlanCharts

    report = multi.report()
    picked = []
    charts = PlanCharts(report, pick=picked.append)
    scatter = charts.figure.data[3]
    ids = [int(c[0]) for c in scatter.customdata]
    assert ids == [n["id"] for n in report["nodes"] if n["judged"] and n["est_total"] is not None
                   and n["actual_total"] is not None]

    class Points:
        point_inds = [ids.index(report["findings"][0]["node"])]

    charts._clicked(scatter, Points(), None)
    assert picked == [report["findings"][0]["node"]]
    charts.highlight(picked[0])
    node = report["nodes"][picked[0]]
    ring = charts.figure.data[5]
    assert list(ring.x) == [max(node["est_total"], 1.0)] and list(ring.y) == [max(node["actual_total"], 1.0)]
    charts.highlight(None)
    assert list(charts.figure.data[5].x) == []


def test_chart_hover_labels_show_direction_and_control_characters_as_escapes():
    # U+202E (Unicode Standard Annex #9), ESC (ECMA-48), U+2028: each shown as an escape
    from plan_files import with_payloads

    from planview.widget.charts import PlanCharts

    name = "owners\u202egnp\x1b[2J\u2028x"
    plan = planview.load(json.dumps(with_payloads(PG16 / "nested_loop_inherited.json", {"Relation Name": name})))
    charts = PlanCharts(plan.report(), pick=lambda _id: None)
    labels = [str(c[1]) for trace in charts.figure.data[3:5] for c in trace.customdata]
    assert any("owners\\u202egnp\\x1b[2J\\u2028x" in label for label in labels), labels
    assert not any(ch in label for label in labels for ch in "\u202e\x1b\u2028")
    assert name in {n["relation"] for n in plan.report()["nodes"]}


def test_save_writes_page_and_ticket_and_answers_the_front_end(multi, tmp_path):
    w = PlanWidget(multi, save_dir=tmp_path)
    sent = []
    w.tree.send = sent.append
    w._on_front_message(w.tree, {"kind": "save"}, [])
    assert sent and sent[0]["kind"] == "saved"
    html_name, md_name = sent[0]["paths"]
    assert (tmp_path / html_name).read_text() == multi.to_html()
    assert (tmp_path / md_name).read_text() == multi.to_markdown()
    w._on_front_message(w.tree, {"kind": "save"}, [])
    assert len(sorted(tmp_path.glob("*.html"))) == 2  # a second save never overwrites the first
    blocked = tmp_path / "file"
    blocked.write_text("")
    w.save_dir = blocked / "sub"
    w._on_front_message(w.tree, {"kind": "save"}, [])
    assert sent[-1]["kind"] == "save-failed" and sent[-1]["message"]


def test_review_takes_text_path_or_plan(multi):
    text = (PG16 / "stale.text.txt").read_text()
    assert isinstance(review(text), PlanWidget)
    assert isinstance(review(PG16 / "stale.json"), PlanWidget)
    assert review(multi).plan is multi
    assert planview.review is not None and planview.review(multi).plan is multi
    assert review(text, threshold=1e9).report["findings"] == []


def test_review_of_bad_input_shows_one_line_not_a_traceback():
    result = review("SELECT 1; -- not a plan")
    assert isinstance(result, ReviewError) and not result
    assert "\n" not in repr(result) and repr(result).startswith("planview: ")
    assert "&lt;" in ReviewError(planview.PlanParseError("<b>x</b>"))._repr_html_()
    assert "x\\u202ey" in ReviewError(planview.PlanParseError("x\u202ey"))._repr_html_()
    with pytest.raises(planview.PlanParseError):
        review("SELECT 1; -- not a plan", errors="raise")


@pytest.fixture
def shell():
    from IPython.testing.globalipapp import get_ipython, start_ipython

    ip = start_ipython() or get_ipython()  # one shell per process; later calls get it back
    ip.run_line_magic("load_ext", "planview")
    yield ip
    ip.user_ns.pop("w", None)


def test_cell_magic_reviews_a_pasted_plan_with_options(shell):
    text = (PG16 / "join_correlated.text.txt").read_text()
    result = shell.run_cell_magic("planview", "--threshold 10 --name w", text)
    assert isinstance(result, PlanWidget) and shell.user_ns["w"] is result
    assert result.report == planview.load(text).report()
    strict = shell.run_cell_magic("planview", "-t 1e9", text)
    assert strict.report["findings"] == []
    forced = shell.run_cell_magic("planview", "--engine postgresql --format text", text)
    assert forced.plan.format == "text"


def test_line_magic_reviews_a_file(shell):
    result = shell.run_line_magic("planview", str(PG16 / "skewed.json"))
    assert isinstance(result, PlanWidget)
    assert result.report == planview.load(PG16 / "skewed.json").report()


def test_magic_prints_one_line_for_bad_input(shell, capsys):
    assert shell.run_cell_magic("planview", "", "this is not a plan") is None
    out = capsys.readouterr().out
    assert out.startswith("planview: ") and out.count("\n") == 1
    assert shell.run_cell_magic("planview", "--format xml", (PG16 / "stale.json").read_text()) is None
    assert capsys.readouterr().out.startswith("planview: ")
    assert shell.run_cell_magic("planview", "--name 1x", "x") is None
    assert "not a Python name" in capsys.readouterr().out


def test_load_ext_registers_the_review_as_a_plans_display(multi, shell):
    """After ``%load_ext planview`` a Plan as a cell's value is the widget review."""
    data, _ = shell.display_formatter.format(multi)
    assert "application/vnd.jupyter.widget-view+json" in data and data["text/html"] == multi._repr_html_()


def test_the_query_text_given_to_the_magic_or_review_reaches_the_report(shell, tmp_path, capsys):
    # a real capture (tests/pgharness.py's planted-correlation case on PostgreSQL 16)
    text = (PG16 / "join_correlated.text.txt").read_text()
    shell.user_ns["q_sql"] = "SELECT * FROM owners o JOIN pets p ON p.owner_id = o.id"
    result = shell.run_cell_magic("planview", "--query q_sql", text)
    assert result.report["statements"][0]["query_text"] == shell.user_ns["q_sql"]
    path = tmp_path / "q.sql"
    path.write_text("SELECT 42", encoding="utf-8")
    assert shell.run_cell_magic("planview", f"--query {path}", text).report["statements"][0]["query_text"] == "SELECT 42"
    assert shell.run_cell_magic("planview", "--query no_such_name", text) is None
    assert "--query 'no_such_name'" in capsys.readouterr().out
    widget = review(text, query="SELECT 7")
    assert widget.report["statements"][0]["query_text"] == "SELECT 7"
    shell.user_ns.pop("q_sql", None)
