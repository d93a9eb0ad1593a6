"""Two plans of the same query side by side: before and after a fix, two engine versions, two days.

Nodes are matched in three passes, each linear in the plans' size: the same place in the
tree with the same operator and relation; then the same operator on the same relation, in the
order they appear; then the same relation under another operator (a scan that became an index
scan). Each match says whether its estimate got better or worse (its q-error shrank or grew at
least `CHANGE_FACTOR` times), and the comparison says whether the shape changed and how the
time moved. `report()` decides every word and figure once; the text, Markdown and HTML views
only lay them out.
"""

from __future__ import annotations

import html
import os
from dataclasses import asdict, dataclass, field
from typing import Any

from ..export.common import factor, ms, rows
from ..inert import visible

CHANGE_FACTOR = 2.0
"""A q-error must shrink or grow by at least this factor to count as better or worse (a
rule of thumb: run-to-run noise in actual rows and sampled statistics stays well inside it)."""


@dataclass
class NodeMatch:
    before: int | None
    after: int | None
    operator_before: str | None
    operator_after: str | None
    relation: str | None
    position: str
    matched_by: str                       # "place", "operator", "relation", or "" when unmatched
    before_est: float | None = None
    before_actual: float | None = None
    after_est: float | None = None
    after_actual: float | None = None
    before_q_error: float | None = None
    after_q_error: float | None = None
    before_origin: bool = False
    after_origin: bool = False
    verdict: str = ""                     # better, worse, same, not judged, only before, only after

    @property
    def label(self) -> str:
        operator = self.operator_after or self.operator_before or "?"
        if self.operator_before and self.operator_after and self.operator_before != self.operator_after:
            operator = f"{self.operator_before} → {self.operator_after}"
        return f"{operator} on {self.relation}" if self.relation else operator


@dataclass
class Comparison:
    before_name: str
    after_name: str
    matches: list[NodeMatch]
    shape_changed: bool
    before_ms: float | None
    after_ms: float | None
    before_origins: int
    after_origins: int
    counts: dict[str, int] = field(default_factory=dict)
    before_plan: Any = field(default=None, repr=False, compare=False)
    after_plan: Any = field(default=None, repr=False, compare=False)

    def report(self) -> dict[str, Any]:
        """The comparison as JSON-ready data, words and figures decided here for every view."""
        change = None
        if self.before_ms and self.after_ms is not None:
            change = self.after_ms / self.before_ms
        report = {
            "before": self.before_name, "after": self.after_name,
            "shape_changed": self.shape_changed,
            "shape_words": "the plan's shape changed" if self.shape_changed else "the same plan shape",
            "before_ms": self.before_ms, "after_ms": self.after_ms, "time_ratio": change,
            "time_words": _time_words(self.before_ms, self.after_ms),
            "before_origins": self.before_origins, "after_origins": self.after_origins,
            "counts": dict(self.counts),
            "nodes": [dict(asdict(m), label=m.label, before_q=factor(m.before_q_error),
                           after_q=factor(m.after_q_error),
                           before_rows=f"{rows(m.before_est)} est / {rows(m.before_actual)} act"
                           if m.before is not None else "–",
                           after_rows=f"{rows(m.after_est)} est / {rows(m.after_actual)} act"
                           if m.after is not None else "–")
                      for m in self.matches],
        }
        c = report["counts"]
        report["headline"] = (f"{report['shape_words']}; {report['time_words']}; estimates: "
                              f"{c.get('better', 0)} better, {c.get('worse', 0)} worse, {c.get('same', 0)} "
                              f"unchanged; origins {report['before_origins']} → {report['after_origins']}")
        return report

    def headline(self) -> str:
        return self.report()["headline"]

    def to_text(self) -> str:
        r = self.report()
        lines = [f"compare {visible(r['before'])} → {visible(r['after'])}", self.headline(), ""]
        width = max((len(n["label"]) for n in r["nodes"]), default=10)
        width = min(max(width, 10), 60)
        lines.append(f"{'place':<10} {'operator':<{width}} {'before':>24} {'q':>7}  {'after':>24} {'q':>7}  verdict")
        for n in r["nodes"]:
            lines.append(f"{n['position'][:10]:<10} {visible(n['label'])[:width]:<{width}} "
                         f"{n['before_rows']:>24} {n['before_q']:>7}  {n['after_rows']:>24} {n['after_q']:>7}  "
                         f"{n['verdict']}")
        return "\n".join(lines) + "\n"

    def to_markdown(self, path: str | os.PathLike | None = None) -> str:
        from ..export.markdown import md_text

        r = self.report()
        out = [f"## Plan comparison: {md_text(r['before'])} → {md_text(r['after'])}", "",
               md_text(self.headline()), "",
               "| place | operator | before (est / act) | q-error | after (est / act) | q-error | verdict |",
               "|---|---|---|---|---|---|---|"]
        for n in r["nodes"]:
            out.append("| " + " | ".join(md_text(v) for v in (
                n["position"], n["label"], n["before_rows"], n["before_q"], n["after_rows"], n["after_q"],
                n["verdict"])) + " |")
        text = "\n".join(out) + "\n"
        _write(path, text)
        return text

    def to_html(self, path: str | os.PathLike | None = None) -> str:
        """One offline page: the comparison's table and each plan's own review, the same
        widget module as a single review's page (`planview.export.html`)."""
        from ..export.html import render_comparison_html

        page = render_comparison_html(self)
        _write(path, page)
        return page

    def _repr_html_(self) -> str:
        """The table alone, for a front end without widgets (``%load_ext planview`` shows the
        comparison widget instead)."""
        from ..export.html import comparison_table

        r = self.report()
        return (f"<div class='pv-compare'><p>{html.escape(visible(r['before']))} → "
                f"{html.escape(visible(r['after']))}: {html.escape(visible(r['headline']))}</p>"
                f"{comparison_table(r)}</div>")


