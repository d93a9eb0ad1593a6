"""The index over many reviews: one row per plan (file, engine, operators, origins, worst error,
top cause, time), sortable by any column, each row linking to its review page.

A row is made from `Plan.report()` alone (`index_row`); the page (`render_index`) only lays
the rows out. File names and causes are untrusted text: every string is HTML-escaped after
`planview.inert.visible`, every link is percent-encoded, and the one inline script (the
sorting) is allowed by its hash in the page's Content-Security-Policy, so the page loads
nothing and runs nothing else, offline.
"""

from __future__ import annotations

import base64
import hashlib
import html
from dataclasses import dataclass, field
from typing import Any
from urllib.parse import quote

from .. import words as _words
from ..inert import visible

COLUMNS = (
    ("file", "plan file", "text"),
    ("engine", "engine", "text"),
    ("statements", "statements", "number"),
    ("operators", "operators", "number"),
    ("origins", "origins", "number"),
    ("worst", "worst error", "number"),
    ("cause", "top cause", "text"),
    ("time", "time", "number"),
)
"""(key, heading, how it sorts) of each column, in order."""


@dataclass
class IndexRow:
    """One plan's row: what is shown (``text``) and what it sorts by (``key``)."""

    file: str
    link: str | None
    text: dict[str, str] = field(default_factory=dict)
    key: dict[str, Any] = field(default_factory=dict)
    worst_q_error: float = 1.0


@dataclass
class Unreadable:
    file: str
    reason: str


def index_row(report: dict[str, Any], file: str, link: str | None) -> IndexRow:
    """A plan's row from its report: the worst origin's added error, the top origin's cause,
    the time summed over the statements (the execution time each printed, else its
    operator time)."""
    findings = report.get("findings") or []
    worst = max(findings, key=lambda f: f.get("own_q_error") or 1.0, default=None)
    top = min(findings, key=lambda f: f.get("rank") or 0, default=None)
    time_ms = report.get("total_ms")
    engine = str(report.get("engine") or "")
    if report.get("engine_version"):
        engine += f" {report['engine_version']}"
    engine += f" ({report.get('format')})"
    statements = len(report.get("statements") or [])
    operators = len(report.get("nodes") or [])
    cause = None
    if top is not None:
        cause = (top.get("text") or {}).get("cause") or _words.cause(top.get("cause")) or "not diagnosed"
    text = {
        "file": file,
        "engine": engine,
        "statements": _words.rows(statements),
        "operators": _words.rows(operators),
        "origins": _words.rows(len(findings)),
        "worst": _words.finding_error(worst["own_q_error"], worst["direction"]) if worst else "no origin",
        "cause": cause or "–",
        "time": _words.ms(time_ms) if time_ms is not None else "–",
    }
    if not report.get("has_actuals"):
        text["worst"] = "estimates only"
    key = {
        "file": file.lower(),
        "engine": engine.lower(),
        "statements": statements,
        "operators": operators,
        "origins": len(findings),
        "worst": worst["own_q_error"] if worst else 0,
        "cause": (cause or "").lower(),
        "time": time_ms if time_ms is not None else -1,
    }
    return IndexRow(file=file, link=link, text=text, key=key,
                    worst_q_error=worst["own_q_error"] if worst else 1.0)


def summary_line(row: IndexRow) -> str:
    """The row as one terminal line."""
    t = row.text
    worst = f", worst {t['worst']}" if row.key["origins"] else ""
    cause = f", top cause: {t['cause']}" if row.key["origins"] else ""
    return visible(f"{t['file']}: {t['engine']}, {_words.plural(row.key['operators'], 'operator')}, "
                   f"{_words.plural(row.key['origins'], 'origin')}{worst}{cause}, time {t['time']}")


def _esc(value: Any) -> str:
    return html.escape(visible(str(value)), quote=True)


def _href(link: str) -> str:
    """A relative link to a file beside the index: percent-encoded (a name holding ``"``,
    ``<``, ``#`` or ``?`` stays one path), then escaped for the attribute."""
    return html.escape(quote(link, safe="/"), quote=True)


