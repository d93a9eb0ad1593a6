"""The review's two charts as a plotly figure, for building on in a notebook: estimated
against actual rows on log-log axes with the tenfold band, and the signed error by tree depth.
A click on a point calls ``pick`` with its node id. The review itself (widget and exported
page) draws the same two charts as SVG in review.js, so both surfaces show one chart set."""

from __future__ import annotations

import html
from typing import Any, Callable

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from ..export.common import SCALE_LIMIT, VIK, rows
from ..inert import visible

COLOURSCALE = [[i / (len(VIK) - 1), c] for i, c in enumerate(VIK)]


class PlanCharts:
    def __init__(self, report: dict[str, Any], pick: Callable[[int], None]):
        self.report = report
        self.pick = pick
        self.points = [n for n in report["nodes"] if n["judged"] and n["est_total"] is not None
                       and n["actual_total"] is not None]
        self.by_id = {n["id"]: n for n in self.points}
        self.figure = self._build()

    def _build(self) -> go.FigureWidget:
        fig = make_subplots(rows=1, cols=2, horizontal_spacing=0.12, subplot_titles=(
            "estimated vs actual rows (in all)", "error by depth in the tree"))
        pts = self.points
        top = max([10.0] + [max(n["est_total"], n["actual_total"], 1.0) for n in pts]) * 2
        edge = [1.0, top]
        fig.add_trace(go.Scatter(x=edge, y=[10.0, top * 10], mode="lines", line={"width": 0},
                                 hoverinfo="skip", showlegend=False), 1, 1)
        fig.add_trace(go.Scatter(x=edge, y=[0.1, top / 10], mode="lines", line={"width": 0},
                                 fill="tonexty", fillcolor="rgba(120,120,120,0.15)", hoverinfo="skip",
                                 name="within tenfold", showlegend=False), 1, 1)
        fig.add_trace(go.Scatter(x=edge, y=edge, mode="lines", hoverinfo="skip", showlegend=False,
                                 line={"dash": "dash", "color": "#777", "width": 1}), 1, 1)
        # numpy arrays: plotly checks them as a whole, not element by element (a 5,000-node
        # plan builds in a fraction of a second instead of seconds)
        origin = np.array([bool(n["origin"]) for n in pts], dtype=bool)
        ratio = np.array([n["log10_ratio"] for n in pts], dtype=float)
        marker = {
            "color": ratio, "colorscale": COLOURSCALE, "cmin": -SCALE_LIMIT, "cmax": SCALE_LIMIT,
            "size": np.where(origin, 11, 7), "symbol": np.where(origin, "diamond", "circle"),
            "line": {"width": np.where(origin, 1.6, 0.5), "color": "#222"},
        }
        # hover labels are plotly's own markup: the plan's strings go in escaped, with control
        # and direction characters shown as escapes
        custom = np.empty((len(pts), 4), dtype=object)
        for i, n in enumerate(pts):
            custom[i] = (n["id"], html.escape(visible(n["label"] or n["operator"] or ""), quote=False),
                         rows(n["est_total"]), rows(n["actual_total"]))
        template = "#%{customdata[0]} %{customdata[1]}<br>estimated %{customdata[2]}, actual %{customdata[3]}<extra></extra>"
        fig.add_trace(go.Scatter(
            x=np.maximum([n["est_total"] for n in pts], 1.0), y=np.maximum([n["actual_total"] for n in pts], 1.0),
            mode="markers", customdata=custom, hovertemplate=template, showlegend=False,
            marker={**marker, "colorbar": {"title": {"text": "log₁₀ actual/est"}, "len": 0.9,
                                           "tickvals": [-4, -2, -1, 0, 1, 2, 4],
                                           "ticktext": ["×10⁴ high", "×100 high", "×10 high", "1",
                                                        "×10 low", "×100 low", "×10⁴ low"]}},
            name="operators"), 1, 1)
        fig.add_trace(go.Scatter(
            x=np.array([n["depth"] for n in pts], dtype=int), y=ratio, mode="markers",
            customdata=custom, hovertemplate=template, showlegend=False, marker=marker,
            name="operators by depth"), 1, 2)
        for col in (1, 2):
            fig.add_trace(go.Scatter(x=[], y=[], mode="markers", hoverinfo="skip", showlegend=False,
                                     marker={"size": 18, "color": "rgba(0,0,0,0)",
                                             "line": {"width": 2.5, "color": "#3b6fb6"}},
                                     name="selected"), 1, col)
        fig.add_hrect(y0=-1, y1=1, fillcolor="rgba(120,120,120,0.15)", line_width=0, row=1, col=2)
        fig.add_hline(y=0, line_dash="dash", line_color="#777", line_width=1, row=1, col=2)
        fig.update_xaxes(type="log", title_text="estimated", range=[0, _log10(top)], row=1, col=1)
        fig.update_yaxes(type="log", title_text="actual", range=[0, _log10(top)], row=1, col=1)
        fig.update_xaxes(title_text="depth (0 = top)", row=1, col=2)
        fig.update_yaxes(title_text="log₁₀(actual / estimated)", row=1, col=2)
        fig.update_layout(height=340, margin={"l": 50, "r": 20, "t": 40, "b": 40},
                          template="plotly_white", clickmode="event", dragmode="zoom")
        widget = go.FigureWidget(fig)
        widget.data[3].on_click(self._clicked)
        widget.data[4].on_click(self._clicked)
        return widget

    def _clicked(self, trace, points, _state) -> None:
        if points.point_inds:
            self.pick(int(trace.customdata[points.point_inds[0]][0]))

    def highlight(self, node_id: int | None) -> None:
        node = self.by_id.get(node_id) if node_id is not None else None
        with self.figure.batch_update():
            ring_a, ring_b = self.figure.data[5], self.figure.data[6]
            if node is None:
                ring_a.x, ring_a.y, ring_b.x, ring_b.y = [], [], [], []
            else:
                ring_a.x, ring_a.y = [max(node["est_total"], 1.0)], [max(node["actual_total"], 1.0)]
                ring_b.x, ring_b.y = [node["depth"]], [node["log10_ratio"]]


def _log10(value: float) -> float:
    import math

    return math.log10(value)


