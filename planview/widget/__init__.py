"""The notebook review: the operator tree, its origins and its detail, and the charts (one
anywidget ES module, the same one the exported page runs, so both show the same charts).

State is two synced traits on `PlanTree`: `report` (the plan's report as JSON, its nodes
packed as columns and rows, which makes a 5,000-operator plan a quarter of the size on the
wire) and `selected` (a node id or None). `PlanWidget` holds the tree and mirrors
`selected`, so ``w.selected`` reads and moves the selection from Python.
"""

from __future__ import annotations

import datetime as _dt
import os
from pathlib import Path
from typing import Any

import anywidget
import ipywidgets
import traitlets

from ..errors import PlanviewError
from ..export.html import compact_report

_HERE = Path(__file__).parent


class PlanTree(anywidget.AnyWidget):
    """The tree, the controls and the detail panel: the ES module in ``review.js``."""

    _esm = _HERE / "review.js"
    _css = _HERE / "review.css"
    report = traitlets.Dict().tag(sync=True)
    selected = traitlets.Int(None, allow_none=True).tag(sync=True)
    chart_mode = traitlets.Unicode("none").tag(sync=True)
    """``svg``: the ES module draws its charts under the tree (as in the exported page)."""
    can_save = traitlets.Bool(True).tag(sync=True)
    can_prove = traitlets.Bool(False).tag(sync=True)
    """A live session reviewed the plan: each fix gets a button that tries it, rolled back."""


class PlanWidget(ipywidgets.VBox):
    """The review of one plan: ``PlanWidget(plan)``; ``w.selected`` is the selected node id,
    the rank-1 origin when the review opens (None for a plan with no origin)."""

    selected = traitlets.Int(None, allow_none=True)

    def __init__(self, plan, *, charts: bool = True, save_dir: str | os.PathLike | None = None, **kwargs):
        self.plan = plan
        self.save_dir = Path(save_dir) if save_dir is not None else None
        report = plan.report()
        self._node_ids = {n["id"] for n in report["nodes"]}
        top = min(report["findings"], key=lambda f: f["rank"])["node"] if report["findings"] else None
        self.tree = PlanTree(report=compact_report(report), selected=top,
                             chart_mode="svg" if charts and report["nodes"] else "none",
                             can_prove=getattr(plan, "live_session", None) is not None)
        super().__init__(children=[self.tree], **kwargs)
        self.add_class("planview-review")
        traitlets.link((self.tree, "selected"), (self, "selected"))
        self.tree.on_msg(self._on_front_message)

    @traitlets.validate("selected")
    def _check_selected(self, proposal):
        value = proposal["value"]
        if value is not None and value not in self._node_ids:
            raise traitlets.TraitError(f"no node {value!r} in this plan (ids 0..{len(self._node_ids) - 1})")
        return value

    @property
    def report(self) -> dict[str, Any]:
        """The plan's report, as `Plan.report()` gives it."""
        return self.plan.report()

    @property
    def selected_node(self) -> dict[str, Any] | None:
        """The report's record of the selected node."""
        if self.selected is None:
            return None
        return self.report["nodes"][self.selected]

    def next_origin(self, step: int = 1) -> int | None:
        """Select the next origin in impact order (``step=-1``: the previous one)."""
        order = [f["node"] for f in sorted(self.report["findings"], key=lambda f: f["rank"])]
        if not order:
            return None
        if self.selected in order:
            self.selected = order[(order.index(self.selected) + step) % len(order)]
        else:
            self.selected = order[0 if step > 0 else -1]
        return self.selected

    def save(self, folder: str | os.PathLike | None = None, stem: str | None = None) -> tuple[Path, Path]:
        """Write the review page and the ticket text; return their paths."""
        target = Path(folder) if folder is not None else (self.save_dir or Path.cwd())
        target.mkdir(parents=True, exist_ok=True)
        if stem is None:
            stem = "planview-review-" + _dt.datetime.now().strftime("%Y%m%d-%H%M%S")
            base, n = stem, 2
            while (target / f"{stem}.html").exists() or (target / f"{stem}.md").exists():
                stem, n = f"{base}-{n}", n + 1
        page, ticket = target / f"{stem}.html", target / f"{stem}.md"
        self.plan.to_html(page)
        self.plan.to_markdown(ticket)
        return page, ticket

    def _on_front_message(self, _widget, content, _buffers):
        if not isinstance(content, dict):
            return
        if content.get("kind") == "prove":
            self._prove(content.get("node"))
            return
        if content.get("kind") != "save":
            return
        try:
            paths = self.save()
        except (OSError, PlanviewError) as exc:
            self.tree.send({"kind": "save-failed", "message": str(exc)})
            return
        self.tree.send({"kind": "saved", "paths": [p.name for p in paths]})

    def prove(self, node: int) -> dict[str, Any]:
        """Try the fix of the origin at `node` through the live session that reviewed the plan
        (in a transaction that is rolled back, planview.live.Session.prove), and show the proof."""
        session = getattr(self.plan, "live_session", None)
        if session is None:
            raise PlanviewError("no live session reviewed this plan: review it with planview.connect(...).review(sql)")
        finding = next((f for f in self.plan.findings if f.node == node), None)
        if finding is None:
            raise PlanviewError(f"node #{node} is not an origin of this plan")
        proof = session.prove(finding, self.plan)
        self.tree.report = compact_report(self.plan.report())
        return proof

    def _prove(self, node) -> None:
        if not isinstance(node, int) or isinstance(node, bool):
            self.tree.send({"kind": "prove-failed", "node": None, "message": "no node given"})
            return
        try:
            self.prove(node)
        except PlanviewError as exc:
            self.tree.send({"kind": "prove-failed", "node": node, "message": str(exc)})
            return
        self.tree.send({"kind": "proved", "node": node})

    def __repr__(self) -> str:
        return f"<PlanWidget {self.plan!r}, selected={self.selected!r}>"

    def _repr_mimebundle_(self, **kwargs):
        bundle = super()._repr_mimebundle_(**kwargs)
        if isinstance(bundle, tuple):
            bundle = bundle[0]
        bundle = dict(bundle or {})
        bundle["text/plain"] = repr(self.plan)
        bundle["text/html"] = self.plan._repr_html_()
        return bundle


class ReviewError:
    """What `review` returns for input it cannot read: shows the one-line message, no traceback."""

    def __init__(self, error: PlanviewError):
        self.error = error
        self.message = str(error)

    def __bool__(self) -> bool:
        return False

    def __repr__(self) -> str:
        return f"planview: {self.message}"

    def _repr_html_(self) -> str:
        import html

        from ..inert import visible

        return f'<pre class="planview-error">planview: {html.escape(visible(self.message))}</pre>'


def review(source, *, engine: str | None = None, fmt: str | None = None, threshold: float = 10.0,
           charts: bool = True, errors: str = "show", query: str | None = None):
    """The review of a plan given as text, a path or a `Plan`; ``query`` is the statement's
    SQL, shown beside the plan and in the ticket (it replaces the paste's own Query Text).

    Unreadable input gives a `ReviewError` that shows its one-line message (``errors="raise"``
    raises `planview.PlanParseError` instead).
    """
    from ..plan import Plan, load

    try:
        plan = source if isinstance(source, Plan) else load(source, engine=engine, fmt=fmt, threshold=threshold)
    except PlanviewError as exc:
        if errors == "raise":
            raise
        return ReviewError(exc)
    if query is not None:
        plan.set_query_text(str(query))
    return PlanWidget(plan, charts=charts)


__all__ = ["PlanTree", "PlanWidget", "ReviewError", "review"]