def render_index(rows: list[IndexRow], *, title: str = "planview reviews",
                 unreadable: list[Unreadable] = (), skipped: int = 0, fail_at: float | None = None) -> str:
    """The index page: a table of the rows, sortable by a click on any column's heading."""
    script = _SORT_SCRIPT
    digest = base64.b64encode(hashlib.sha256(script.encode("utf-8")).digest()).decode("ascii")
    policy = (f"default-src 'none'; script-src 'sha256-{digest}'; style-src 'unsafe-inline'; "
              "img-src data:; form-action 'none'; base-uri 'none'")
    origins = sum(r.key["origins"] for r in rows)
    facts = [_words.plural(len(rows), "plan"), _words.plural(origins, "origin")]
    if fail_at is not None:
        failing = sum(1 for r in rows if r.key["origins"] and r.worst_q_error >= fail_at)
        facts.append(f"{_words.plural(failing, 'plan')} with an origin at {_words.factor(fail_at)} or worse")
    if unreadable:
        facts.append(f"{len(unreadable)} unreadable")
    if skipped:
        facts.append(f"{_words.plural(skipped, 'file')} skipped (not plans)")
    out = [
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">",
        f"<meta http-equiv=\"Content-Security-Policy\" content=\"{html.escape(policy)}\">",
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">",
        "<meta name=\"generator\" content=\"planview\">",
        f"<title>{_esc(title)}</title><style>{_CSS}</style></head><body><main>",
        f"<h1>{_esc(title)}</h1>",
        f"<p class=\"pv-index-facts\">{_esc(', '.join(facts))}. Click a column's heading to sort by it; "
        "click again to reverse. Time: each statement's execution time as the engine printed it, "
        "else its operators' time, summed over the statements; – where the output has no timings."
        + (f" A bar at the left marks a plan with an origin at {_esc(_words.factor(fail_at))} or worse."
           if fail_at is not None else "") + "</p>",
        "<table class=\"pv-index\" id=\"pv-index\"><thead><tr>",
    ]
    for number, (_key, heading, kind) in enumerate(COLUMNS):
        out.append(f"<th scope=\"col\" data-kind=\"{kind}\" aria-sort=\"none\">"
                   f"<button type=\"button\" data-column=\"{number}\">{_esc(heading)}</button></th>")
    out.append("</tr></thead><tbody>")
    for row in rows:
        cells = []
        for key, _heading, kind in COLUMNS:
            shown = _esc(row.text[key])
            if key == "file" and row.link:
                shown = f"<a href=\"{_href(row.link)}\">{shown}</a>"
            css = " class=\"num\"" if kind == "number" else ""
            cells.append(f"<td{css} data-sort=\"{_esc(row.key[key])}\">{shown}</td>")
        flag = " class=\"pv-failing\"" if fail_at is not None and row.key["origins"] \
            and row.worst_q_error >= fail_at else ""
        out.append(f"<tr{flag}>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    if unreadable:
        out.append("<h2>Unreadable files</h2><ul class=\"pv-unreadable\">")
        out += [f"<li><code>{_esc(item.file)}</code>: {_esc(item.reason)}</li>" for item in unreadable]
        out.append("</ul>")
    out.append(f"</main><script>{script}</script></body></html>\n")
    return "".join(out)


_CSS = """
body { margin: 16px; font-family: system-ui, sans-serif; font-size: 14px; color: #111; background: #fff; }
main { max-width: 1400px; margin: 0 auto; }
h1 { font-size: 20px; }
.pv-index { border-collapse: collapse; width: 100%; }
.pv-index th, .pv-index td { border-bottom: 1px solid #ccc; padding: 4px 8px; text-align: left; vertical-align: top; }
.pv-index td.num, .pv-index th[data-kind="number"] { text-align: right; font-variant-numeric: tabular-nums; }
.pv-index th button { font: inherit; font-weight: 600; border: 0; background: none; padding: 0; cursor: pointer; color: #111; }
.pv-index th[aria-sort="ascending"] button::after { content: " \\25B2"; }
.pv-index th[aria-sort="descending"] button::after { content: " \\25BC"; }
.pv-index tr.pv-failing td:first-child { border-left: 4px solid #942f06; }
.pv-index a { color: #0645ad; word-break: break-all; }
.pv-unreadable code { word-break: break-all; }
"""

_SORT_SCRIPT = """
(function () {
  var table = document.getElementById("pv-index");
  if (!table) { return; }
  var heads = table.tHead.rows[0].cells;
  function sortBy(column) {
    var head = heads[column];
    var ascending = head.getAttribute("aria-sort") !== "ascending";
    var numeric = head.getAttribute("data-kind") === "number";
    var body = table.tBodies[0];
    var rows = Array.prototype.slice.call(body.rows);
    rows.sort(function (a, b) {
      var x = a.cells[column].getAttribute("data-sort");
      var y = b.cells[column].getAttribute("data-sort");
      var order = numeric ? (parseFloat(x) - parseFloat(y)) : (x < y ? -1 : x > y ? 1 : 0);
      return ascending ? order : -order;
    });
    for (var i = 0; i < heads.length; i++) { heads[i].setAttribute("aria-sort", "none"); }
    head.setAttribute("aria-sort", ascending ? "ascending" : "descending");
    for (var j = 0; j < rows.length; j++) { body.appendChild(rows[j]); }
  }
  for (var i = 0; i < heads.length; i++) {
    heads[i].querySelector("button").addEventListener("click", (function (column) {
      return function () { sortBy(column); };
    })(i));
  }
})();
"""
