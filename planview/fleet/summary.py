"""What a DBA acts on after a batch: the statistics work, the plans that moved, the error spread.

`SummaryBuilder` is handed the batch's rows a chunk at a time and keeps only what the summary
needs (one entry per statistics target, per fingerprint the shapes seen, one float per judged
node), so it runs beside `write_batch` without holding the table. `report()` decides every
word and figure; `to_markdown` and `to_html` only lay them out, and the HTML holds the plotly
charts.

Targets: the origins are grouped by table, column group and cause; each group gets its total
time (the time of the entries that hold it, each entry counted once), how many distinct queries
(fingerprints) and entries it is in, and one fix: the fix the single-plan review wrote for it,
which for the same table, columns and cause is one statement however many queries share it.
"""

from __future__ import annotations

import html
import math
import os
from array import array
from dataclasses import dataclass, field
from typing import Any

from ..export.common import factor, ms
from ..inert import visible

PUBLISHED = (
    # (workload, median, 90th, 99th) of PostgreSQL's estimates, as quoted in the issue from Han
    # et al., "Cardinality Estimation in DBMS: A Comprehensive Benchmark Evaluation", PVLDB 15
    # (2022); not recomputed here.
    ("JOB-LIGHT (published, PostgreSQL)", 1.81, 8.09, 51.8),
    ("STATS-CEB (published, PostgreSQL)", 1.44, 11.1, 2000.0),
)
PUBLISHED_NOTE = ("Published figures: Han et al., \"Cardinality Estimation in DBMS: A Comprehensive "
                  "Benchmark Evaluation\", PVLDB 15, 2022, PostgreSQL on JOB-LIGHT and STATS-CEB (the "
                  "STATS-CEB 99th percentile is \"about 2000\"). Theirs are sub-plan queries of two fixed "
                  "benchmarks; ours are every judged operator of this log, so the comparison is a sense "
                  "of scale, not a ranking.")
STATS_CAUTION = ("CREATE STATISTICS takes a SHARE UPDATE EXCLUSIVE lock on the table and builds nothing "
                 "until the next ANALYZE, which reads a sample of the table (I/O) under the same lock. "
                 "New statistics can change other queries' plans. Run it first on a copy; your change "
                 "process decides whether and when it runs in production.")


@dataclass
class _Target:
    table: str
    columns: str
    cause: str
    origins: int = 0
    entries: set = field(default_factory=set)
    queries: set = field(default_factory=set)
    time_ms: float = 0.0
    worst: float = 1.0
    fix: str | None = None
    caution: str | None = None


def percentile(sorted_values, share: float) -> float | None:
    """The `share` quantile by linear interpolation between the closest ranks (numpy's default)."""
    n = len(sorted_values)
    if not n:
        return None
    pos = share * (n - 1)
    low = math.floor(pos)
    high = min(low + 1, n - 1)
    return sorted_values[low] + (sorted_values[high] - sorted_values[low]) * (pos - low)