def _write(path, text: str) -> None:
    if path is not None:
        with open(path, "w", encoding="utf-8") as handle:
            handle.write(text)


def _time_words(before: float | None, after: float | None) -> str:
    if before is None or after is None:
        return "time not known for both"
    if before <= 0:
        return f"time {ms(before)} → {ms(after)}"
    ratio = after / before
    way = "faster" if ratio < 1 else "slower"
    amount = f"{1 / ratio:.1f}× {way}" if ratio < 1 else f"{ratio:.1f}× {way}"
    return f"time {ms(before)} → {ms(after)} ({amount})"


def _as_plan(value, threshold: float):
    from ..errors import PlanParseError, PlanviewError
    from ..plan import Plan, load

    if isinstance(value, Plan):
        return value, "a plan"
    name = os.fspath(value) if isinstance(value, os.PathLike) or (
        isinstance(value, str) and "\n" not in value and len(value) < 4096) else "a plan"
    try:
        return load(value, threshold=threshold), name
    except PlanParseError as exc:
        raise PlanviewError(f"{name}: {exc}") from None


def _verdict(before_q: float | None, after_q: float | None) -> str:
    if before_q is None or after_q is None:
        return "not judged"
    if before_q >= after_q * CHANGE_FACTOR:
        return "better"
    if after_q >= before_q * CHANGE_FACTOR:
        return "worse"
    return "same"


def compare(before, after, *, threshold: float = 10.0) -> Comparison:
    """Compare two plans of the same query (paths, texts or `Plan` objects)."""
    from .batch import _position_paths, shape_of

    plan_a, name_a = _as_plan(before, threshold)
    plan_b, name_b = _as_plan(after, threshold)
    nodes_a, nodes_b = plan_a.report()["nodes"], plan_b.report()["nodes"]
    paths_a, paths_b = _position_paths(nodes_a), _position_paths(nodes_b)

    def key(node, path, level):
        if level == "place":
            return (path, node["operator"], node.get("relation"))
        if level == "operator":
            return (node["operator"], node.get("relation"))
        return (node.get("relation"),) if node.get("relation") else None

    left = list(range(len(nodes_a)))
    right = list(range(len(nodes_b)))
    pairs: dict[int, tuple[int, str]] = {}
    for level in ("place", "operator", "relation"):
        waiting: dict[tuple, list[int]] = {}
        for j in right:
            k = key(nodes_b[j], paths_b[j], level)
            if k is not None:
                waiting.setdefault(k, []).append(j)
        for k in waiting.values():
            k.reverse()  # pop() then takes them in order of appearance
        taken = set()
        for i in left:
            k = key(nodes_a[i], paths_a[i], level)
            if k is not None and waiting.get(k):
                j = waiting[k].pop()
                pairs[i] = (j, level)
                taken.add(j)
        left = [i for i in left if i not in pairs]
        right = [j for j in right if j not in taken]

    matches: list[NodeMatch] = []
    matched_after = {}
    for i, node in enumerate(nodes_a):
        j, level = pairs.get(i, (None, ""))
        other = nodes_b[j] if j is not None else None
        match = NodeMatch(before=i, after=j, operator_before=node["operator"],
                          operator_after=other["operator"] if other else None,
                          relation=node.get("relation") or (other.get("relation") if other else None),
                          position=paths_a[i], matched_by=level,
                          before_est=node.get("est_total"), before_actual=node.get("actual_total"),
                          before_q_error=node.get("q_error") if node.get("judged") else None,
                          before_origin=bool(node.get("origin")))
        if other is not None:
            matched_after[j] = True
            match.after_est, match.after_actual = other.get("est_total"), other.get("actual_total")
            match.after_q_error = other.get("q_error") if other.get("judged") else None
            match.after_origin = bool(other.get("origin"))
            match.verdict = _verdict(match.before_q_error, match.after_q_error)
        else:
            match.verdict = "only before"
        matches.append(match)
    for j in right:
        other = nodes_b[j]
        matches.append(NodeMatch(before=None, after=j, operator_before=None, operator_after=other["operator"],
                                 relation=other.get("relation"), position=paths_b[j], matched_by="",
                                 after_est=other.get("est_total"), after_actual=other.get("actual_total"),
                                 after_q_error=other.get("q_error") if other.get("judged") else None,
                                 after_origin=bool(other.get("origin")), verdict="only after"))
    counts: dict[str, int] = {}
    for m in matches:
        counts[m.verdict] = counts.get(m.verdict, 0) + 1
    return Comparison(before_name=name_a, after_name=name_b, matches=matches,
                      shape_changed=shape_of(nodes_a) != shape_of(nodes_b),
                      before_ms=_plan_ms(plan_a), after_ms=_plan_ms(plan_b),
                      before_origins=len(plan_a.findings), after_origins=len(plan_b.findings), counts=counts,
                      before_plan=plan_a, after_plan=plan_b)


def _plan_ms(plan) -> float | None:
    times = [s.execution_ms for s in plan.statements if s.execution_ms is not None]
    if times:
        return sum(times)
    roots = [plan.nodes[s.root].actual_total_ms for s in plan.statements]
    known = [t for t in roots if t is not None]
    return sum(known) if known else None
