"""The ticket body in Markdown: the query's summary, the origins with cause, q-error, evidence
and fix, and the cautions.

Plan strings are text here too: names, labels, conditions and SQL go into code spans and
fences, which no Markdown renderer reads as markup or turns into links; in prose every Markdown
and HTML sign is escaped and anything a ticket system would link (an address, ``www.``, an
e-mail or a mention) is put in a code span. Control and direction characters become visible
escapes everywhere (`planview.inert.visible`).
"""

from __future__ import annotations

import re
from typing import Any

from .. import words as _words
from ..inert import visible
from .common import GENERIC_CAUTION, cause_words, evidence_items, factor, ms

_SIGNS = re.compile(r"([\\`*_{}\[\]<>#|~$&])")


_LINKISH = re.compile(r"[A-Za-z][A-Za-z0-9+.\-]*:(?=\S)|www\.|@", re.IGNORECASE)
"""What GitHub, GitLab or Jira could turn into a link or a mention: a scheme, www., an @."""


def md_text(value: Any) -> str:
    """Plain text for Markdown: every sign a renderer could act on is backslash-escaped,
    `<` and `&` become entities, line breaks become spaces (so a table row stays one), and
    a word a ticket system would link goes into a code span."""
    words = []
    for word in " ".join(visible(value, keep="\n\r\t").split()).split(" "):
        if _LINKISH.search(word):
            words.append(md_code(word, in_table=True))
            continue
        word = _SIGNS.sub(r"\\\1", word)
        words.append(word.replace("\\<", "&lt;").replace("\\>", "&gt;").replace("\\&", "&amp;"))
    return " ".join(words)


def md_code(value: Any, *, in_table: bool = False) -> str:
    """An inline code span long enough to hold any backticks in the text."""
    text = " ".join(visible(value).split())
    ticks = "`" * (max((len(m) for m in re.findall(r"`+", text)), default=0) + 1)
    if in_table:
        text = text.replace("|", "\\|")
    pad = " " if text.startswith("`") or text.endswith("`") or not text.strip() else ""
    return f"{ticks}{pad}{text}{pad}{ticks}"


def md_fence(text: str, lang: str = "") -> str:
    text = visible(text, keep="\n")
    fence = "`" * max(3, max((len(m) for m in re.findall(r"`+", text)), default=0) + 1)
    return f"{fence}{lang}\n{text.rstrip()}\n{fence}"


