"""The terminal table: the tree with its numbers, origins marked, and the findings below.

Every line passes through `visible`: a plan name holding an ESC sequence or a direction
override reaches the terminal as its escape (``\\x1b[2J``), never raw.
"""

from __future__ import annotations

import shutil

from . import words
from .inert import visible


def _statement_heading(number: int, count: int, statement: dict) -> str:
    """A statement's heading in a paste of several: its number and its time."""
    said = [f"statement {number} of {count}", *words.statement_times(statement)]
    return "== " + ", ".join(said)


def _times_line(report: dict) -> str | None:
    """The paste's time: the statements' times summed, each named when there are several."""
    if report.get("total_ms") is None:
        return None
    statements = report["statements"]
    line = f"time: {words.ms(report['total_ms'])}"
    if len(statements) > 1:
        parts = [words.ms(s.get("time_ms")) for s in statements]
        line += f", the sum of {len(statements)} statements ({' + '.join(parts)})"
    if report.get("planning_ms") is not None:
        line += f"; planning {words.ms(report['planning_ms'])}"
    if any(s.get("time_from") == "operators" for s in statements):
        line += "; where no execution time was printed, the operators' time"
    return line


def _query_lines(statement: dict, width: int, label: str = "query") -> list[str]:
    query = (statement.get("query_text") or "").strip()
    if not query:
        return []
    shown = query.splitlines()
    lines = [visible(f"{label}: {shown[0][:width - 8]}")]
    lines += [visible(f"       {line[:width - 8]}") for line in shown[1:12]]
    if len(shown) > 12:
        lines.append(visible(f"       ... ({words.plural(len(shown) - 12, 'more line')})"))
    return lines


def _mark(node: dict, by_id: dict) -> str:
    if node["origin"]:
        return "<< error introduced here"
    if node["inherits_from"]:
        return "carried from #" + ", #".join(str(i) for i in node["inherits_from"][:3])
    if not node["judged"]:
        return f"({node['not_judged_reason']})" if node["not_judged_reason"] else ""
    return ""


def render(plan, width: int | None = None, color: bool = False) -> str:
    report = plan.report()
    width = width or shutil.get_terminal_size((120, 24)).columns
    nodes = report["nodes"]
    by_id = {n["id"]: n for n in nodes}
    timed = any(n.get("total_ms") is not None for n in nodes)
    label_width = max(24, min(60, width - 68 - (22 if timed else 0)))
    lines = [
        visible(f"planview: {report['engine']} ({report['format']}"
        + (f", version {report['engine_version']}" if report["engine_version"] else "")
        + f"), {words.plural(len(nodes), 'operator')}, {words.plural(len(report['findings']), 'origin')} "
        f"at q-error >= {report['threshold']:g}"),
    ]
    lines += [visible(f"note: {note}") for note in report["notes"]]
    statements = report["statements"]
    several = len(statements) > 1
    said_times = _times_line(report)
    if said_times:
        lines.append(said_times)
    if not several:
        for statement in statements:
            lines += _query_lines(statement, width)
    times_head = f" {'total time':>11} {'self time':>11}" if timed else ""
    header = (f"{'id':>5}  {'operator':<{label_width}} {'est total':>11} {'actual':>11} {'starts':>8}"
              f"{times_head} {'error':>20}  mark")
    lines += [header, "-" * min(width, len(header) + 20)]
    shown_statement = None
    for node in nodes:
        if several and node["statement"] != shown_statement and 0 <= node["statement"] < len(statements):
            shown_statement = node["statement"]
            statement = statements[shown_statement]
            lines.append(_statement_heading(shown_statement + 1, len(statements), statement))
            lines += _query_lines(statement, width)
        prefix = "  " * node["depth"]
        rel = node["parent_relationship"]
        if rel in ("InitPlan", "SubPlan") and node["subplan_name"]:
            prefix += f"[{node['subplan_name']}] "
        label = visible(prefix + node["label"])
        if len(label) > label_width:  # cut the middle: the relation name at the end stays
            keep = label_width - 1
            head = len(prefix) + max(3, (keep - len(prefix)) // 3)
            head = min(head, keep - 4)
            label = label[:head] + "~" + label[len(label) - (keep - head):]
        text = node["text"]
        row = visible(f"{text['id']:>5}  {label:<{label_width}} {text['est']:>11} "
                      f"{text['actual']:>11} {text['starts']:>8}"
                      + (f" {words.ms(node.get('total_ms')):>11} {words.ms(node.get('self_ms')):>11}" if timed else "")
                      + f" {text['error']:>20}  "
                      f"{_mark(node, by_id)}").rstrip()
        if color and node["origin"]:
            row = f"\x1b[1m{row}\x1b[0m"
        lines.append(row)
    below: list[str] = []
    if report.get("slowest"):
        below += ["", "Slowest operators (own time, in all starts; share of all operators' own time):"]
        for item in report["slowest"]:
            share = f"{item['share'] * 100:.1f}%" if item.get("share") is not None else "-"
            below.append(f"{item['rank']}. #{item['node']} {item['label']}: {words.ms(item['self_ms'])} own, "
                         f"{share}; {words.ms(item['total_ms'])} with its inputs"
                         + (" (an origin)" if item.get("origin") else ""))
    if report["findings"]:
        below += ["", "Origins (where an error was introduced), most impact first:"]
    cautions: dict[str, int] = {}
    for finding in report["findings"]:
        node = by_id[finding["node"]]
        text = finding["text"]
        below.append(f"{text['rank']} at {node['text']['id']} {node['label']}: the estimate is {text['added']} here "
                     f"({text['in_all']} in all)"
                     + (f", in statement {node['statement'] + 1}" if several else ""))
        if finding["cause"]:
            confidence = finding["confidence"]
            below.append(f"   cause: {text['cause']}"
                         + (f" (confidence {confidence:.2f})" if confidence is not None else "")
                         + (f"; also: {', '.join(text['also'])}" if text["also"] else ""))
        if finding["summary"]:
            below.append(f"   {finding['summary']}")
        impact = finding.get("impact") or {}
        if isinstance(impact, dict) and impact.get("origin_ms") is not None:
            share = impact.get("origin_share")
            below.append(f"   time under it: {words.ms(impact['origin_ms'])}"
                         + (f" ({share * 100:.0f}% of {'its statement' if several else 'the query'})"
                            if share is not None else ""))
        if node["text"].get("derivation"):
            below.append(f"   {node['text']['derivation']}")
        if text.get("measured"):
            below.append(f"   measured: {text['measured']}")
        if text.get("proof"):
            below.append(f"   proof: {text['proof']}")
        if finding["fix"]:
            below.append("   fix:")
            below += [f"     {line}" for line in finding["fix"].splitlines()]
        if finding["caution"]:
            # a caution shared by many origins is printed once, below them all
            number = cautions.setdefault(finding["caution"], len(cautions) + 1)
            below.append(f"   caution: see note [{number}] below")
    if cautions:
        below += ["", "Cautions:"]
        below += [f"[{number}] {caution}" for caution, number in cautions.items()]
    lines += [visible(line) for line in below]
    return "\n".join(lines) + "\n"
