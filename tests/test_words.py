"""One vocabulary: the words and number formats of planview/words.py, used by every view.

These are consistency checks of planview's own wording (no engine figure is involved): the
notebook's ES module formats an error factor exactly as the Python views do, no view says a
direction in words outside the one set, and counts agree with their noun.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest

import planview
from planview import words
from planview.export import html, markdown
from planview.textreport import render

ROOT = Path(__file__).resolve().parents[1]
JS = ROOT / "planview" / "widget" / "review.js"
# a real plan: TPC-H Q8 on PostgreSQL 16 (plans/capture_tpch.py)
PLAN = ROOT / "plans" / "tpch" / "pg16" / "q08.serial.json"
FACTORS = [1.0, 1.04, 2.0, 5.88, 9.96, 58823.5, 999_999.0, 1.2e6, 3.4e9, 1e15, 2.5e300]
OLD_WORDS = re.compile(r"too few est\.|too many est\.|\bunderestimated x|\d(?:\.\d+)?e\+\d\d|\b1 operators\b"
                       r"|\b1 origins\b|origin\(s\)")


@pytest.mark.skipif(shutil.which("node") is None, reason="Node.js is needed to run the ES module's formatter")
def test_the_widget_formats_factors_as_the_python_views_do(tmp_path):
    source = JS.read_text(encoding="utf-8")
    start = source.index("const ON_TARGET_LOG10")
    end = source.index("function ownMs(")
    script = tmp_path / "factor.mjs"
    script.write_text(source[start:end] + f"\nconsole.log(JSON.stringify({json.dumps(FACTORS)}.map(formatFactor)));"
                      + "\nconsole.log(JSON.stringify([[2, null], [-1.5, null], [0.01, 1.02]].map(([r, q]) => shortError(r, q))));",
                      encoding="utf-8")
    out = subprocess.run(["node", str(script)], capture_output=True, text=True, timeout=60, check=True).stdout.splitlines()
    assert json.loads(out[0]) == [words.factor(q) for q in FACTORS]
    assert json.loads(out[1]) == [words.error(2), words.error(-1.5), words.error(0.01, 1.02)]


def test_one_word_set_and_one_format():
    assert words.error(math_log10(58823.5), 58823.5) == "×58,824 too low"
    assert words.error(-math_log10(3), 3) == "×3.0 too high"
    assert words.error(0.01) == "on target"
    assert words.plural(1, "operator") == "1 operator" and words.plural(2, "origin") == "2 origins"
    assert words.added_words(1.0, is_join=True) == "join selectivity ×10 too low"


def math_log10(x):
    import math
    return math.log10(x)


def test_every_view_of_a_real_plan_speaks_the_same_words():
    plan = planview.load(PLAN)
    report = plan.report()
    assert report["words"]["direction"] == {"under": "too low", "over": "too high", "on_target": "on target"}
    finding = report["findings"][0]
    said = finding["text"]["added"]
    views = {"terminal": render(plan, width=160), "markdown": markdown.render_markdown(plan),
             "html": html.render_static_tree(plan)}
    assert said in views["terminal"]
    for name, text in views.items():
        assert not OLD_WORDS.search(text), (name, OLD_WORDS.search(text).group(0))
    for node in report["nodes"]:
        assert node["text"]["id"] == f"#{node['id']}"
        assert node["text"]["error"].endswith(("too low", "too high", "on target", "–"))


# WCAG 2.1 success criterion 1.4.3 (AA): text needs a contrast ratio of at least 4.5:1; the
# relative-luminance and contrast-ratio formulas are WCAG 2.1's own definitions.
GRID = [i / 20 for i in range(-100, 101)]  # log10 ratios from -5 to +5 (the scale clamps at ±4)


def _rgb(text: str) -> tuple[int, int, int]:
    return tuple(int(x) for x in re.findall(r"\d+", text))  # type: ignore[return-value]


def test_text_on_every_coloured_cell_meets_wcag_aa_contrast():
    from planview.export.common import contrast, ink_for, ratio_colour

    worst = min(contrast(_rgb(ratio_colour(t)), (0, 0, 0) if ink_for(t) == "#000000" else (255, 255, 255))
                for t in GRID)
    assert worst >= 4.5, worst


@pytest.mark.skipif(shutil.which("node") is None, reason="Node.js is needed to run the ES module")
def test_the_widget_picks_the_same_ink_and_colour(tmp_path):
    from planview.export.common import ink_for, ratio_colour

    script = tmp_path / "ink.mjs"
    script.write_text(f"import {{ inkFor, ratioColour }} from {json.dumps(JS.as_uri())};\n"
                      f"const grid = {json.dumps(GRID)};\n"
                      "console.log(JSON.stringify(grid.map((t) => [ratioColour(t), inkFor(t)])));\n", encoding="utf-8")
    out = subprocess.run(["node", str(script)], capture_output=True, text=True, timeout=60, check=True).stdout
    assert json.loads(out) == [[ratio_colour(t), ink_for(t)] for t in GRID]


# -- the review's pure helpers, run in node on real reports --------------------------------------

NODE = pytest.mark.skipif(shutil.which("node") is None, reason="Node.js is needed to run the ES module")
PG16 = ROOT / "plans" / "postgresql" / "pg16"
Q22 = ROOT / "plans" / "tpch" / "pg16" / "q22.serial.txt"  # TPC-H Q22 on PostgreSQL 16


def _run_module(tmp_path, body: str, data) -> object:
    script = tmp_path / "helpers.mjs"
    script.write_text(f"import * as pv from {json.dumps(JS.as_uri())};\n"
                      f"const data = JSON.parse({json.dumps(json.dumps(data))});\n{body}\n", encoding="utf-8")
    out = subprocess.run(["node", str(script)], capture_output=True, text=True, timeout=60, check=True).stdout
    return json.loads(out)


def _fields(node) -> str:
    """What the find box is documented to read (review.js searchText), joined and lower-cased."""
    keys = ("label", "operator", "relation", "alias", "schema", "index", "cte_name", "subplan_name", "function_name")
    parts = [node[k] for k in keys if node.get(k)] + [c["text"] for c in node["conditions"] if c.get("text")]
    return "\n".join(parts).lower()


@NODE
def test_search_matches_the_documented_fields_and_ids(tmp_path):
    """Source: the report of plans/tpch/pg16/q22.serial.txt; each query's matches are worked out
    here from the nodes' fields, apart from the module."""
    nodes = planview.load(Q22).report()["nodes"]
    queries = ["customer", "CUSTOMER", "c_acctbal", "seq scan", "#5", "#99", "  orders ", "", "zzz", "$0"]
    got = _run_module(tmp_path, "console.log(JSON.stringify(data.queries.map((q) => pv.matchNodes(data.nodes, q))));",
                      {"nodes": nodes, "queries": queries})
    for query, ids in zip(queries, got):
        needle = query.strip().lower()
        if not needle:
            expected = []
        elif re.fullmatch(r"#\d+", needle):
            expected = [n["id"] for n in nodes if n["id"] == int(needle[1:])]
        else:
            expected = [n["id"] for n in nodes if needle in _fields(n)]
        assert ids == expected, query
    assert got[0] and got[4] == [5] and got[5] == [] and got[8] == []
    counts = _run_module(tmp_path, "console.log(JSON.stringify([0, 1, 2, 1234].map(pv.matchCount)));", {})
    assert counts == ["no match", "1 match", "2 matches", "1,234 matches"]