def render_markdown(plan) -> str:
    report = plan.report()
    nodes = report["nodes"]
    by_id = {n["id"]: n for n in nodes}
    findings = report["findings"]
    statement = (report["statements"] or [{}])[0]
    engine = report["engine"] + (f" {report['engine_version']}" if report["engine_version"] else "")
    lang = getattr(plan, "sql_dialect", None) and "sql" or "sql"
    top = min(findings, key=lambda f: f["rank"]) if findings else None
    headline = f"## Query plan review: {_words.plural(len(findings), 'estimate origin')}"
    if top is not None:  # the headline names the top origin, never a node that only carries an error
        where = by_id.get(top["node"], {})
        headline += (f", the first at \\#{top['node']} {md_code(where.get('label') or '')}: "
                     f"{md_text(top['text']['added'])}"
                     + (f" ({md_text(top['text']['cause'])})" if top["text"].get("cause") else ""))
    out = [headline, ""]
    facts = [f"engine: {md_text(engine)} ({md_text(report['format'])})",
             _words.plural(len(nodes), "operator"),
             f"origins at {md_text(factor(report['threshold']))} or worse: {len(findings)}"]
    statements = report["statements"]
    several = len(statements) > 1
    if report.get("total_ms") is not None:
        said = f"time: {md_text(ms(report['total_ms']))}"
        if several:
            said += (f", the sum of {len(statements)} statements ("
                     + " + ".join(md_text(ms(s.get("time_ms"))) for s in statements) + ")")
        if any(s.get("time_from") == "operators" for s in statements):
            said += "; where no execution time was printed, the operators' time"
        facts.append(said)
    if report.get("planning_ms") is not None:
        facts.append(f"planning time: {md_text(ms(report['planning_ms']))}")
    judged = [n for n in nodes if n.get("judged")]
    worst = max(judged, key=lambda n: n.get("q_error") or 1.0, default=None)
    if worst and worst.get("q_error") and top is None:  # with origins, the headline names the first
        facts.append(f"largest error: {md_text(factor(worst['q_error']))} at "
                     f"\\#{worst['id']} {md_code(worst['label'])}")
    out += [f"- {fact}" for fact in facts]
    out += [f"- note: {md_text(note)}" for note in report["notes"]]
    if not report["has_actuals"]:
        out.append("- estimates only: the plan has no actual rows, so nothing could be judged")
    if several:
        out += _statements(report, lang)
    elif statement.get("query_text"):
        out += ["", "Query:", "", md_fence(statement["query_text"], lang)]
    out += _slowest(report)
    if not findings:
        out += ["", "No operator's estimate is off by the threshold or more."]
        return "\n".join(out) + "\n"
    out += ["", "### Origins, most impact first", "",
            "| # | operator | estimate | q-error here (in all) | cause | evidence | fix |",
            "|---|---|---|---|---|---|---|"]
    for f in findings:
        node = by_id.get(f["node"], {})
        lines, pairs = evidence_items(f.get("evidence"))
        evidence = "; ".join(md_text(x) for x in lines[:2]) or "; ".join(
            f"{md_text(k)}: {md_text(v)}" for k, v in pairs[:3]) or "–"
        fix = md_code(f["fix"].strip().splitlines()[0] + (" …" if len(f["fix"].strip().splitlines()) > 1 else ""),
                      in_table=True) if f.get("fix") else "–"
        cause = md_text(cause_words(f.get("cause")) or "not diagnosed yet")
        if f.get("confidence") is not None:
            cause += f" ({round(f['confidence'] * 100)}%)"
        out.append(
            f"| {f['rank']} | \\#{f['node']} {md_code(node.get('label') or '', in_table=True)} | "
            f"too {'low' if f['direction'] == 'under' else 'high'} | {md_text(factor(f['own_q_error']))} "
            f"({md_text(factor(f['q_error']))}) | {cause} | {evidence} | {fix} |")
    out += ["", "### Each origin"]
    for f in findings:
        node = by_id.get(f["node"], {})
        cause = cause_words(f.get("cause"))
        out += ["", f"#### {f['rank']}. \\#{f['node']} {md_code(node.get('label') or '')}"
                + (f": {md_text(cause)}" if cause else "")
                + (f" (statement {node['statement'] + 1})" if several and "statement" in node else ""), ""]
        out.append(f"Estimated {md_text(_rows(node.get('est_total')))} rows, got "
                   f"{md_text(_rows(node.get('actual_total')))} over {md_text(_rows(node.get('starts')))} "
                   f"start(s): {md_text(factor(f['own_q_error']))} too "
                   f"{'low' if f['direction'] == 'under' else 'high'} here.")
        for c in node.get("conditions") or []:
            out.append(f"- {md_text(c.get('key') or c.get('kind') or '')}: {md_code(c.get('text') or '')}")
        if f.get("summary"):
            out += ["", md_text(f["summary"])]
        lines, pairs = evidence_items(f.get("evidence"))
        if lines or pairs:
            out += ["", "Evidence:", ""]
            out += [f"- {md_text(x)}" for x in lines]
            out += [f"- {md_text(k)}: {md_text(v)}" for k, v in pairs]
        impact = f.get("impact") or {}
        if isinstance(impact, dict) and impact.get("origin_ms") is not None:
            share = impact.get("origin_share")
            out += ["", f"Time under it (with its inputs, in all starts): {md_text(ms(impact['origin_ms']))}"
                    + (f", {share * 100:.0f}% of {'its statement' if several else 'the query'}."
                       if share is not None else ".")]
        if isinstance(impact, dict) and (impact.get("text") or impact.get("ms") is not None):
            out += ["", "Impact: " + " ".join(x for x in (
                md_text(ms(impact["ms"])) + "." if impact.get("ms") is not None else "",
                md_text(impact.get("text") or "")) if x)]
        said = f.get("text") or {}
        worked = nodes[f["node"]].get("derivation") if 0 <= f["node"] < len(nodes) else None
        if worked and nodes[f["node"]]["text"].get("derivation"):
            out += ["", f"{md_text(nodes[f['node']]['text']['derivation']).capitalize()}:", ""]
            out += [f"{i}. {md_text(step)}" for i, step in enumerate(worked.get("steps") or [], 1)]
        if said.get("measured"):
            out += ["", f"Measured on the server: {md_text(said['measured'])}"]
        if said.get("proof"):
            out += ["", f"Proof: {md_text(said['proof'])}."]
        if f.get("fix"):
            out += ["", "Fix:", "", md_fence(f["fix"], "sql"), "",
                    f"> **Before you run it:** {md_text(f.get('caution') or GENERIC_CAUTION)}"]
        elif f.get("caution"):
            out += ["", f"> **Caution:** {md_text(f['caution'])}"]
    cautions = [f["caution"] for f in findings if f.get("caution")]
    if cautions:
        out += ["", "### Cautions", ""]
        for text in dict.fromkeys(cautions):
            out.append(f"- {md_text(text)}")
    return "\n".join(out) + "\n"


