"""planview's vocabulary and number formats, defined once.

Every view (terminal, widget, HTML, Markdown, the diagnosis' sentences) says a direction, an
error factor, a row count, a time and a cause with these functions, and the report carries
the words it chose (``report["words"]`` and each node's and finding's ``text``), so the
notebook's ES module never formats a number of its own.

The word set:

- direction: the *estimate* is "too low" (fewer rows estimated than found; log10 ratio > 0)
  or "too high"; within 5 % it is "on target";
- an error factor is "×N": one decimal below 10 (×5.9), whole numbers with thousands
  separators up to a million (×58,824), then "×1.2 million", "×3.4 billion", and powers of
  ten beyond a trillion (×10¹⁵);
- a join's own error is its selectivity being off (:func:`added_words`);
- counts agree with their noun (1 operator, 2 operators).
"""

from __future__ import annotations

import math
from typing import Any

TOO_LOW = "too low"
TOO_HIGH = "too high"
ON_TARGET = "on target"
ON_TARGET_LOG10 = math.log10(1.05)
"""Below this |log10(actual / estimated)| an estimate is "on target" (within 5 %)."""

DIRECTION_WORDS = {"under": TOO_LOW, "over": TOO_HIGH}

CAUSE_WORDS = {
    "correlation": "correlated columns",
    "skew": "skewed values",
    "range_gap": "values past the histogram's range",
    "stale_statistics": "stale statistics",
    "default_selectivity": "a default selectivity guess",
    "unexplained": "no cause found",
    "not_diagnosed": "not diagnosed (past the diagnosis cap)",
    "join_selectivity": "a semi- or anti-join selectivity guess",
    "filter_combination": "how the engine combines ANDed filters",
    "planner_guess": "the planner's built-in guess",
}

STATE_WORDS = {
    "origin": "error introduced here",
    "inherited": "error carried from below",
    "judged": "judged",
    "neutral": "not judged",
}

_SUPERSCRIPT = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


def plural(count: float, noun: str, plural_form: str | None = None) -> str:
    """``plural(1, "operator")`` → "1 operator"; ``plural(3, "origin")`` → "3 origins"."""
    word = noun if count == 1 else (plural_form or noun + "s")
    return f"{rows(count)} {word}"


def rows(value: float | None) -> str:
    """A row count: 1,234 · 0.5 · 12.3 million."""
    if value is None:
        return "–"
    value = float(value)
    if not math.isfinite(value):
        return "–"
    if abs(value) >= 1e12:
        return f"{value / 1e12:.3g} trillion"
    if abs(value) >= 1e9:
        return f"{value / 1e9:.3g} billion"
    if abs(value) >= 1e7:
        return f"{value / 1e6:.3g} million"
    if value.is_integer() or abs(value) >= 100:
        return f"{value:,.0f}"
    if abs(value) < 1:
        return f"{value:.3g}"
    return f"{value:,.2f}".rstrip("0").rstrip(".")


def factor(q: float | None) -> str:
    """An error factor (a q-error, ≥ 1): ×5.9 · ×58,824 · ×1.2 million · ×10¹⁵."""
    if q is None or not math.isfinite(q):
        return "–"
    q = max(1.0, float(q))
    if q >= 1e12:
        return "×10" + str(round(math.log10(q))).translate(_SUPERSCRIPT)
    if q >= 1e9:
        return f"×{q / 1e9:.2g} billion"
    if q >= 1e6:
        return f"×{q / 1e6:.2g} million"
    if q >= 9.95:
        return f"×{q:,.0f}"
    return f"×{q:.1f}"


def direction(log10_ratio: float | None) -> str:
    """"too low", "too high" or "on target" for log10(actual / estimated)."""
    if log10_ratio is None:
        return ""
    if abs(log10_ratio) < ON_TARGET_LOG10:
        return ON_TARGET
    return TOO_LOW if log10_ratio > 0 else TOO_HIGH


def error(log10_ratio: float | None, q: float | None = None) -> str:
    """The one way an error is said: "×58,824 too low", "×2.0 too high", "on target"."""
    if log10_ratio is None:
        return "–"
    said = direction(log10_ratio)
    if said == ON_TARGET:
        return ON_TARGET
    return f"{factor(q if q is not None else 10 ** min(300.0, abs(log10_ratio)))} {said}"


def finding_error(q: float, direction: str) -> str:
    """An origin's error from its q-error and direction ("under"/"over"): "×602 too high"."""
    return error((1 if direction == "under" else -1) * math.log10(max(1.0, q)), q)


