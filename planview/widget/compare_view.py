"""The comparison of two plans in the notebook: the comparison's table (one anywidget whose
state is `planview.fleet.compare.Comparison.report()`, a filter by verdict and the selected row)
over each plan's own review (`PlanWidget`, the single review's widget). Picking a row selects
its two matched nodes in the reviews, and selecting a node in a review picks its row. The front
end lays out what the report decided; it derives no figure."""

from __future__ import annotations

import anywidget
import ipywidgets
import traitlets

_ESM = r"""
function render({ model, el }) {
  const draw = () => {
    const r = model.get("report") || {};
    const only = model.get("verdict");
    el.replaceChildren();
    const head = document.createElement("p");
    head.textContent = `${r.before} → ${r.after}: ${r.shape_words}; ${r.time_words}`;
    el.appendChild(head);
    const pick = document.createElement("select");
    for (const v of ["all", "better", "worse", "same", "not judged", "only before", "only after"]) {
      const o = document.createElement("option");
      o.value = v; o.textContent = v; o.selected = (v === (only || "all"));
      pick.appendChild(o);
    }
    pick.onchange = () => { model.set("verdict", pick.value === "all" ? "" : pick.value); model.save_changes(); };
    el.appendChild(pick);
    const table = document.createElement("table");
    const row = (cells, tag) => {
      const tr = document.createElement("tr");
      for (const c of cells) { const td = document.createElement(tag); td.textContent = c; tr.appendChild(td); }
      return tr;
    };
    table.appendChild(row(["place", "operator", "before (est / act)", "q-error", "after (est / act)", "q-error", "verdict"], "th"));
    const picked = model.get("selected");
    (r.nodes || []).forEach((n, i) => {
      if (only && n.verdict !== only) return;
      const tr = row([n.position, n.label, n.before_rows, n.before_q, n.after_rows, n.after_q, n.verdict], "td");
      tr.className = "pv-cmp-" + n.verdict.replace(/ /g, "-") + (i === picked ? " pv-cmp-picked" : "");
      tr.tabIndex = 0;
      const pick = () => { model.set("selected", i); model.save_changes(); };
      tr.onclick = pick;
      tr.onkeydown = (event) => { if (event.key === "Enter") pick(); };
      table.appendChild(tr);
    });
    el.appendChild(table);
  };
  model.on("change:report", draw);
  model.on("change:verdict", draw);
  model.on("change:selected", draw);
  draw();
  return () => {
    model.off("change:report", draw); model.off("change:verdict", draw); model.off("change:selected", draw);
  };
}
export default { render };
"""

_CSS = """
.pv-cmp-better td:last-child { color: #1a7f37; }
.pv-cmp-worse td:last-child { color: #b42318; font-weight: 600; }
.pv-cmp-picked { background: #eef3fb; }
"""


class ComparisonView(anywidget.AnyWidget):
    """``ComparisonView(planview.compare(a, b))``; ``w.verdict`` filters the rows ("" for all)."""

    _esm = _ESM
    _css = _CSS
    report = traitlets.Dict().tag(sync=True)
    verdict = traitlets.Unicode("").tag(sync=True)
    selected = traitlets.Int(None, allow_none=True).tag(sync=True)
    """The picked row: an index into ``report["nodes"]``, or None."""

    def __init__(self, comparison, **kwargs):
        super().__init__(report=comparison.report(), **kwargs)


class ComparisonWidget(ipywidgets.VBox):
    """``ComparisonWidget(planview.compare(a, b))``: the table, then the two reviews. ``w.selected``
    is the picked row (an index into the report's nodes); it moves the reviews' selections."""

    selected = traitlets.Int(None, allow_none=True)

    def __init__(self, comparison, *, charts: bool = False, **kwargs):
        from . import PlanWidget

        self.comparison = comparison
        self.table = ComparisonView(comparison)
        nodes = self.table.report["nodes"]
        self._row_of = {side: {n[side]: i for i, n in enumerate(nodes) if n[side] is not None}
                        for side in ("before", "after")}
        self.reviews = {side: PlanWidget(plan, charts=charts)
                        for side, plan in (("before", comparison.before_plan), ("after", comparison.after_plan))}
        heads = {side: ipywidgets.Label(f"{side}: {self.table.report[side]}") for side in self.reviews}
        super().__init__(children=[self.table, heads["before"], self.reviews["before"], heads["after"],
                                   self.reviews["after"]], **kwargs)
        self.add_class("planview-comparison")
        self._moving = False
        traitlets.link((self.table, "selected"), (self, "selected"))
        self.observe(self._row_picked, "selected")
        for side, review in self.reviews.items():
            review.observe(lambda change, side=side: self._node_picked(side, change["new"]), "selected")

    def _row_picked(self, change) -> None:
        if self._moving or change["new"] is None:
            return
        match = self.table.report["nodes"][change["new"]]
        self._moving = True
        try:
            for side, review in self.reviews.items():
                review.selected = match[side]
        finally:
            self._moving = False

    def _node_picked(self, side: str, node_id) -> None:
        if self._moving or node_id is None:
            return
        row = self._row_of[side].get(node_id)
        if row is not None:
            self.selected = row
