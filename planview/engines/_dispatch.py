"""What every engine's `parse` does first: refuse empty input and unknown formats."""

from __future__ import annotations

from collections.abc import Callable

from ..errors import PlanParseError
from ..model import ParsedPlan


def dispatch(engine: str, label: str, readers: dict[str, Callable[[str], ParsedPlan]],
             text: str, fmt: str) -> ParsedPlan:
    """Call the reader for `fmt`, with the same two errors for every engine."""
    if not text.strip():
        raise PlanParseError("the input is empty", line=1, engine=engine, fmt=fmt)
    reader = readers.get(fmt)
    if reader is None:
        raise PlanParseError(f"unknown format {fmt!r}; {label} formats: {', '.join(readers)}",
                             engine=engine, fmt=fmt)
    return reader(text)


def json_document(body: str, engine: str):
    """`json.loads` with the errors every engine reports the same way (line and column)."""
    import json

    try:
        return json.loads(body)
    except json.JSONDecodeError as exc:
        raise PlanParseError(f"invalid JSON: {exc.msg} (column {exc.colno})", line=exc.lineno,
                             engine=engine, fmt="json") from None
    except RecursionError:
        raise PlanParseError("JSON nested too deeply for the JSON reader; refused", engine=engine,
                             fmt="json") from None