def state(origin: bool, inherits: bool, judged: bool) -> str:
    """A node's state, a key of STATE_WORDS: where its error was introduced, carried, or not judged."""
    if origin:
        return "origin"
    if inherits:
        return "inherited"
    return "judged" if judged else "neutral"


def added_words(log10_ratio: float | None, is_join: bool = False) -> str:
    """The error an operator adds itself. For a join: its selectivity is off."""
    if log10_ratio is None:
        return "–"
    said = error(log10_ratio)
    if said == ON_TARGET:
        return "adds no error"
    if is_join:
        return f"join selectivity {said}"
    return f"adds {said}"


def ms(value: float | None) -> str:
    """A time: 0.042 ms · 12.5 ms · 3.20 s."""
    if value is None or not math.isfinite(value):
        return "–"
    if value >= 1000:
        return f"{value / 1000:,.2f} s"
    return f"{value:.3f} ms" if value < 10 else f"{value:,.1f} ms"


def cause(name: str | None) -> str | None:
    """A cause's words: "correlated columns" for ``correlation``."""
    if not name:
        return None
    return CAUSE_WORDS.get(name, str(name).replace("_", " "))


def statement_times(statement: dict, *, planning: bool = True) -> list[str]:
    """A statement's times as every view heads it in a paste of several: its printed execution
    time (its operators' time where none was printed), then its planning time.

    >>> statement_times({"execution_ms": 0.177, "planning_ms": 0.106})
    ['ran 0.177 ms', 'planning 0.106 ms']
    >>> statement_times({"execution_ms": None, "total_ms": 1200.0, "planning_ms": 0.1}, planning=False)
    ["operators' time 1.20 s"]
    """
    said = []
    if statement.get("execution_ms") is not None:
        said.append(f"ran {ms(statement['execution_ms'])}")
    elif statement.get("total_ms") is not None:
        said.append(f"operators' time {ms(statement['total_ms'])}")
    if planning and statement.get("planning_ms") is not None:
        said.append(f"planning {ms(statement['planning_ms'])}")
    return said


def proof(result: dict | None) -> str | None:
    """A proven fix in one sentence (``planview.live.proof``).

    >>> proof({"provable": True, "est_before": 5, "est_after": 212, "actual": 200, "plan_changed": False})
    'with this fix the estimate would be 212 instead of 5; 200 were found (tried in a transaction that was rolled back)'
    >>> proof({"provable": False, "why": "a rewrite of the query"})
    'this fix cannot be proven on the server: a rewrite of the query'
    """
    if not result:
        return None
    if not result.get("provable"):
        return f"this fix cannot be proven on the server: {result.get('why') or 'no reason given'}"
    if result.get("est_after") is None:
        return ("the fix was tried in a transaction that was rolled back, but the new plan has no "
                "operator matching this one")
    text = (f"with this fix the estimate would be {rows(round(result['est_after']))} instead of "
            f"{rows(round(result['est_before']))}" if result.get("est_before") is not None else
            f"with this fix the estimate would be {rows(round(result['est_after']))}")
    if result.get("actual") is not None:
        text += f"; {rows(round(result['actual']))} were found"
    if result.get("plan_changed"):
        text += "; the plan's shape changes"
    return text + " (tried in a transaction that was rolled back)"


def derivation(result: dict | None) -> str | None:
    """A re-derived estimate in one sentence (``planview.live.derive``).

    >>> derivation({"rows": 1007, "printed": 1007, "equal": True, "approximate": False})
    'worked out from the statistics: 1,007 rows per start, as the plan printed'
    >>> derivation({"rows": 15, "printed": 30, "equal": False, "approximate": True})
    'worked out from the statistics: about 15 rows per start, where the plan printed 30'
    """
    if not result or result.get("rows") is None:
        return None
    about = "about " if result.get("approximate") else ""
    said = f"worked out from the statistics: {about}{rows(result['rows'])} rows per start"
    if result.get("equal"):
        return said + ", as the plan printed"
    printed = result.get("printed")
    return said + (f", where the plan printed {rows(printed)}" if printed is not None else "")


def vocabulary() -> dict[str, Any]:
    """The words a view needs that are not per node: what the report carries as ``words``."""
    return {
        "direction": dict(DIRECTION_WORDS, on_target=ON_TARGET),
        "causes": dict(CAUSE_WORDS),
        "states": dict(STATE_WORDS),
        "origin_rank": "origin {rank}",
        "node_id": "#{id}",
        "scale_low": f"estimate {TOO_HIGH}",
        "scale_high": f"estimate {TOO_LOW}",
    }