@NODE
def test_the_detail_helpers_drop_repeats_and_empty_fields(tmp_path):
    """On every finding of the PG 16 captures: the evidence table keeps no figure the numbers
    table shows, no empty value, no nested record; a join's single table is dropped; the line
    restating the numbers goes; the summary loses the cause key in front."""
    findings, joins = [], []
    for path in sorted(PG16.glob("*.json")):
        if path.name.endswith(".expected.json"):
            continue
        try:
            report = planview.load(path).report()
        except planview.PlanviewError:
            continue
        for f in report["findings"]:
            node = report["nodes"][f["node"]]
            is_join = node["own_rule"] == "join" or bool(node["join_type"])
            findings.append({"finding": f, "isJoin": is_join})
            joins.append(is_join)
    assert any(joins) and not all(joins)
    got = _run_module(tmp_path, """console.log(JSON.stringify(data.map(({ finding, isJoin }) => ({
        pairs: pv.evidencePairs(finding.evidence, { isJoin, lines: finding.evidence.lines || [] }),
        lines: pv.evidenceLines(finding.evidence.lines),
        summary: pv.summaryText(finding)}))));""", findings)
    numbers = {"est rows", "actual rows", "starts", "est rows per start", "actual rows per start", "q error"}
    for item, out in zip(findings, got):
        finding = item["finding"]
        keys = [k for k, _ in out["pairs"]]
        assert not set(keys) & numbers, keys
        assert all(str(v).strip() for _, v in out["pairs"]), out["pairs"]
        assert "clauses" not in keys and "default" not in keys  # nested records stay out of the table
        if item["isJoin"]:
            assert "table" not in keys
        for key, value in finding["evidence"].items():
            if value in ([], None, "", {}):
                assert key.replace("_", " ") not in keys, key
        said = finding["evidence"].get("lines") or []
        # the one line saying "Estimated N rows, found M: the estimate is ×F ..." (the status
        # line and the numbers table say it) goes; "Estimated selectivity ..." and the rest stay
        restated = [line for line in said if re.match(r"Estimated [\d,.]+ rows?, found [\d,.]+", line)]
        assert len(restated) <= 1
        assert out["lines"] == [line for line in said if line not in restated], said
        cause_key = (finding["cause"] or "").replace("_", " ")
        assert not out["summary"].lower().startswith(f"{cause_key}:"), out["summary"]
        assert out["summary"].lower() in finding["summary"].lower()


@NODE
def test_the_review_opens_on_the_rank_one_origin(tmp_path):
    reports = [planview.load(p).report() for p in (Q22, PG16 / "multi.json", PG16 / "well_estimated.json")]
    data = [{"findings": r["findings"]} for r in reports]
    got = _run_module(tmp_path, "console.log(JSON.stringify(data.map(pv.topOrigin)));", data)
    assert got == [min(r["findings"], key=lambda f: f["rank"])["node"] if r["findings"] else None for r in reports]
    assert got[-1] is None
