"""The review in a real browser: inside JupyterLab, inside Notebook 7, and as the exported page
opened offline.

Chromium is Debian's, driven by Playwright (see tests/browser_harness.py). Locally a missing
browser skips these tests; in CI (CI=true) it fails them. Screenshots go to
example_notebooks/screenshots/.
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import sys
import tempfile
from contextlib import contextmanager
from pathlib import Path

import pytest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from browser_harness import (  # noqa: E402
    browser_context,
    jupyter_lab,
    jupyter_notebook,
    offline,
    require_chromium,
    run_all_cells,
    wait_kernel_idle,
)
from plan_files import is_capture, with_payloads  # noqa: E402

import planview  # noqa: E402

pytestmark = pytest.mark.browser

REPO = Path(__file__).resolve().parent.parent
PLANS = REPO / "plans" / "postgresql" / "pg16"
NOTEBOOK = REPO / "example_notebooks" / "review_walkthrough.ipynb"
SHOTS = REPO / "example_notebooks" / "screenshots"
FIRST_PLAN = PLANS / "multi.json"  # the plan the walkthrough's first review shows

# Markup and template strings put where a plan carries names and conditions. Each one, if it
# ever ran, would set window.__pvHit; none may become an element.
PAYLOADS = {
    "Relation Name": '<script>window.__pvHit = "script"</script>owners',
    "Alias": '<img src=x onerror="window.__pvHit = \'img\'">',
    "Index Name": '<svg onload="window.__pvHit = \'svg\'"></svg>idx',
    "Filter": "(town = '{{7*7}}' AND postcode = '${window.__pvHit = \"tpl\"}' OR x = '<b>bold</b>')",
}


@pytest.fixture(scope="module")
def browser():
    require_chromium()
    with browser_context() as context:
        yield context


def _origin_finding(report, node_id):
    return next(f for f in report["findings"] if f["node"] == node_id)


def _hostile_plan(tmp_path: Path) -> Path:
    """A captured PG 16 plan with its names and filters replaced by the payloads."""
    path = tmp_path / "hostile.json"
    path.write_text(json.dumps(with_payloads(PLANS / "nested_loop_inherited.json", PAYLOADS)))
    return path


@contextmanager
def exported_page(browser, plan, path: Path):
    """The plan's exported review opened from file:// with the network blocked, drawn; yields
    the page and what it tried: (page, blocked requests, dialogs, page errors)."""
    plan.to_html(path)
    page = browser.new_page()
    blocked = offline(browser)
    dialogs, errors = [], []
    page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    page.on("pageerror", lambda e: errors.append(str(e)))
    try:
        page.goto(path.as_uri())
        page.wait_for_selector(".pv-review[data-drawn]", timeout=10_000)
        yield page, blocked, dialogs, errors
    finally:
        browser.unroute("**/*")
        page.close()


def _shown_rows(page) -> set[int]:
    return {int(x) for x in page.locator(".pv-tree .pv-row[data-id]").evaluate_all(
        "rows => rows.map(r => r.getAttribute('data-id'))")}


def _ancestors(by_id: dict, node_ids) -> set[int]:
    """Every ancestor of the given nodes (the path down to each)."""
    out = set()
    for node_id in node_ids:
        node = by_id[node_id]
        while node["parent"] is not None:
            out.add(node["parent"])
            node = by_id[node["parent"]]
    return out


# -- the exported page, offline ------------------------------------------------------------------

def test_export_page_offline_renders_selects_and_keeps_markup_as_text(browser, tmp_path):
    plan = planview.load(_hostile_plan(tmp_path))
    report = plan.report()
    assert report["findings"], "the captured plan should still have its origin"
    with exported_page(browser, plan, tmp_path / "review.html") as (page, blocked, dialogs, errors):
        rows = page.locator(".pv-tree .pv-row[data-id]")
        assert rows.count() == len(report["nodes"])
        # selecting an origin shows its cause and its fix with the caution beside it
        origin = report["findings"][0]["node"]
        finding = _origin_finding(report, origin)
        page.locator(f'.pv-row[data-id="{origin}"]').click()
        detail = page.locator(".pv-detail")
        assert page.locator(f'.pv-row[data-id="{origin}"]').get_attribute("aria-selected") == "true"
        assert detail.locator(".pv-cause").get_attribute("data-cause") == (finding["cause"] or "")
        if finding["fix"]:
            assert detail.locator(".pv-fix").inner_text().strip() == finding["fix"].strip()
            assert (finding["caution"] or "")[:40] in detail.locator(".pv-caution").inner_text()
        assert page.evaluate("location.hash") == f"#node-{origin}"
        # the inherited error links to its origin
        inherited = next(n for n in report["nodes"] if n["inherits_from"])
        page.locator(f'.pv-row[data-id="{inherited["id"]}"]').click()
        detail.locator(".pv-origin-link").first.click()
        assert page.locator(".pv-row.pv-selected").get_attribute("data-id") == str(inherited["inherits_from"][0])
        # the charts: a click on a point selects its node
        judged = next(n for n in report["nodes"] if n["judged"] and not n["origin"])
        page.locator(f'circle.pv-point[data-id="{judged["id"]}"]').first.click(force=True)
        assert page.locator(".pv-row.pv-selected").get_attribute("data-id") == str(judged["id"])
        # every payload is on the page as text, none as an element, none ran
        page.locator(f'.pv-row[data-id="{origin}"]').click()
        text = page.locator(".pv-review").inner_text()
        for payload in ("{{7*7}}", "${window.__pvHit", "<b>bold</b>"):
            assert payload in text
        assert "<script>" in page.locator(".pv-tree").inner_text() or "<img" in page.locator(".pv-tree").inner_text()
        found = page.evaluate("""() => ({
            hit: window.__pvHit === undefined ? null : String(window.__pvHit),
            scripts: document.querySelectorAll('script').length,
            imgs: document.querySelectorAll('img').length,
            bold: document.querySelectorAll('b').length,
            foreignSvg: [...document.querySelectorAll('svg')].filter(s => !s.classList.contains('pv-chart')).length,
            handlers: [...document.querySelectorAll('*')].filter(e => [...e.attributes].some(a => /^on/i.test(a.name))).length,
        })""")
        assert found == {"hit": None, "scripts": 2, "imgs": 0, "bold": 0, "foreignSvg": 0, "handlers": 0}
        assert dialogs == [] and errors == []
        assert blocked == []
        SHOTS.mkdir(parents=True, exist_ok=True)
        page.screenshot(path=str(SHOTS / "export-offline.png"), full_page=True)


# A direction override (Unicode Standard Annex #9), an ECMA-48 erase-screen sequence and a line
# separator in a table name; the page must show each as an escape and reorder nothing.
CONTROL_NAME = "owners\u202egnp.exe\x1b[2J\u2028tail"
# (innerText itself puts a tab between table cells, so the tab is left out here)
RAW = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069\u200b-\u200f\u061c\u2028\u2029\ufeff]")


def test_exported_page_shows_control_and_direction_characters_as_escapes(browser, tmp_path):
    path = tmp_path / "controls.json"
    path.write_text(json.dumps(with_payloads(PLANS / "nested_loop_inherited.json", {"Relation Name": CONTROL_NAME})))
    plan = planview.load(path)
    report = plan.report()
    node = next(n for n in report["nodes"] if n["relation"] == CONTROL_NAME and n["judged"])
    shown = "owners\\u202egnp.exe\\x1b[2J\\u2028tail"
    with exported_page(browser, plan, tmp_path / "controls.html") as (page, blocked, dialogs, errors):
        page.locator(f'.pv-row[data-id="{node["id"]}"]').click()
        text = page.locator("body").inner_text()
        assert not RAW.search(text), RAW.search(text)
        assert shown in page.locator(".pv-tree").inner_text()
        assert shown in page.locator(".pv-detail-title").inner_text()
        assert shown in page.locator(f'.pv-row[data-id="{node["id"]}"] .pv-label').get_attribute("title")
        page.locator(f'circle.pv-point[data-id="{node["id"]}"]').first.hover(force=True)
        assert shown in page.locator(".pv-readout").first.text_content()
        # the data the page carries is the report's own, real strings included
        relations = page.evaluate("() => JSON.parse(document.getElementById('planview-data').textContent)"
                                  ".report.nodes_packed.rows.flat()")
        assert CONTROL_NAME in relations
        finding = report["findings"][0]
        page.locator(f'.pv-row[data-id="{finding["node"]}"]').click()
        assert finding["fix"], "a name planview will not write into SQL still gets its comment-only fix"
        # the copy button copies the fix itself, not its shown form
        page.evaluate("""() => Object.defineProperty(navigator, 'clipboard', {configurable: true,
            value: {writeText: async (t) => { window.__pvCopied = t; }}})""")
        page.locator(".pv-copy").click()
        assert page.evaluate("window.isSecureContext")  # file:// is; the module then uses the clipboard
        page.wait_for_function("() => window.__pvCopied !== undefined", timeout=5_000)
        assert page.evaluate("window.__pvCopied") == finding["fix"]
        assert not RAW.search(page.locator("body").inner_text())
        assert dialogs == [] and errors == [] and blocked == []


def test_the_plan_as_pasted_shows_direction_characters_as_escapes(browser, tmp_path):
    """The "as pasted" block of a captured PG 16 plan whose table name carries U+202E and
    U+2028 raw in the file (Unicode Standard Annex #9; JSON leaves them unescaped): shown as
    escapes, never as markup, the rest of the text as it is."""
    path = tmp_path / "raw.json"
    path.write_text(json.dumps(with_payloads(PLANS / "nested_loop_inherited.json",
                                            {"Relation Name": "owners\u202egnp\u2028<b>x</b>"}), ensure_ascii=False),
                    encoding="utf-8")
    assert "\u202e" in path.read_text(encoding="utf-8")
    plan = planview.load(path)
    with exported_page(browser, plan, tmp_path / "raw.html") as (page, blocked, dialogs, errors):
        page.locator(".pv-source summary").click()
        pre = page.locator(".pv-source pre[data-filled]")
        pre.wait_for(timeout=10_000)
        shown = pre.evaluate("p => p.textContent")
        assert "owners\\u202egnp\\u2028<b>x</b>" in shown
        assert shown == path.read_text(encoding="utf-8").replace("\u202e", "\\u202e").replace("\u2028", "\\u2028")
        assert pre.locator("b").count() == 0
        assert not RAW.search(page.locator("body").inner_text())
        assert dialogs == [] and errors == [] and blocked == []


def test_export_page_shows_own_time_per_row_and_the_slowest_operators(browser, tmp_path):
    """Source: plans/tpch/pg16/q22.serial.txt (TPC-H Q22, PostgreSQL 16): the tree's own-time
    cells and the slowest list show the report's figures; selecting a row shows its times."""
    plan = planview.load(Path(__file__).resolve().parent.parent / "plans" / "tpch" / "pg16" / "q22.serial.txt")
    report = plan.report()
    with exported_page(browser, plan, tmp_path / "timed.html") as (page, blocked, dialogs, errors):
        cells = page.locator(".pv-tree .pv-row[data-id] .pv-own-ms")
        assert cells.count() == len(report["nodes"])
        items = page.locator(".pv-slowest li")
        assert items.count() == len(report["slowest"])
        first = report["slowest"][0]
        assert items.first.get_attribute("data-node") == str(first["node"])
        page.locator(f'.pv-row[data-id="{first["node"]}"]').click()
        numbers = page.locator(".pv-detail .pv-numbers").inner_text()
        assert "own time, in all / per start" in numbers and "time with inputs" in numbers
        origin = report["findings"][0]
        page.locator(f'.pv-row[data-id="{origin["node"]}"]').click()
        assert "Time under it" in page.locator(".pv-detail .pv-impact-time").inner_text()
        assert not errors


def test_export_page_walks_origins_by_rank_with_buttons_and_keys(browser, tmp_path):
    plan = planview.load(PLANS / "multi.json")
    ranked = [f["node"] for f in sorted(plan.report()["findings"], key=lambda f: f["rank"])]
    assert len(ranked) >= 2
    with exported_page(browser, plan, tmp_path / "multi.html") as (page, _, _, _):
        selected = lambda: page.locator(".pv-row.pv-selected").get_attribute("data-id")  # noqa: E731
        assert selected() == str(ranked[0])  # the page opens on the rank-1 origin
        page.locator(".pv-next").click()
        assert selected() == str(ranked[1])
        page.locator(".pv-prev").click()
        assert selected() == str(ranked[0])
        page.locator(".pv-review").focus()
        page.keyboard.press("n")
        assert selected() == str(ranked[1])
        page.keyboard.press("p")
        assert selected() == str(ranked[0])
        assert "origin 1 of" in page.locator(".pv-position").inner_text()
        # only the origins and the path down to them
        page.locator(".pv-only").check()
        by_id = {n["id"]: n for n in plan.report()["nodes"]}
        assert _shown_rows(page) == set(ranked) | _ancestors(by_id, ranked)
        # a folded subtree hides its rows, unfolding brings them back
        page.locator(".pv-only").uncheck()
        before = page.locator(".pv-tree .pv-row[data-id]").count()
        page.locator(".pv-row[data-id] .pv-toggle").first.click()
        assert page.locator(".pv-tree .pv-row[data-id]").count() < before
        page.locator(".pv-open-all").click()
        assert page.locator(".pv-tree .pv-row[data-id]").count() == len(by_id)


def _all_pg16_plans():
    """All captured PG 16 JSON plans in one paste (one statement each)."""
    statements = []
    decoder = json.JSONDecoder()
    for path in sorted(filter(is_capture, PLANS.glob("*.json"))):
        text, at = path.read_text(), 0
        while text[at:].strip():  # a file may hold one JSON document per statement
            value, at = decoder.raw_decode(text, len(text) - len(text[at:].lstrip()))
            statements.extend(value)
    return planview.load(json.dumps(statements))


def test_large_export_opens_with_only_the_paths_to_origins(browser, tmp_path):
    """All captured PG 16 JSON plans in one paste: a plan too big to open whole, so it opens
    folded to the origins."""
    plan = _all_pg16_plans()
    report = plan.report()
    assert len(report["nodes"]) > 80 and report["findings"]
    with exported_page(browser, plan, tmp_path / "all.html") as (page, _, _, _):
        shown = _shown_rows(page)
        origins = {f["node"] for f in report["findings"]}
        roots = {n["id"] for n in report["nodes"] if n["parent"] is None}
        assert origins <= shown and roots <= shown
        assert len(shown) < len(report["nodes"])
        # every row shown is a root, an origin, or a child of an open node on a path to one
        by_id = {n["id"]: n for n in report["nodes"]}
        on_path = _ancestors(by_id, origins)
        for node_id in shown - roots:
            assert by_id[node_id]["parent"] in on_path
        assert page.locator(".pv-folded").count() > 0


# -- the origins list, search, the detail panel, time, contrast (exported page) ------------------

TPCH = REPO / "plans" / "tpch" / "pg16"
Q22 = TPCH / "q22.serial.txt"  # TPC-H Q22 on PostgreSQL 16 (plans/capture_tpch.py): 2 origins


def test_export_page_opens_on_the_top_origin_and_the_origins_list_selects(browser, tmp_path):
    """Source: plans/tpch/pg16/q22.serial.txt. The list has one button per origin in rank
    order, each with its rank, node id, cause words and error as the report says them."""
    plan = planview.load(Q22)
    report = plan.report()
    ranked = sorted(report["findings"], key=lambda f: f["rank"])
    assert len(ranked) >= 2
    with exported_page(browser, plan, tmp_path / "q22.html") as (page, _, _, errors):
        items = page.locator(".pv-origins button.pv-origin-item")
        assert items.count() == len(ranked)
        assert page.locator(".pv-row.pv-selected").get_attribute("data-id") == str(ranked[0]["node"])
        # every row shows its node id; an origin's rank sits apart from it, in its badge
        rows = page.locator(".pv-tree .pv-row[data-id]")
        assert rows.evaluate_all("rs => rs.map(r => [r.dataset.id, r.querySelector('.pv-id').textContent])") == [
            [str(n["id"]), n["text"]["id"]] for n in report["nodes"]]
        for finding in ranked:
            badge = page.locator(f'.pv-row[data-id="{finding["node"]}"] .pv-badge-origin').inner_text()
            assert badge == f"◆{finding['rank']}"
        assert items.first.get_attribute("aria-pressed") == "true"
        assert page.evaluate("location.hash") == f"#node-{ranked[0]['node']}"
        for i, finding in enumerate(ranked):
            item = items.nth(i)
            node = report["nodes"][finding["node"]]
            assert item.get_attribute("data-node") == str(finding["node"])
            assert item.locator(".pv-o-rank").inner_text() == str(finding["rank"])
            assert item.locator(".pv-o-id").inner_text() == node["text"]["id"]
            assert item.locator(".pv-o-cause").inner_text() == finding["text"]["cause"]
            assert item.locator(".pv-o-added").inner_text() == node["text"]["added"]
            assert "ms" in item.locator(".pv-o-impact").inner_text()
        items.nth(1).click()
        assert page.locator(".pv-row.pv-selected").get_attribute("data-id") == str(ranked[1]["node"])
        assert items.nth(1).get_attribute("aria-pressed") == "true"
        assert items.first.get_attribute("aria-pressed") == "false"
        assert page.locator(".pv-detail-title").inner_text().startswith(f"#{ranked[1]['node']} ")
        assert "origin 2 of 2" in page.locator(".pv-position").inner_text()
        assert not errors


def test_the_origins_list_keeps_the_selected_origin_in_view(browser, tmp_path):
    """All PG 16 captures in one review: more origins than the list shows at once; stepping to
    the last one scrolls the list (only the list) to it."""
    plan = _all_pg16_plans()
    ranked = sorted(plan.report()["findings"], key=lambda f: f["rank"])
    with exported_page(browser, plan, tmp_path / "many.html") as (page, _, _, errors):
        box = page.locator(".pv-origin-list")
        assert box.evaluate("b => b.scrollHeight > b.clientHeight"), "the list should need scrolling here"
        page.evaluate("window.scrollTo(0, 0)")
        page.locator(".pv-prev").click()  # from origin 1 back to the last
        last = page.locator(f'.pv-origin-item[data-node="{ranked[-1]["node"]}"]')
        assert last.get_attribute("aria-pressed") == "true"
        inside = box.evaluate("""(b, id) => {
            const item = b.querySelector(`.pv-origin-item[data-node="${id}"]`);
            const a = b.getBoundingClientRect(), r = item.getBoundingClientRect();
            return r.top >= a.top - 1 && r.bottom <= a.bottom + 1;
        }""", ranked[-1]["node"])
        assert inside
        assert not errors


def _search_fields(node):
    """The fields the find box reads (review.js searchText), from the report's node."""
    fields = [node.get(k) for k in ("label", "operator", "relation", "alias", "schema", "index", "cte_name",
                                    "subplan_name", "function_name")]
    fields += [c.get("text") for c in node.get("conditions") or []]
    return " ".join(str(f) for f in fields if f).lower()


def test_export_page_finds_as_you_type_with_a_count(browser, tmp_path):
    """Source: plans/tpch/pg16/q22.serial.txt. Each keystroke updates the count and the
    highlighted rows; Enter and Shift+Enter step through the matches in tree order; "#5"
    finds node 5 only."""
    plan = planview.load(Q22)
    report = plan.report()
    word = "customer"
    with exported_page(browser, plan, tmp_path / "find.html") as (page, _, _, errors):
        box = page.locator(".pv-find")
        box.click()
        counts = []
        for i in range(1, len(word) + 1):
            page.keyboard.type(word[i - 1])
            expected = [n["id"] for n in report["nodes"] if word[:i] in _search_fields(n)]
            shown = page.locator(".pv-find-count").inner_text()
            counts.append(shown)
            assert shown == (f"{len(expected)} match" + ("" if len(expected) == 1 else "es") if expected else "no match")
            assert _ids(page, ".pv-tree .pv-row.pv-match") == set(expected)
        expected = [n["id"] for n in report["nodes"] if word in _search_fields(n)]
        assert len(expected) >= 2, counts
        order = [int(x) for x in page.locator(".pv-tree .pv-row[data-id]").evaluate_all(
            "rows => rows.map(r => r.getAttribute('data-id'))")]
        in_order = [i for i in order if i in expected]
        selected = lambda: int(page.locator(".pv-row.pv-selected").get_attribute("data-id"))  # noqa: E731
        start = order.index(selected())
        following = [i for i in in_order if order.index(i) > start] + in_order
        page.keyboard.press("Enter")
        assert selected() == following[0]
        page.keyboard.press("Enter")
        assert selected() == following[1]
        page.keyboard.press("Shift+Enter")
        assert selected() == following[0]
        box.fill("#5")
        assert page.locator(".pv-find-count").inner_text() == "1 match"
        assert _ids(page, ".pv-tree .pv-row.pv-match") == {5}
        box.fill("no such operator anywhere")
        assert page.locator(".pv-find-count").inner_text() == "no match"
        assert page.locator(".pv-tree .pv-row.pv-match").count() == 0
        assert not errors


def _ids(page, selector):
    return {int(x) for x in page.locator(selector).evaluate_all("rows => rows.map(r => r.getAttribute('data-id'))")}


NUMBER_KEYS = {"est rows", "actual rows", "starts", "est rows per start", "actual rows per start", "q error",
               "est total", "actual total"}


def _check_detail_has_no_repeats(page, finding):
    detail = page.locator(".pv-detail")
    text = detail.inner_text()
    # the summary once (the cause line says the cause; the summary the rest of it)
    body = finding["summary"].split(": ", 1)[-1].strip().rstrip(".")
    assert text.lower().count(body.lower()) == 1, body
    # no evidence row repeats the numbers table, none is empty
    keys = detail.locator(".pv-evidence th").all_inner_texts()
    values = detail.locator(".pv-evidence td").all_inner_texts()
    assert not (set(keys) & NUMBER_KEYS), keys
    assert all(v.strip() for v in values), list(zip(keys, values))
    for table in (".pv-numbers", ".pv-evidence"):
        for value in detail.locator(f"{table} td").all_inner_texts():
            assert value.strip() not in ("", "–", "None", "null", "[]"), (table, value)
    assert not re.search(r"(?m)^\s*\w[\w ]*:\s*$", text), "a field with nothing after it"
    # each sentence of the status line, the cause and the evidence is said once (the fix's SQL
    # may repeat a line of its own)
    if detail.locator(".pv-fix").count():
        text = text.replace(detail.locator(".pv-fix").inner_text(), "")
    sentences = [s.strip() for s in re.split(r"(?<=[.!?])\s+|\n", text) if len(s.strip()) > 30]
    repeated = {s for s in sentences if sentences.count(s) > 1}
    assert not repeated, repeated


def test_export_page_detail_reads_in_order_without_repeats_and_shows_the_fix(browser, tmp_path):
    """Source: plans/tpch/pg16/q22.serial.txt (the origin with a fix) and
    plans/postgresql/pg16/join_correlated.json (an origin at a two-table join): status, then
    cause, fix and caution, in the window with no scrolling; then the numbers, conditions and
    evidence, none of it repeated or empty; a join names no single table."""
    plan = planview.load(Q22)
    report = plan.report()
    finding = next(f for f in report["findings"] if f["fix"])
    with exported_page(browser, plan, tmp_path / "detail.html") as (page, _, _, errors):
        page.locator(f'.pv-origin-item[data-node="{finding["node"]}"]').click()
        detail = page.locator(".pv-detail")
        _check_detail_has_no_repeats(page, finding)
        order = detail.evaluate("""d => [...d.querySelectorAll(
            '.pv-status, .pv-cause, .pv-fix, .pv-caution, .pv-numbers, .pv-conditions, .pv-evidence-lines, .pv-evidence, .pv-derived')]
            .map(e => e.className.split(' ')[0])""")
        wanted = ["pv-status", "pv-cause", "pv-fix", "pv-caution", "pv-numbers", "pv-conditions", "pv-evidence-lines",
                  "pv-evidence", "pv-derived"]
        assert [c for c in wanted if c in order] == [c for c in order if c in wanted]
        assert order[:4] == ["pv-status", "pv-cause", "pv-fix", "pv-caution"], order
        # the fix and the top of its caution are in the window and in the panel's view, unscrolled
        page.evaluate("window.scrollTo(0, 0)")
        assert detail.evaluate("d => d.scrollTop") == 0
        height = page.viewport_size["height"]
        pane = detail.bounding_box()
        fix = detail.locator(".pv-fix").bounding_box()
        caution = detail.locator(".pv-caution").bounding_box()
        assert fix["y"] + fix["height"] <= min(height, pane["y"] + pane["height"]), (fix, pane, height)
        assert caution["y"] + 20 <= min(height, pane["y"] + pane["height"]), (caution, pane, height)
        assert not errors
    join_plan = planview.load(PLANS / "join_correlated.json")
    join_report = join_plan.report()
    join = next(f for f in join_report["findings"] if join_report["nodes"][f["node"]]["own_rule"] == "join")
    assert join["evidence"].get("table"), "the captured join's evidence names one table: the case to hide"
    with exported_page(browser, join_plan, tmp_path / "join.html") as (page, _, _, errors):
        page.locator(f'.pv-origin-item[data-node="{join["node"]}"]').click()
        _check_detail_has_no_repeats(page, join)
        keys = page.locator(".pv-detail .pv-evidence th").all_inner_texts()
        assert "table" not in keys, keys
        assert not errors


# one real capture per engine and source (plans/README.md, plans/ENGINES.md say how each was made)
EVERY_ENGINE = [
    REPO / "plans" / "mariadb" / "join_without_index.json",
    REPO / "plans" / "mysql" / "9.5-hash-join.txt",
    REPO / "plans" / "duckdb" / "inherited_join.json",
    REPO / "plans" / "tpch" / "duckdb" / "q05.json",
    REPO / "plans" / "tpch" / "pg16" / "q02.par.txt",
    PLANS / "stale.text.txt",
]


@pytest.mark.parametrize("path", EVERY_ENGINE, ids=lambda p: f"{p.parent.name}/{p.name}")
def test_every_engines_review_opens_and_every_detail_is_whole(browser, tmp_path, path):
    """Each origin of a real capture from every engine: selected from the list, its detail has
    no repeat and no empty field; every other row's detail has no empty field either."""
    assert path.is_file(), path
    plan = planview.load(path)
    report = plan.report()
    with exported_page(browser, plan, tmp_path / "engine.html") as (page, _, _, errors):
        for finding in report["findings"]:
            page.locator(f'.pv-origin-item[data-node="{finding["node"]}"]').click()
            _check_detail_has_no_repeats(page, finding)
        page.locator(".pv-open-all").click()
        for node in report["nodes"][:40]:
            page.locator(f'.pv-row[data-id="{node["id"]}"]').click()
            detail = page.locator(".pv-detail")
            for value in detail.locator("td, dd").all_inner_texts():
                assert value.strip() not in ("", "–", "None", "null", "[]", "undefined"), (node["id"], value)
            assert "undefined" not in detail.inner_text() and "NaN" not in detail.inner_text()
        assert not errors


def test_export_page_shows_statements_one_by_one_and_the_plan_as_pasted(browser, tmp_path):
    """Source: plans/postgresql/pg16/multi.json (two statements captured from PostgreSQL 16):
    a header row per statement with its own execution time; the header's time is their sum;
    the "as pasted" block holds the file's text exactly."""
    from planview import words

    path = PLANS / "multi.json"
    plan = planview.load(path)
    statements = plan.report()["statements"]
    assert len(statements) == 2
    with exported_page(browser, plan, tmp_path / "multi.html") as (page, _, _, errors):
        heads = page.locator(".pv-tree .pv-statement-row")
        assert heads.count() == 2
        for i, st in enumerate(statements):
            assert f"ran {words.ms(st['execution_ms'])}" in heads.nth(i).inner_text()
            # the header row sits right above its statement's root row
            after = heads.nth(i).evaluate("h => h.nextElementSibling.getAttribute('data-id')")
            assert after == str(st["root"])
        total = sum(st["execution_ms"] for st in statements)
        assert f"ran {words.ms(total)}" in page.locator(".pv-head").inner_text()
        block = page.locator(".pv-source")
        block.locator("summary").click()
        block.locator("pre[data-filled]").wait_for(timeout=10_000)
        assert block.locator("pre").evaluate("p => p.textContent") == path.read_text(encoding="utf-8")
        assert not errors


def test_export_page_own_time_column_has_the_reports_figures(browser, tmp_path):
    """Source: plans/tpch/pg16/q05.serial.txt (TPC-H Q5, PostgreSQL 16, EXPLAIN ANALYZE): the
    tree has an own-time column and every executed node's cell shows its own time."""
    plan = planview.load(TPCH / "q05.serial.txt")
    report = plan.report()
    with exported_page(browser, plan, tmp_path / "q05.html") as (page, _, _, errors):
        assert page.locator(".pv-tree .pv-row-head .pv-own-ms").inner_text() == "own ms"
        cells = dict(zip(
            [int(x) for x in page.locator(".pv-tree .pv-row[data-id]").evaluate_all("r => r.map(e => e.dataset.id)")],
            page.locator(".pv-tree .pv-row[data-id] .pv-own-ms").all_inner_texts()))
        assert set(cells) == {n["id"] for n in report["nodes"]}
        timed = [n for n in report["nodes"] if n["self_ms"] is not None]
        assert len(timed) == len(report["nodes"])
        assert page.locator(".pv-tree .pv-row-head .pv-own-ms").is_visible()
        for node in timed:
            shown = cells[node["id"]]
            value = float(shown[:-1]) * 1000 if shown.endswith("s") else float(shown)
            assert abs(value - node["self_ms"]) <= max(0.006, 0.051 * node["self_ms"]), (node["id"], shown, node["self_ms"])
        assert not errors
    # plain EXPLAIN (plans/postgresql/pg16/estimates_only.json) prints no time: no such column
    with exported_page(browser, planview.load(PLANS / "estimates_only.json"), tmp_path / "plain.html") as (page, _, _, errors):
        assert not page.locator(".pv-tree .pv-row-head .pv-own-ms").is_visible()
        assert not errors


def _luminance(rgb):
    # WCAG 2.1, "relative luminance" (https://www.w3.org/TR/WCAG21/#dfn-relative-luminance)
    def channel(c):
        c = c / 255
        return c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4
    r, g, b = (channel(c) for c in rgb)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def _contrast(a, b):
    # WCAG 2.1, "contrast ratio" (https://www.w3.org/TR/WCAG21/#dfn-contrast-ratio): (L1 + 0.05) / (L2 + 0.05)
    high, low = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (high + 0.05) / (low + 0.05)


def test_error_cells_meet_wcag_aa_contrast_as_rendered(browser, tmp_path):
    """WCAG 2.1 success criterion 1.4.3 (AA): text at least 4.5:1 against its background. The
    colours are read from the rendered page (getComputedStyle), on every error cell of all the
    PG 16 captures in one review, in both colour modes."""
    plan = _all_pg16_plans()
    with exported_page(browser, plan, tmp_path / "all.html") as (page, _, _, errors):
        page.locator(".pv-open-all").click()
        measured = 0
        for mode in ("whole", "own"):
            page.locator(".pv-colour-by").select_option(mode)
            cells = page.locator(".pv-tree .pv-row[data-id] .pv-err").evaluate_all("""cells => cells.map(c => {
                const s = getComputedStyle(c);
                return [s.backgroundColor, s.color, c.textContent];
            })""")
            coloured = [c for c in cells if c[0] not in ("rgba(0, 0, 0, 0)", "transparent")]
            assert len({c[0] for c in coloured}) >= 5, "the captures should cover a range of colours"
            for background, ink, text in coloured:
                bg = tuple(int(v) for v in re.findall(r"\d+", background)[:3])
                fg = tuple(int(v) for v in re.findall(r"\d+", ink)[:3])
                ratio = _contrast(bg, fg)
                assert ratio >= 4.5, (text, background, ink, round(ratio, 2))
                measured += 1
        assert measured > 50
        assert not errors


def test_error_cells_never_cut_and_chart_text_is_readable(browser, tmp_path):
    """Source: plans/postgresql/pg16/join_correlated.json (a ×58,824 error captured on PG 16).
    No error cell overflows, not even with the widest text planview's formatter writes; chart
    ticks, axis labels and legends are at least 11 px as drawn; each chart labels both axes."""
    from planview import words

    plan = planview.load(PLANS / "join_correlated.json")
    report = plan.report()
    widest = max((words.error(s * math.log10(q), q) for q in (9.4e5, 9.99e5, 1.2e6, 9.9e8, 3.4e9, 1e15)
                  for s in (1, -1)), key=len)
    with exported_page(browser, plan, tmp_path / "wide.html") as (page, _, _, errors):
        assert any("58,824" in n["text"]["error"] for n in report["nodes"])
        overflow = """cells => cells.filter(c => c.scrollWidth > c.clientWidth + 1 || c.scrollHeight > c.clientHeight + 1)
                                   .map(c => c.textContent)"""
        cells = page.locator(".pv-tree .pv-row[data-id] .pv-err")
        assert cells.evaluate_all(overflow) == []
        shown = cells.all_inner_texts()
        assert {n["text"]["error"] for n in report["nodes"] if n["judged"]} <= set(shown)
        # the captured ×58,824 fits on one line (the column is wide enough for it)
        lines = cells.evaluate_all("""cells => cells.filter(c => c.textContent.includes('58,824'))
            .map(c => c.getBoundingClientRect().height / parseFloat(getComputedStyle(c).lineHeight))""")
        assert lines and all(n < 1.9 for n in lines), lines
        cells.first.evaluate("(c, t) => { c.textContent = t; }", widest)
        assert cells.evaluate_all(overflow) == [], widest
        # chart text as drawn: font size times the SVG's scale on screen
        sizes = page.evaluate("""() => [...document.querySelectorAll('.pv-chart text, .pv-chart-legend, .pv-ticks')]
            .filter(e => e.textContent.trim())
            .map(e => {
                const svg = e.ownerSVGElement;
                const scale = svg ? svg.getBoundingClientRect().width / svg.viewBox.baseVal.width : 1;
                return [e.textContent, parseFloat(getComputedStyle(e).fontSize) * scale];
            })""")
        assert sizes and all(size >= 11 for _, size in sizes), [s for s in sizes if s[1] < 11]
        labels = page.locator(".pv-chart").evaluate_all(
            "charts => charts.map(c => c.querySelectorAll('.pv-axis-label').length)")
        assert labels == [2, 2]
        assert not errors


# -- inside JupyterLab -------------------------------------------------------------------------

def _served_copy(start):
    """The walkthrough (and the plans it reads) in a fresh folder, served by `start`; the
    server is stopped and the folder removed however the tests end."""
    root = Path(tempfile.mkdtemp(prefix="planview-lab-root-"))
    try:
        (root / "example_notebooks").mkdir()
        shutil.copy(NOTEBOOK, root / "example_notebooks" / NOTEBOOK.name)
        (root / "plans").symlink_to(REPO / "plans")
        with start(root) as server:
            yield server
    finally:
        shutil.rmtree(root, ignore_errors=True)


@pytest.fixture(scope="module")
def lab():
    require_chromium()
    yield from _served_copy(jupyter_lab)


@pytest.fixture(scope="module")
def notebook7():
    require_chromium()
    yield from _served_copy(jupyter_notebook)


def test_review_in_jupyterlab(lab, browser):
    report = planview.load(FIRST_PLAN).report()
    page = browser.new_page()
    blocked = offline(browser, allowed_prefixes=(lab.base,))
    try:
        page.goto(lab.url(f"lab/tree/example_notebooks/{NOTEBOOK.name}"))
        run_all_cells(page)
        reviews = page.locator(".pv-review")
        reviews.nth(2).wait_for(timeout=90_000)
        wait_kernel_idle(page)
        first = reviews.first
        first.evaluate("el => el.scrollIntoView({block: 'start'})")
        ranked = sorted(report["findings"], key=lambda f: f["rank"])
        top = ranked[0]
        # the review opens on the rank-1 origin; the origins list selects another and back
        assert first.locator(".pv-row.pv-selected").get_attribute("data-id") == str(top["node"])
        items = first.locator(".pv-origins button.pv-origin-item")
        assert items.count() == len(ranked)
        assert items.first.get_attribute("aria-pressed") == "true"
        items.nth(1).click()
        assert first.locator(".pv-row.pv-selected").get_attribute("data-id") == str(ranked[1]["node"])
        assert items.nth(1).get_attribute("aria-pressed") == "true"
        items.first.click()
        # the detail shows its cause and fix, said once, the fix in the window unscrolled
        detail = first.locator(".pv-detail")
        assert detail.locator(".pv-cause").get_attribute("data-cause") == (top["cause"] or "")
        _check_detail_has_no_repeats(first, top)
        if top["fix"]:
            assert detail.locator(".pv-fix").inner_text().strip() == top["fix"].strip()
            assert detail.locator(".pv-caution").is_visible()
            fix = detail.locator(".pv-fix").bounding_box()
            assert fix["y"] >= 0 and fix["y"] + fix["height"] <= page.viewport_size["height"], fix
        # search as you type: the count follows each key
        find = first.locator(".pv-find")
        find.click()
        for i, key in enumerate("owners", 1):
            page.keyboard.press(key)
            expected_ids = {n["id"] for n in report["nodes"] if "owners"[:i] in _search_fields(n)}
            count = len(expected_ids)
            assert first.locator(".pv-find-count").inner_text() == (
                f"{count} match" + ("" if count == 1 else "es") if count else "no match")
            assert _ids(first, ".pv-tree .pv-row.pv-match") == expected_ids
        find.fill("")
        # the own-time column shows each operator's own time
        own = first.locator(".pv-tree .pv-row[data-id] .pv-own-ms").all_inner_texts()
        assert len(own) == len(report["nodes"]) and all(t != "–" for t in own), own
        # the error cells meet WCAG 2.1 AA contrast as JupyterLab renders them (see _contrast)
        for background, ink in first.locator(".pv-tree .pv-row[data-id] .pv-err").evaluate_all(
                "cells => cells.filter(c => c.style.background).map(c => [getComputedStyle(c).backgroundColor, getComputedStyle(c).color])"):
            assert _contrast(*(tuple(int(v) for v in re.findall(r"\d+", c)[:3]) for c in (background, ink))) >= 4.5
        SHOTS.mkdir(parents=True, exist_ok=True)
        # the charts are the exported page's SVG charts
        charts = first.locator(".pv-charts")
        charts.locator("svg.pv-chart").nth(1).wait_for(timeout=30_000)
        # the README's picture: the whole review of this real capture, charts included, in a
        # window tall enough to hold it
        size = page.viewport_size
        page.set_viewport_size({"width": size["width"], "height": 1800})
        first.evaluate("el => el.scrollIntoView({block: 'start'})")
        page.wait_for_timeout(300)
        first.screenshot(path=str(SHOTS / "jupyterlab-review.png"))
        charts.screenshot(path=str(SHOTS / "jupyterlab-charts.png"))
        page.set_viewport_size(size)
        # the kernel sees the selection: run the last cell again, it prints w.selected
        last = page.locator(".jp-Notebook .jp-Cell").last
        last.locator(".jp-InputArea-editor").click()
        page.keyboard.press("Shift+Enter")
        expected = f"selected: {top['node']} {report['nodes'][top['node']]['label']}"
        page.wait_for_function(
            "text => [...document.querySelectorAll('.jp-Notebook .jp-Cell')].slice(-2)"
            ".some(c => (c.querySelector('.jp-OutputArea') || {}).textContent?.includes(text))",
            arg=expected, timeout=30_000)
        # and Python moves the selection: type into the new cell at the end
        other = report["findings"][1]["node"] if len(report["findings"]) > 1 else 0
        wait_kernel_idle(page)
        page.keyboard.type(f"w.selected = {other}")
        page.keyboard.press("Shift+Enter")
        page.wait_for_function(
            "id => document.querySelector('.pv-review .pv-row.pv-selected')?.getAttribute('data-id') === id",
            arg=str(other), timeout=30_000)
        # a click on a chart point selects its node
        judged = next(n for n in report["nodes"] if n["judged"] and not n["origin"] and n["id"] != other)
        page.locator(f'.pv-review circle.pv-point[data-id="{judged["id"]}"]').first.click(force=True)
        page.wait_for_function(
            "id => document.querySelector('.pv-review .pv-row.pv-selected')?.getAttribute('data-id') === id",
            arg=str(judged["id"]), timeout=30_000)
        # the save button writes the page and the ticket text next to the notebook
        first.locator(".pv-save").click()
        status = first.locator(".pv-save-status")
        page.wait_for_function("el => /saved/.test(el.textContent)", arg=status.element_handle(), timeout=30_000)
        saved = re.findall(r"[\w.-]+\.(?:html|md)", status.inner_text())
        assert len(saved) == 2
        folder = lab.root / "example_notebooks"
        assert all((folder / name).is_file() for name in saved)
        page_text = (folder / next(n for n in saved if n.endswith(".html"))).read_text()
        assert 'id="planview-data"' in page_text
        assert blocked == [], f"the review asked the network for {blocked[:3]}"
    finally:
        browser.unroute("**/*")
        page.close()


# -- inside Notebook 7 -------------------------------------------------------------------------

def _last_outputs_contain(page, text, timeout_ms=30_000):
    page.wait_for_function(
        "text => [...document.querySelectorAll('.jp-Notebook .jp-Cell')].slice(-2)"
        ".some(c => (c.querySelector('.jp-OutputArea') || {}).textContent?.includes(text))",
        arg=text, timeout=timeout_ms)


def test_review_in_notebook7(notebook7, browser):
    report = planview.load(FIRST_PLAN).report()
    top = report["findings"][0]
    page = browser.new_page()
    blocked = offline(browser, allowed_prefixes=(notebook7.base,))
    errors = []
    page.on("pageerror", lambda e: errors.append(e))
    try:
        page.goto(notebook7.url(f"notebooks/example_notebooks/{NOTEBOOK.name}"))
        page.locator("#main-panel .jp-NotebookPanel").first.wait_for(timeout=60_000)  # Notebook 7's shell
        assert page.locator(".jp-LabShell").count() == 0, "this is JupyterLab, not Notebook 7"
        run_all_cells(page)  # Notebook 7's menu bar is Lumino's, as in JupyterLab: Run → Run All Cells
        reviews = page.locator(".pv-review")
        reviews.nth(2).wait_for(timeout=60_000)
        wait_kernel_idle(page)
        # the review opens on the rank-1 origin, and the kernel knows it: the last cell printed so
        _last_outputs_contain(page, f"selected: {top['node']} {report['nodes'][top['node']]['label']}")
        first = reviews.first
        row = first.locator(f'.pv-row[data-id="{top["node"]}"]')
        assert row.get_attribute("aria-selected") == "true"
        first.scroll_into_view_if_needed()
        # another row, then the top-ranked origin again; the detail shows its cause and fix
        first.locator(f'.pv-row[data-id="{next(n["id"] for n in report["nodes"] if n["id"] != top["node"])}"]').click()
        assert row.get_attribute("aria-selected") == "false"
        row.click()
        assert row.get_attribute("aria-selected") == "true"
        detail = first.locator(".pv-detail")
        assert detail.locator(".pv-cause").get_attribute("data-cause") == (top["cause"] or "")
        if top["fix"]:
            assert detail.locator(".pv-fix").inner_text().strip() == top["fix"].strip()
            assert detail.locator(".pv-caution").is_visible()
        first.locator(".pv-charts svg.pv-chart").nth(1).wait_for(timeout=30_000)
        page.wait_for_timeout(500)
        SHOTS.mkdir(parents=True, exist_ok=True)
        first.evaluate("el => el.scrollIntoView({block: 'start'})")
        page.screenshot(path=str(SHOTS / "notebook7-review.png"))
        # the kernel sees the selection: run the last cell again, it prints w.selected
        last = page.locator(".jp-Notebook .jp-Cell").last
        last.locator(".jp-InputArea-editor").click()
        page.keyboard.press("Shift+Enter")
        _last_outputs_contain(page, f"selected: {top['node']} {report['nodes'][top['node']]['label']}")
        # and Python moves the selection: type into the new cell at the end
        other = next(f["node"] for f in report["findings"] if f["node"] != top["node"])
        wait_kernel_idle(page)
        page.keyboard.type(f"w.selected = {other}")
        page.keyboard.press("Shift+Enter")
        page.wait_for_function(
            "id => document.querySelector('.pv-review .pv-row.pv-selected')?.getAttribute('data-id') === id",
            arg=str(other), timeout=30_000)
        assert blocked == [], f"the review asked the network for {blocked[:3]}"
        # Notebook 7 itself throws one error while it loads its settings; none may come from the review
        ours = [str(e) for e in errors if "/static/notebook/" not in (e.stack or "")]
        assert ours == []
    finally:
        browser.unroute("**/*")
        page.close()
