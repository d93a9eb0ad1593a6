"""The terminal table: the tree with its numbers, origins marked, and the findings below.

Every line passes through `visible`: a plan name holding an ESC sequence or a direction
override reaches the terminal as its escape (``\\x1b[2J``), never raw.
"""

from __future__ import annotations

import shutil

from . import words
from .inert import visible


def _ms(value) -> str:
    if value is None:
        return "-"
    return f"{value:,.1f}" if value >= 100 else f"{value:,.3f}"


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
    for number, statement in enumerate(report["statements"], 1):
        query = (statement.get("query_text") or "").strip()
        if query:
            shown = query.splitlines()
            lines.append(visible(f"query{f' {number}' if len(report['statements']) > 1 else ''}: {shown[0][:width - 8]}"))
            lines += [visible(f"       {line[:width - 8]}") for line in shown[1:12]]
            if len(shown) > 12:
                lines.append(visible(f"       ... ({words.plural(len(shown) - 12, 'more line')})"))
    times_head = f" {'total ms':>10} {'self ms':>10}" if timed else ""
    header = (f"{'id':>5}  {'operator':<{label_width}} {'est total':>11} {'actual':>11} {'starts':>8}"
              f"{times_head} {'error':>20}  mark")
    lines += [header, "-" * min(width, len(header) + 20)]
    for node in nodes:
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
                      + (f" {_ms(node.get('total_ms')):>10} {_ms(node.get('self_ms')):>10}" if timed else "")
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
            below.append(f"{item['rank']}. #{item['node']} {item['label']}: {_ms(item['self_ms'])} ms own, "
                         f"{share}; {_ms(item['total_ms'])} ms with its inputs"
                         + (" (an origin)" if item.get("origin") else ""))
    if report["findings"]:
        below += ["", "Origins (where an error was introduced), most impact first:"]
    cautions: dict[str, int] = {}
    for finding in report["findings"]:
        node = by_id[finding["node"]]
        text = finding["text"]
        below.append(f"{text['rank']} at {node['text']['id']} {node['label']}: the estimate is {text['added']} here "
                     f"({text['in_all']} in all)")
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
            below.append(f"   time under it: {_ms(impact['origin_ms'])} ms"
                         + (f" ({share * 100:.0f}% of the query)" if share is not None else ""))
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
