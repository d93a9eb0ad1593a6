"""What every emitter shares: the colour scale, number wording and which nodes open first."""

from __future__ import annotations

import math
from typing import Any

from .. import words as _words
from ..words import CAUSE_WORDS, factor, ms, rows  # noqa: F401  (one vocabulary: planview/words.py)

VIK = (
    "#001261", "#022b71", "#034481", "#0c5e92", "#307da6", "#619ebd", "#94bed2", "#c6dbe6",
    "#ece5e0", "#e9ccba", "#dcac90", "#cf8e68", "#c37243", "#b3531f", "#942f06", "#741506",
    "#590008",
)
"""Crameri's Scientific colour maps 8, "vik", at 17 evenly spaced points: log10(actual /
estimated) from -4 (blue, estimate too high) to +4 (red, estimate too low). The ES module
holds the same list (a test keeps the two equal)."""

SCALE_LIMIT = 4.0
LARGE_PLAN = 80
"""Plans with more operators than this open folded, with only the paths to the origins open."""

GENERIC_CAUTION = (
    "Run fixes on a replica or in a quiet hour first: ANALYZE reads a sample of the table, "
    "CREATE STATISTICS and index builds take locks, and re-checking with EXPLAIN ANALYZE runs "
    "the statement."
)


def ratio_colour(log10_ratio: float) -> str:
    t = max(-SCALE_LIMIT, min(SCALE_LIMIT, log10_ratio))
    pos = (t + SCALE_LIMIT) / (2 * SCALE_LIMIT) * (len(VIK) - 1)
    low = math.floor(pos)
    high = min(len(VIK) - 1, low + 1)
    frac = pos - low
    a, b = _rgb(VIK[low]), _rgb(VIK[high])
    r, g, bl = (math.floor(x + (y - x) * frac + 0.5) for x, y in zip(a, b))  # half up, as Math.round
    return f"rgb({r}, {g}, {bl})"


def luminance(rgb: tuple[int, int, int]) -> float:
    """WCAG 2.1 relative luminance of an sRGB colour."""
    c = [v / 255 for v in rgb]
    c = [v / 12.92 if v <= 0.03928 else ((v + 0.055) / 1.055) ** 2.4 for v in c]
    return 0.2126 * c[0] + 0.7152 * c[1] + 0.0722 * c[2]


def contrast(a: tuple[int, int, int], b: tuple[int, int, int]) -> float:
    """WCAG 2.1 contrast ratio, (L1 + 0.05) / (L2 + 0.05) with L1 the lighter."""
    high, low = sorted((luminance(a), luminance(b)), reverse=True)
    return (high + 0.05) / (low + 0.05)


def ink_for(log10_ratio: float) -> str:
    """Black or white, whichever contrasts more with the cell's colour (≥ 4.5:1 on the scale)."""
    bg = tuple(int(x) for x in ratio_colour(log10_ratio)[4:-1].split(","))
    return "#ffffff" if contrast((255, 255, 255), bg) >= contrast((0, 0, 0), bg) else "#000000"


def _rgb(hex_colour: str) -> tuple[int, int, int]:
    return tuple(int(hex_colour[i:i + 2], 16) for i in (1, 3, 5))  # type: ignore[return-value]


def error_words(log10_ratio: float | None, q: float | None) -> str:
    return _words.error(log10_ratio, q)


def cause_words(cause: str | None) -> str | None:
    return _words.cause(cause)


def node_state(node: dict[str, Any]) -> str:
    return _words.state(bool(node.get("origin")), bool(node.get("inherits_from")), bool(node.get("judged")))


def paths_to_origins(report: dict[str, Any]) -> set[int]:
    """The origins and every node above them: what a large plan shows first.

    A walk up stops at the first node already kept (all above it are kept too), so the
    paths cost one step per node kept, however many origins share them."""
    by_id = {n["id"]: n for n in report["nodes"]}
    keep: set[int] = set()
    for finding in report["findings"]:
        node_id = finding["node"]
        while node_id is not None and node_id not in keep:
            keep.add(node_id)
            node = by_id.get(node_id)
            node_id = node.get("parent") if node is not None else None
    return keep


def evidence_items(evidence: Any) -> tuple[list[str], list[tuple[str, str]]]:
    """The evidence's sentences, and its other scalar or flat-list items as (key, text)."""
    if not isinstance(evidence, dict):
        return [], []
    lines = [str(x) for x in evidence.get("lines") or [] if x is not None] \
        if isinstance(evidence.get("lines"), list) else []
    pairs: list[tuple[str, str]] = []
    for key, value in evidence.items():
        if key == "lines" or value is None or (isinstance(value, (str, list, tuple)) and not value):
            continue  # an empty field says nothing
        if isinstance(value, (list, tuple)):
            if any(isinstance(x, (dict, list, tuple)) for x in value):
                continue
            text = ", ".join(_scalar(x) for x in value)
        elif isinstance(value, dict):
            continue
        else:
            text = _scalar(value)
        pairs.append((str(key).replace("_", " "), text))
    return lines, pairs


def _scalar(value: Any) -> str:
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float) and abs(value) < 1:
        return f"{value:.4g}"
    if isinstance(value, (int, float)):
        return rows(float(value))
    return str(value)
