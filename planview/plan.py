"""`Plan`: a parsed, checked and diagnosed plan, and `load`, the one way to get one."""

from __future__ import annotations

import gc
import json
import os
from contextlib import contextmanager
from typing import Any

from . import engines
from .check import CheckOptions, check
from .errors import PlanParseError
from .index import PlanIndex, index_of
from .model import Finding, ParsedPlan, PlanNode, Statement
from .source import check_format_size, read_text, without_lone_surrogates
from .timing import PlanTimes, time_plan

READER_ERROR = "could not read this plan: the reader failed on it"


class Plan:
    """A plan with every node checked and every origin diagnosed.

    Every view (the terminal table, the JSON report, the DataFrame, the widget, the HTML and
    Markdown exports) is made from `report()`, so none of them re-derives a number.
    """

    def __init__(self, parsed: ParsedPlan, engine_module, options: CheckOptions, source: str = ""):
        self.engine = parsed.engine
        self.format = parsed.format
        self.engine_version = parsed.engine_version
        self.has_actuals = parsed.has_actuals
        self.notes = list(parsed.notes)
        self.nodes: list[PlanNode] = parsed.nodes
        self.statements: list[Statement] = parsed.statements
        self.options = options
        self.source = source
        self.live_session = None
        """The live Session that reviewed this plan (planview/live), if any: prove() goes through it."""
        self.engine_spec = engines.engine_of(engine_module)
        """The engine's tables, defaults, dialect and fixes, which the diagnosis is handed."""
        self.findings: list[Finding] = check(parsed, engine_module, options)
        self.index: PlanIndex = index_of(parsed)
        self.times: PlanTimes = time_plan(parsed, self.engine_spec)
        """Time per operator, with its inputs and its own (`planview.timing`)."""
        from .diagnose import diagnose

        diagnose(self)
        self._report: dict[str, Any] | None = None
        self.live: dict[str, Any] | None = None
        """Set by a live session's review: the statement and parameters it ran, to plan again."""

    # -- views ------------------------------------------------------------------------
    @property
    def origins(self) -> list[PlanNode]:
        return [self.nodes[f.node] for f in self.findings]

    @property
    def sql_dialect(self) -> str | None:
        return self.engine_spec.dialect

    def set_query_text(self, text: str, statement: int = 0) -> None:
        """The statement's SQL, given by the user (``--query``, ``review(..., query=...)``):
        shown beside the plan and in the ticket. It replaces what the paste held."""
        if not self.statements:
            return
        self.statements[min(statement, len(self.statements) - 1)].query_text = str(text).strip() or None
        self._report = None

    def report(self) -> dict[str, Any]:
        """The JSON report (stable keys; later versions add keys, never remove them)."""
        if self._report is None:
            from .report import build_report

            self._report = build_report(self)
        return self._report

    def to_json(self, indent: int | None = 2) -> str:
        return json.dumps(self.report(), indent=indent, ensure_ascii=False, allow_nan=False)

    def to_frame(self):
        """A pandas DataFrame, one row a node, with every number of the check."""
        import pandas as pd

        rows = []
        for node in self.report()["nodes"]:
            row = {k: v for k, v in node.items() if not isinstance(v, (list, dict))}
            row["conditions"] = "; ".join(f"{c['kind']}: {c['text']}" for c in node["conditions"])
            row["inherits_from"] = ",".join(str(i) for i in node["inherits_from"])
            rows.append(row)
        frame = pd.DataFrame(rows)
        return frame.set_index("id") if not frame.empty else frame

    def to_text(self, width: int | None = None, color: bool = False) -> str:
        from .textreport import render

        return render(self, width=width, color=color)

    def to_markdown(self, path: str | os.PathLike | None = None) -> str:
        from .export.markdown import render_markdown

        text = render_markdown(self)
        if path is not None:
            with open(path, "w", encoding="utf-8") as handle:
                handle.write(text)
        return text

    def to_html(self, path: str | os.PathLike | None = None) -> str:
        from .export.html import render_html

        page = render_html(self)
        if path is not None:
            with open(path, "w", encoding="utf-8") as handle:
                handle.write(page)
        return page

    def worst_q_error(self) -> float:
        return max((f.own_q_error for f in self.findings), default=1.0)

    def __repr__(self) -> str:
        return (f"<Plan {self.engine} {self.format}: {len(self.nodes)} nodes, "
                f"{len(self.findings)} origin(s)>")

    def _repr_html_(self) -> str:
        from .export.html import render_static_tree

        return render_static_tree(self)


def load(source: str | bytes | os.PathLike, *, engine: str | None = None, fmt: str | None = None,
         threshold: float = 10.0) -> Plan:
    """Read a plan (text, bytes or a path), detect its engine and format, check it.

    Raises `PlanParseError`, naming the line or key at fault, for anything unreadable.
    """
    if not (isinstance(threshold, (int, float)) and threshold > 1):
        raise PlanParseError(f"threshold must be a q-error above 1, got {threshold!r}")
    text, replaced = without_lone_surrogates(read_text(source))
    module, found_fmt = engines.detect(text, engine=engine, fmt=fmt)
    check_format_size(text, found_fmt)
    if found_fmt in ("json", "yaml"):
        text, escaped = without_lone_surrogates(text, escapes=True)
        replaced += escaped
    with _collector_paused():
        return _parse_and_check(module, text, found_fmt, threshold, replaced)


@contextmanager
def _collector_paused():
    """A plan is many small objects that form no reference cycles, and Python's cyclic
    collector would walk all of them again each time enough had been made: about a third of
    the load time of a 10,000-operator plan, and more than linear. Reference counting still
    frees what the reader drops."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def _parse_and_check(module, text: str, found_fmt: str, threshold: float, replaced: int) -> Plan:
    try:
        parsed = module.parse(text, found_fmt)
    except PlanParseError:
        raise
    except RecursionError:
        raise PlanParseError("plan nested too deeply to read; refused", engine=module.NAME,
                             fmt=found_fmt) from None
    except (ValueError, TypeError, KeyError, IndexError, AttributeError) as exc:
        # A reader's own bug must still reach the user as one clear line, never a traceback;
        # the fuzz tests fail on this message, so such bugs are found and fixed, not hidden.
        raise PlanParseError(f"{READER_ERROR} ({type(exc).__name__}: {exc})", engine=module.NAME,
                             fmt=found_fmt) from None
    if not parsed.nodes:
        raise PlanParseError("no operator found", engine=module.NAME, fmt=found_fmt)
    if replaced:
        parsed.notes.append(f"{replaced:,} lone UTF-16 surrogate(s) (\\ud800-\\udfff) in the "
                            "input were read as U+FFFD: they cannot be printed or saved as UTF-8")
    return Plan(parsed, module, CheckOptions(threshold=float(threshold)), source=text)
