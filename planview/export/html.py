"""The review as HTML: the self-contained page for a ticket, and the static tree for viewers
with no widget front end (nbconvert, a notebook viewer, a mail client).

Every string from the plan goes through `html.escape` here, or, in the page, is handed to the
ES module as JSON data that it only ever puts into the page as text. Shown text first passes
`planview.inert.visible` (the module has its own `visible`): a direction override or a control
character in a name is displayed as an escape and cannot reorder the text around it. The
report's data keeps the real strings.
"""

from __future__ import annotations

import base64
import gzip
import hashlib
import html
import json
from importlib import resources
from typing import Any

from .. import words as _words
from ..inert import visible
from .common import (
    GENERIC_CAUTION,
    LARGE_PLAN,
    cause_words,
    error_words,
    evidence_items,
    factor,
    ink_for,
    ms,
    node_state,
    paths_to_origins,
    ratio_colour,
    rows,
)

STATIC_ROW_LIMIT = 300
"""The static tree lists every operator up to this many; past it, only the paths to the origins."""


def _asset(name: str) -> str:
    return resources.files("planview").joinpath("widget", name).read_text(encoding="utf-8")


def widget_module() -> str:
    return _asset("review.js")


def widget_css() -> str:
    return _asset("review.css")


def _is_empty(value: Any) -> bool:
    return value is None or (type(value) in (list, dict, str) and not value)


def compact_report(report: dict[str, Any]) -> dict[str, Any]:
    """The report with its nodes packed as columns and rows, empty values as null (the ES
    module unpacks them), so a 5,000-operator page stays small. Every value kept is the
    report's own."""
    nodes = report["nodes"]
    keys = dict.fromkeys(key for node in nodes for key in node)  # a key only some nodes have (derivation) too
    columns = [key for key in keys if not all(_is_empty(n.get(key)) for n in nodes)]
    rows = [[None if _is_empty(v := node.get(key)) else v for key in columns] for node in nodes]
    packed = {k: v for k, v in report.items() if k != "nodes"}
    packed["nodes_packed"] = {"columns": columns, "rows": rows}
    source = report.get("source")
    if isinstance(source, dict) and source.get("text"):
        packed["source"] = pack_source(source)
    return packed


def pack_source(source: dict[str, Any]) -> dict[str, Any]:
    """The plan as pasted, gzipped and in base64 (the ES module unpacks it with the browser's
    DecompressionStream when the block is opened): a plan's text is mostly repeated keys and
    indentation, so a 5,000-operator JSON plan's 2 MB become about a tenth of that."""
    text = source["text"]
    data = gzip.compress(text.encode("utf-8", "surrogatepass"), compresslevel=9, mtime=0)
    return {"gzip_base64": base64.b64encode(data).decode("ascii"), "chars": source.get("chars", len(text)),
            "cut": bool(source.get("cut")), "shown_chars": len(text), "lines": text.count("\n") + 1}