class SummaryBuilder:
    def __init__(self):
        self.targets: dict[tuple[str, str, str], _Target] = {}
        self.shapes: dict[str, dict[str, list]] = {}   # fingerprint -> shape -> [entries, first id, text]
        self.q_errors = array("d")
        self.entries = 0
        self.total_ms = 0.0
        self._query: dict[str, Any] = {}

    def add(self, rows) -> None:
        for row in rows:
            if row["row"] == "query":
                self._query = row
                self.entries += 1
                self.total_ms += _time_of(row) or 0.0
                fp = row.get("fingerprint")
                if fp:
                    seen = self.shapes.setdefault(fp, {})
                    slot = seen.get(row["shape"])
                    if slot is None:
                        seen[row["shape"]] = [1, row["query_id"], (row.get("query_text") or "")[:300]]
                    else:
                        slot[0] += 1
                continue
            if row.get("judged") and row.get("q_error") is not None:
                self.q_errors.append(float(row["q_error"]))
            if not row.get("origin"):
                continue
            table = row.get("table") or ".".join(x for x in (row.get("schema"), row.get("relation")) if x) \
                or "(no table)"
            key = (table, row.get("columns") or "", row.get("cause") or "unknown")
            target = self.targets.get(key)
            if target is None:
                target = self.targets[key] = _Target(*key)
            target.origins += 1
            qid = row["query_id"]
            if qid not in target.entries:
                target.entries.add(qid)
                target.time_ms += _time_of(self._query) or 0.0
            target.queries.add(row.get("fingerprint") or qid)
            q = row.get("own_q_error") or row.get("q_error") or 1.0
            target.worst = max(target.worst, q)
            if target.fix is None and row.get("fix"):
                target.fix, target.caution = row["fix"], row.get("caution")

    def add_frame(self, frame) -> None:
        import pandas as pd

        records = frame.astype(object).where(pd.notna(frame), None).to_dict("records")
        self.add(records)

    def report(self) -> dict[str, Any]:
        targets = sorted(self.targets.values(), key=lambda t: (-t.time_ms, -t.origins, t.table))
        values = sorted(self.q_errors)
        ours = (percentile(values, 0.5), percentile(values, 0.9), percentile(values, 0.99))
        moved = []
        for fp, shapes in self.shapes.items():
            if len(shapes) > 1:
                moved.append({"fingerprint": fp, "shapes": len(shapes),
                              "entries": sum(s[0] for s in shapes.values()),
                              "examples": [s[1] for s in shapes.values()],
                              "query": next(iter(shapes.values()))[2]})
        moved.sort(key=lambda m: -m["entries"])
        stats_fix = any((t.fix or "").lstrip().upper().startswith("CREATE STATISTICS") for t in targets)
        return {
            "entries": self.entries, "total_ms": self.total_ms, "judged_nodes": len(values),
            "targets": [{
                "table": t.table, "columns": t.columns, "cause": t.cause, "origins": t.origins,
                "entries": len(t.entries), "queries": len(t.queries), "time_ms": t.time_ms,
                "time": ms(t.time_ms), "worst": t.worst, "worst_words": factor(t.worst),
                "fix": t.fix, "caution": t.caution,
            } for t in targets],
            "shape_changes": moved,
            "q_error": {"median": ours[0], "p90": ours[1], "p99": ours[2]},
            "published": [{"workload": w, "median": a, "p90": b, "p99": c} for w, a, b, c in PUBLISHED],
            "published_note": PUBLISHED_NOTE,
            "statistics_caution": STATS_CAUTION if stats_fix else None,
        }

    # -- views ----------------------------------------------------------------------------
    def to_markdown(self, path: str | os.PathLike | None = None) -> str:
        from ..export.markdown import md_code, md_fence, md_text

        r = self.report()
        q = r["q_error"]
        out = ["## Batch summary", "",
               md_text(f"{r['entries']:,} plans, {ms(r['total_ms'])} in all, {r['judged_nodes']:,} judged operators."),
               "", "### Statistics work, by the time above it", ""]
        if r["statistics_caution"]:
            out += [f"> **Caution.** {md_text(r['statistics_caution'])}", ""]
        out += ["| table | columns | cause | origins | queries | entries | time | worst |",
                "|---|---|---|---|---|---|---|---|"]
        for t in r["targets"]:
            out.append("| " + " | ".join([md_code(t["table"], in_table=True), md_code(t["columns"] or "–", in_table=True),
                                          md_text(t["cause"]), str(t["origins"]), str(t["queries"]),
                                          str(t["entries"]), md_text(t["time"]), md_text(t["worst_words"])]) + " |")
        for t in r["targets"]:
            if t["fix"]:
                out += ["", f"**{md_text(t['table'])} {md_text(t['columns'])}** ({md_text(t['cause'])}, "
                            f"{t['queries']} queries):", "", md_fence(t["fix"], "sql")]
                if t["caution"]:
                    out += ["", f"> {md_text(t['caution'])}"]
        out += ["", "### Plans that changed shape for the same query", ""]
        if not r["shape_changes"]:
            out.append("None in this batch.")
        else:
            out += ["| fingerprint | shapes | entries | examples | query |", "|---|---|---|---|---|"]
            for m in r["shape_changes"]:
                out.append(f"| {md_code(m['fingerprint'], in_table=True)} | {m['shapes']} | {m['entries']} | "
                           f"{md_text(', '.join(m['examples'][:3]))} | {md_code(m['query'][:120], in_table=True)} |")
        out += ["", "### q-error of judged operators", "", "| | median | 90th | 99th |", "|---|---|---|---|",
                f"| this batch | {_num(q['median'])} | {_num(q['p90'])} | {_num(q['p99'])} |"]
        for p in r["published"]:
            out.append(f"| {md_text(p['workload'])} | {_num(p['median'])} | {_num(p['p90'])} | {_num(p['p99'])} |")
        out += ["", md_text(r["published_note"]), ""]
        text = "\n".join(out)
        _write(path, text)
        return text

    def figures(self) -> list:
        import plotly.graph_objects as go

        r = self.report()
        figs = []
        top = r["targets"][:20]
        labels = [_safe(f"{t['table']} ({t['columns']})" if t["columns"] else t["table"]) for t in top]
        by_cause: dict[str, list] = {}
        for label, t in zip(labels, top):
            by_cause.setdefault(t["cause"], []).append((label, t["time_ms"], t["queries"]))
        fig = go.Figure()
        for cause, items in by_cause.items():
            fig.add_trace(go.Bar(y=[i[0] for i in items], x=[i[1] for i in items], orientation="h",
                                 name=_safe(cause), customdata=[i[2] for i in items],
                                 hovertemplate="%{y}<br>%{x:.1f} ms in %{customdata} queries<extra></extra>"))
        fig.update_layout(title="Tables and column groups behind the origins (time of the plans above them)",
                          barmode="stack", xaxis_title="ms", yaxis={"autorange": "reversed"},
                          height=max(300, 40 + 28 * len(top)), margin={"l": 260})
        figs.append(fig)
        q = r["q_error"]
        fig = go.Figure()
        names = ["median", "90th", "99th"]
        fig.add_trace(go.Bar(x=names, y=[q["median"], q["p90"], q["p99"]], name="this batch"))
        for p in r["published"]:
            fig.add_trace(go.Bar(x=names, y=[p["median"], p["p90"], p["p99"]], name=p["workload"]))
        fig.update_layout(title="q-error percentiles of judged operators", yaxis_type="log",
                          yaxis_title="q-error (log scale)", barmode="group")
        figs.append(fig)
        if self.q_errors:
            fig = go.Figure(go.Histogram(x=[math.log10(max(v, 1.0)) for v in self.q_errors], nbinsx=40))
            fig.update_layout(title="q-error spread (log10) of judged operators", xaxis_title="log10 q-error",
                              yaxis_title="operators")
            figs.append(fig)
        return figs

    def to_html(self, path: str | os.PathLike | None = None) -> str:
        e = html.escape
        r = self.report()
        charts = "".join(f.to_html(full_html=False, include_plotlyjs=(i == 0))
                         for i, f in enumerate(self.figures()))
        rows = "".join(
            f"<tr><td>{e(visible(t['table']))}</td><td>{e(visible(t['columns'] or '–'))}</td><td>{e(t['cause'])}</td>"
            f"<td>{t['origins']}</td><td>{t['queries']}</td><td>{t['entries']}</td><td>{e(t['time'])}</td>"
            f"<td>{e(t['worst_words'])}</td><td><pre>{e(visible(t['fix'] or '', keep=chr(10)))}</pre>"
            f"{'<p class=caution>' + e(t['caution']) + '</p>' if t['caution'] else ''}</td></tr>"
            for t in r["targets"])
        moved = "".join(
            f"<tr><td><code>{e(m['fingerprint'])}</code></td><td>{m['shapes']}</td><td>{m['entries']}</td>"
            f"<td>{e(visible(', '.join(m['examples'][:3])))}</td><td><code>{e(visible(m['query'][:200]))}</code></td></tr>"
            for m in r["shape_changes"]) or "<tr><td colspan=5>None in this batch.</td></tr>"
        q = r["q_error"]
        pct = f"<tr><td>this batch</td><td>{_num(q['median'])}</td><td>{_num(q['p90'])}</td><td>{_num(q['p99'])}</td></tr>" + "".join(
            f"<tr><td>{e(p['workload'])}</td><td>{_num(p['median'])}</td><td>{_num(p['p90'])}</td><td>{_num(p['p99'])}</td></tr>"
            for p in r["published"])
        caution = f"<p class=caution><b>Caution.</b> {e(r['statistics_caution'])}</p>" if r["statistics_caution"] else ""
        page = ("<!doctype html><html><head><meta charset='utf-8'><title>planview batch summary</title><style>"
                "body{font:14px system-ui,sans-serif;margin:1.5em;max-width:1200px}table{border-collapse:collapse}"
                "td,th{border-bottom:1px solid #ddd;padding:3px 8px;text-align:left;vertical-align:top}"
                "pre{margin:0;white-space:pre-wrap}.caution{color:#8a4b00;font-size:12px}</style></head><body>"
                f"<h2>Batch summary</h2><p>{r['entries']:,} plans, {e(ms(r['total_ms']))} in all, "
                f"{r['judged_nodes']:,} judged operators.</p>"
                f"<h3>Statistics work, by the time above it</h3>{caution}<table><thead><tr><th>table</th><th>columns</th>"
                "<th>cause</th><th>origins</th><th>queries</th><th>entries</th><th>time</th><th>worst</th><th>fix</th>"
                f"</tr></thead><tbody>{rows}</tbody></table>"
                "<h3>Plans that changed shape for the same query</h3><table><thead><tr><th>fingerprint</th>"
                "<th>shapes</th><th>entries</th><th>examples</th><th>query</th></tr></thead>"
                f"<tbody>{moved}</tbody></table><h3>q-error of judged operators</h3><table><thead><tr><th></th>"
                f"<th>median</th><th>90th</th><th>99th</th></tr></thead><tbody>{pct}</tbody></table>"
                f"<p class=caution>{e(r['published_note'])}</p>{charts}</body></html>")
        _write(path, page)
        return page

    def write(self, path) -> None:
        if os.fspath(path).lower().endswith((".md", ".markdown")):
            self.to_markdown(path)
        else:
            self.to_html(path)

    def _repr_html_(self) -> str:
        return self.to_html()


def summary(source) -> SummaryBuilder:
    """The summary of a batch: a DataFrame from `planview.batch`, or a path to review first."""
    builder = SummaryBuilder()
    if hasattr(source, "columns"):
        builder.add_frame(source)
    else:
        from .batch import run_batch

        for chunk in run_batch(source, progress=False):
            builder.add(chunk.rows())
    return builder


def _time_of(query_row) -> float | None:
    if not query_row:
        return None
    value = query_row.get("duration_ms")
    return value if value is not None else query_row.get("execution_ms")


def _num(value) -> str:
    if value is None:
        return "–"
    return f"{value:,.0f}" if value >= 100 else f"{value:.2f}"


def _safe(text: str) -> str:
    """A name from a plan, for plotly's hover and axis markup: escaped, controls made visible."""
    return html.escape(visible(str(text)))


def _write(path, text: str) -> None:
    if path is not None:
        with open(path, "w", encoding="utf-8") as handle:
            handle.write(text)
