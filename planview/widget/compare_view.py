"""The comparison of two plans in the notebook: one anywidget whose state is the comparison's
report (`planview.fleet.compare.Comparison.report()`), and a filter by verdict. The front end
lays out what the report decided; it derives no figure."""

from __future__ import annotations

import anywidget
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
    for (const n of r.nodes || []) {
      if (only && n.verdict !== only) continue;
      const tr = row([n.position, n.label, n.before_rows, n.before_q, n.after_rows, n.after_q, n.verdict], "td");
      tr.className = "pv-cmp-" + n.verdict.replace(/ /g, "-");
      table.appendChild(tr);
    }
    el.appendChild(table);
  };
  model.on("change:report", draw);
  model.on("change:verdict", draw);
  draw();
  return () => { model.off("change:report", draw); model.off("change:verdict", draw); };
}
export default { render };
"""

_CSS = """
.pv-cmp-better td:last-child { color: #1a7f37; }
.pv-cmp-worse td:last-child { color: #b42318; font-weight: 600; }
"""


class ComparisonView(anywidget.AnyWidget):
    """``ComparisonView(planview.compare(a, b))``; ``w.verdict`` filters the rows ("" for all)."""

    _esm = _ESM
    _css = _CSS
    report = traitlets.Dict().tag(sync=True)
    verdict = traitlets.Unicode("").tag(sync=True)

    def __init__(self, comparison, **kwargs):
        super().__init__(report=comparison.report(), **kwargs)
