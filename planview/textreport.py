"""The terminal table: the tree with its numbers, origins marked, and the findings below.

Every line passes through `visible`: a plan name holding an ESC sequence or a direction
override reaches the terminal as its escape (``\\x1b[2J``), never raw.
"""

from __future__ import annotations

import shutil

from . import words
from .inert import visible


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
    label_width = max(24, min(60, width - 68))
    lines = [
        visible(f"planview: {report['engine']} ({report['format']}"
        + (f", version {report['engine_version']}" if report["engine_version"] else "")
        + f"), {words.plural(len(nodes), 'operator')}, {words.plural(len(report['findings']), 'origin')} "
        f"at q-error >= {report['threshold']:g}"),
    ]
    lines += [visible(f"note: {note}") for note in report["notes"]]
    header = (f"{'id':>5}  {'operator':<{label_width}} {'est total':>11} {'actual':>11} {'starts':>8} "
              f"{'error':>20}  mark")
    lines += [header, "-" * min(width, len(header) + 20)]
    for node in nodes:
        prefix = "  " * node["depth"]
        rel = node["parent_relationship"]
        if rel in ("InitPlan", "SubPlan") and node["subplan_name"]:
            prefix += f"[{node['subplan_name']}] "
        label = visible(prefix + node["label"])
        if len(label) > label_width:
            label = label[: label_width - 1] + "~"
        text = node["text"]
        row = visible(f"{text['id']:>5}  {label:<{label_width}} {text['est']:>11} "
                      f"{text['actual']:>11} {text['starts']:>8} {text['error']:>20}  "
                      f"{_mark(node, by_id)}").rstrip()
        if color and node["origin"]:
            row = f"\x1b[1m{row}\x1b[0m"
        lines.append(row)
    below: list[str] = []
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