def _statements(report, lang: str) -> list[str]:
    """A paste of several statements, statement by statement: a heading with its time, its
    query where the paste holds one, and the origins found in it."""
    statements = report["statements"]
    origins: dict[int, list[str]] = {}
    by_id = {n["id"]: n for n in report["nodes"]}
    for f in report["findings"]:
        node = by_id.get(f["node"], {})
        origins.setdefault(node.get("statement", 0), []).append(
            f"origin {f['rank']} at \\#{f['node']} {md_code(node.get('label') or '')}")
    operators: dict[int, int] = {}
    for node in report["nodes"]:
        operators[node.get("statement", 0)] = operators.get(node.get("statement", 0), 0) + 1
    out = ["", "### Statements"]
    for number, statement in enumerate(statements):
        said = [_words.plural(operators.get(number, 0), "operator"),
                *(md_text(x) for x in _words.statement_times(statement))]
        out += ["", f"#### Statement {number + 1} of {len(statements)}: {', '.join(said)}"]
        if statement.get("query_text"):
            out += ["", md_fence(statement["query_text"], lang)]
        found = origins.get(number) or []
        out += ["", ("Origins: " + "; ".join(found) + ".") if found else "No origin in this statement."]
    return out


def _slowest(report) -> list[str]:
    """The operators with the largest own time: in all starts and per start, with their share."""
    items = report.get("slowest") or []
    if not items:
        return []
    out = ["", "### Slowest operators, by own time", "",
           "| # | operator | own time | share | with its inputs | own per start | starts |",
           "|---|---|---|---|---|---|---|"]
    for item in items:
        share = f"{item['share'] * 100:.1f}%" if item.get("share") is not None else "–"
        out.append(f"| {item['rank']} | \\#{item['node']} {md_code(item.get('label') or '', in_table=True)}"
                   + (" (origin)" if item.get("origin") else "")
                   + f" | {md_text(ms(item.get('self_ms')))} | {share} | {md_text(ms(item.get('total_ms')))} | "
                   f"{md_text(ms(item.get('self_ms_per_start')))} | {md_text(_rows(item.get('starts')))} |")
    out += ["", "Own time: the operator's time less its inputs'; shares are of all operators' own time."]
    return out


def _rows(value):
    from .common import rows

    return rows(value)