def _json_for_script(value: Any) -> str:
    """JSON that cannot end its <script> element or open a comment inside it; "/" as "\\/"
    (a JSON escape), so an address in the pasted plan's text reads as data, not as a link."""
    text = json.dumps(value, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    return text.replace("/", "\\/").replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026") \
        .replace("\u2028", "\\u2028").replace("\u2029", "\\u2029")


_BOOT = """
const planviewData = JSON.parse(document.getElementById("planview-data").textContent);
const planviewState = { report: planviewData.report, selected: topOrigin(planviewData.report), chart_mode: "svg", can_save: false };
const planviewAsked = /^#node-(\\d+)$/.exec(window.location.hash || "");
if (planviewAsked) planviewState.selected = Number(planviewAsked[1]);
const planviewModel = localModel(planviewState);
function planviewAddress() {
  const id = planviewModel.get("selected");
  try {
    window.history.replaceState(null, "", id === null ? window.location.pathname : `#node-${id}`);
  } catch (error) { /* a viewer that forbids it loses nothing but the address */ }
}
planviewModel.on("change:selected", planviewAddress);
render({ model: planviewModel, el: document.getElementById("planview-root") });
if (planviewModel.get("selected") !== null) planviewAddress();  // the origin it opens on has an address too
"""


def _page_script(boot: str) -> tuple[str, str]:
    """The page's one script (the ES module and its boot code) and the Content-Security-Policy
    that lets only that script run, by its hash."""
    module = widget_module()
    if "</script" in module.lower() or "<!--" in module:
        raise RuntimeError("review.js must not contain '</script' or '<!--'")
    script = module + "\n" + boot
    digest = base64.b64encode(hashlib.sha256(script.encode("utf-8")).digest()).decode("ascii")
    policy = (f"default-src 'none'; script-src 'sha256-{digest}'; style-src 'unsafe-inline'; "
              "img-src data:; form-action 'none'; base-uri 'none'")
    return script, policy


def render_html(plan) -> str:
    """One offline page: the tree, the detail panel and the charts, with no network at all."""
    from .markdown import render_markdown

    report = plan.report()
    script, policy = _page_script(_BOOT)
    title = _page_title(report)
    ticket = render_markdown(plan)
    return "".join([
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">",
        f"<meta http-equiv=\"Content-Security-Policy\" content=\"{html.escape(policy)}\">",
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">",
        "<meta name=\"generator\" content=\"planview\">",
        f"<title>{html.escape(visible(title))}</title>",
        "<style>", widget_css(), _PAGE_CSS, "</style></head><body>",
        "<main><div id=\"planview-root\"></div>",
        "<noscript>", render_static_tree(plan), "</noscript>",
        "<details class=\"pv-ticket\"><summary>Ticket text (Markdown)</summary><pre>",
        html.escape(ticket), "</pre></details></main>",
        "<script type=\"application/json\" id=\"planview-data\">",
        _json_for_script({"report": compact_report(report)}), "</script>",
        "<script type=\"module\">", script, "</script>",
        "</body></html>\n",
    ])


_PAGE_CSS = """
body { margin: 16px; background: #ffffff; }
main { max-width: 1500px; margin: 0 auto; }
.pv-ticket { margin-top: 14px; font-family: system-ui, sans-serif; font-size: 13px; }
.pv-ticket pre { white-space: pre-wrap; background: #f4f4f4; padding: 8px; border: 1px solid #ddd; }
"""


def _page_title(report: dict[str, Any]) -> str:
    by_id = {n["id"]: n for n in report["nodes"]}
    findings = report["findings"]
    if findings:
        top = by_id.get(findings[0]["node"], {})
        return f"planview: {_words.plural(len(findings), 'origin')}, the first at {top.get('label', '?')}"
    return f"planview: {_words.plural(len(report['nodes']), 'operator')}, no origin"


# -- the static tree -----------------------------------------------------------------------------

_STATIC_CSS = """
<style>
.pvs { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; font-size: 13px; }
.pvs table { border-collapse: collapse; }
.pvs th, .pvs td { padding: 1px 8px; text-align: left; vertical-align: top; }
.pvs .n { text-align: right; font-variant-numeric: tabular-nums; }
.pvs .e { text-align: center; border-radius: 2px; }
.pvs .neutral td { color: #6b6b6b; }
.pvs .neutral .e { border: 1px dashed #9a9a9a; font-style: italic; }
.pvs .origin td:first-child { border-left: 3px solid #222; font-weight: 700; }
.pvs .inherited td:first-child { border-left: 3px dotted #888; }
.pvs .legend span { display: inline-block; width: 14px; height: 10px; }
.pvs pre { background: #f4f4f4; padding: 6px; white-space: pre-wrap; }
.pvs .caution { border: 1px solid #b58a00; padding: 3px 6px; }
</style>
"""


def render_static_tree(plan) -> str:
    """The tree and the origins as plain HTML with no script: what a viewer with no widget
    front end shows."""
    report = plan.report()
    nodes = report["nodes"]
    by_id = {n["id"]: n for n in nodes}
    shown = nodes
    note = ""
    if len(nodes) > STATIC_ROW_LIMIT:
        keep = paths_to_origins(report)
        shown = [n for n in nodes if n["id"] in keep or n.get("parent") is None][:STATIC_ROW_LIMIT]
        note = (f"<p>{len(nodes) - len(shown):,} of {len(nodes):,} operators are left out here: "
                "this static view lists the paths to the origins. Open the interactive review "
                "or the exported page for all of them.</p>")
    def esc(text: str, keep: str = "") -> str:
        return html.escape(visible(text, keep))

    out = [_STATIC_CSS, '<div class="pvs">']
    findings = report["findings"]
    statements = report["statements"]
    facts = [f"{report['engine']}" + (f" {report['engine_version']}" if report["engine_version"] else ""),
             f"{report['format']} format", _words.plural(len(nodes), "operator"),
             f"{_words.plural(len(findings), 'origin')} at {factor(report['threshold'])} or worse"]
    statements = report["statements"]
    if len(statements) > 1 and report.get("total_ms") is not None:
        facts.append(f"{len(statements)} statements, {ms(report['total_ms'])} in all ("
                     + " + ".join(ms(s.get("time_ms")) for s in statements) + ")")
    elif report.get("execution_ms") is not None:
        facts.append(f"ran {ms(report['execution_ms'])}")
    out.append(f"<p><strong>Plan review</strong> · {esc(' · '.join(facts))}</p>")
    for n in report["notes"]:
        out.append(f"<p><em>{esc(n)}</em></p>")
    legend = "".join(f'<span style="background:{ratio_colour(v / 2)}"></span>' for v in range(-8, 9))
    out.append(f'<p class="legend">estimate too high {legend} estimate too low · '
               "◆ origin: error starts here · ↳ carried from below · dashed: not judged</p>")
    out.append(note)
    timed = any(n.get("self_ms") is not None for n in nodes)
    out.append("<table><thead><tr><th>operator</th><th class=\"n\">estimated</th>"
               "<th class=\"n\">actual</th><th class=\"n\">starts</th>"
               + ("<th class=\"n\">own time</th>" if timed else "") + "<th>error</th><th></th>"
               "</tr></thead><tbody>")
    findings_by_node = {f["node"]: f for f in findings}
    current = None
    for node in shown:
        if len(statements) > 1 and node.get("statement") != current and 0 <= node.get("statement", -1) < len(statements):
            current = node["statement"]
            said = statements[current]
            time = ", ".join(_words.statement_times(said, planning=False))
            out.append(f'<tr class="statement"><th colspan="{7 if timed else 6}">statement {current + 1} of {len(statements)}'
                       + (f" · {esc(time)}" if time else "") + "</th></tr>")
        state = node_state(node)
        ratio = node["log10_ratio"] if node.get("judged") else None
        if ratio is None:
            err = '<td class="e">not judged</td>' if not node.get("judged") else '<td class="e">–</td>'
        else:
            err = (f'<td class="e" style="background:{ratio_colour(ratio)};color:{ink_for(ratio)}">'
                   f"{esc(error_words(ratio, node['q_error']))}</td>")
        if state == "origin":
            f = findings_by_node.get(node["id"], {})
            mark = f"◆ {f.get('rank', '')} {cause_words(f.get('cause')) or ''}"
        elif state == "inherited":
            mark = "↳ from #" + ", #".join(str(i) for i in node["inherits_from"][:3])
        elif state == "neutral":
            mark = node.get("not_judged_reason") or ""
        else:
            mark = ""
        indent = "&nbsp;" * (3 * min(node.get("depth") or 0, 60))
        out.append(
            f'<tr class="{state}"><td>{indent}#{node["id"]} {esc(node["label"] or node["operator"] or "")}</td>'
            f'<td class="n">{esc(rows(node["est_total"] if node["est_total"] is not None else node["est_rows"]))}</td>'
            f'<td class="n">{esc(rows(node["actual_total"]))}</td><td class="n">{esc(rows(node["starts"]))}</td>'
            + (f'<td class="n">{esc(ms(node.get("self_ms")))}</td>' if timed else "")
            + f"{err}<td>{esc(mark)}</td></tr>")
    out.append("</tbody></table>")
    if findings:
        out.append("<h4>Origins, most impact first</h4>")
    for f in findings:
        node = by_id.get(f["node"], {})
        out.append(f"<div><p><strong>{f['rank']}. #{f['node']} {esc(node.get('label') or '')}</strong>: "
                   f"estimate {esc(factor(f['own_q_error']))} too {'low' if f['direction'] == 'under' else 'high'} "
                   f"here ({esc(factor(f['q_error']))} in all)"
                   + (f"; cause: {esc(cause_words(f['cause']) or '')}" if f.get("cause") else "; not diagnosed yet")
                   + "</p>")
        conditions = node.get("conditions") or []
        if conditions:
            out.append("<ul>" + "".join(f"<li>{esc(c.get('key') or c.get('kind') or '')}: <code>{esc(c.get('text') or '')}</code></li>"
                                        for c in conditions) + "</ul>")
        if f.get("summary"):
            out.append(f"<p>{esc(f['summary'])}</p>")
        lines, pairs = evidence_items(f.get("evidence"))
        if lines:
            out.append("<ul>" + "".join(f"<li>{esc(x)}</li>" for x in lines) + "</ul>")
        if pairs:
            out.append("<table>" + "".join(f"<tr><th>{esc(k)}</th><td>{esc(v)}</td></tr>" for k, v in pairs)
                       + "</table>")
        if f.get("fix"):
            fix = esc(f["fix"], keep="\n\t")
            out.append(f"<pre>{fix}</pre>")
            out.append(f'<p class="caution"><strong>Before you run it:</strong> {esc(f.get("caution") or GENERIC_CAUTION)}</p>')
        elif f.get("caution"):
            out.append(f'<p class="caution"><strong>Caution:</strong> {esc(f["caution"])}</p>')
        out.append("</div>")
    out.append("</div>")
    return "".join(out)


__all__ = ["LARGE_PLAN", "compact_report", "pack_source", "render_html", "render_static_tree", "widget_css", "widget_module"]


# -- two plans compared ----------------------------------------------------------------------------

_COMPARE_BOOT = """
const planviewModels = {};
for (const side of ["before", "after"]) {
  const data = JSON.parse(document.getElementById(`planview-data-${side}`).textContent);
  planviewModels[side] = localModel({ report: data.report, selected: null, chart_mode: "svg", can_save: false });
  render({ model: planviewModels[side], el: document.getElementById(`planview-${side}`) });
}
const planviewRows = Array.from(document.querySelectorAll("#planview-compare tbody tr"));
const planviewPick = (row) => {
  for (const other of planviewRows) other.classList.toggle("pv-picked", other === row);
  for (const side of ["before", "after"]) {
    const value = row.dataset[side];
    planviewModels[side].set("selected", value === "" ? null : Number(value));
  }
};
for (const row of planviewRows) {
  row.tabIndex = 0;
  row.addEventListener("click", () => planviewPick(row));
  row.addEventListener("keydown", (event) => { if (event.key === "Enter") planviewPick(row); });
}
"""

_COMPARE_CSS = """
.pv-compare { font-family: system-ui, sans-serif; font-size: 13px; }
.pv-compare table { border-collapse: collapse; margin: 8px 0 16px; }
.pv-compare th, .pv-compare td { border-bottom: 1px solid #ddd; padding: 3px 8px; text-align: left; }
.pv-compare tbody tr { cursor: pointer; }
.pv-compare tbody tr:hover, .pv-compare tbody tr.pv-picked { background: #eef3fb; }
.pv-compare .v-better td:last-child { color: #1a7f37; }
.pv-compare .v-worse td:last-child { color: #b42318; font-weight: 600; }
.pv-sides { display: grid; grid-template-columns: 1fr; gap: 18px; }
.pv-side h3 { font-family: system-ui, sans-serif; font-size: 14px; margin: 6px 0; }
"""

COMPARE_COLUMNS = (("position", "place"), ("label", "operator"), ("before_rows", "before (est / act)"),
                   ("before_q", "q-error"), ("after_rows", "after (est / act)"), ("after_q", "q-error"),
                   ("verdict", "verdict"))
"""The comparison table's columns: the report's key and the heading (every view lays out these)."""


def comparison_table(report: dict[str, Any]) -> str:
    """The comparison's node table as HTML, every cell escaped; each row names the matched
    node ids (for the page's script, which selects them in the two reviews)."""
    e = html.escape
    head = "".join(f"<th>{e(title)}</th>" for _, title in COMPARE_COLUMNS)
    body = []
    for n in report["nodes"]:
        before = "" if n["before"] is None else str(int(n["before"]))
        after = "" if n["after"] is None else str(int(n["after"]))
        cells = "".join(f"<td>{e(visible(str(n[key])))}</td>" for key, _ in COMPARE_COLUMNS)
        body.append(f"<tr class=\"v-{e(n['verdict'].replace(' ', '-'))}\" data-before=\"{before}\" "
                    f"data-after=\"{after}\">{cells}</tr>")
    return f"<table id=\"planview-compare\"><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def render_comparison_html(comparison) -> str:
    """One offline page for two plans compared: the comparison's table, then each plan's own
    review (the same ES module and data as a single review's page, rendered twice); picking a
    row selects its two nodes. Falls back to the table and the static trees with no script."""
    report = comparison.report()
    plans = {"before": comparison.before_plan, "after": comparison.after_plan}
    script, policy = _page_script(_COMPARE_BOOT)
    e = html.escape
    sides = []
    data = []
    for side, plan in plans.items():
        name = report[side]
        sides.append(f"<section class=\"pv-side\"><h3>{e(side)}: {e(visible(name))}</h3>"
                     f"<div id=\"planview-{side}\"></div><noscript>{render_static_tree(plan)}</noscript></section>")
        data.append(f"<script type=\"application/json\" id=\"planview-data-{side}\">"
                    f"{_json_for_script({'report': compact_report(plan.report())})}</script>")
    return "".join([
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">",
        f"<meta http-equiv=\"Content-Security-Policy\" content=\"{e(policy)}\">",
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">",
        "<meta name=\"generator\" content=\"planview\">",
        f"<title>{e(visible('planview comparison: ' + report['before'] + ' → ' + report['after']))}</title>",
        "<style>", widget_css(), _PAGE_CSS, _COMPARE_CSS, "</style></head><body><main>",
        "<section class=\"pv-compare\"><h2>Plan comparison</h2>",
        f"<p>{e(visible(report['before']))} → {e(visible(report['after']))}</p>",
        f"<p>{e(visible(report['headline']))}</p>", comparison_table(report), "</section>",
        "<div class=\"pv-sides\">", *sides, "</div></main>", *data,
        "<script type=\"module\">", script, "</script>",
        "</body></html>\n",
    ])
