"""What every engine's `parse` does first: refuse empty input and unknown formats."""

from __future__ import annotations

import json
import math
import re
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


MAX_COUNT = 1e100
"""The largest row or loop count a reader accepts. PostgreSQL clamps row estimates to 1e100
(MAXIMUM_ROWCOUNT, costsize.c) and counts actual rows and loops in 64 bits: a larger figure is
damage, and the product of two counts must stay finite for the check."""


class BadNumber(ValueError):
    """A JSON number planview refuses: NaN, an infinity, or one too large for a float."""

    def __init__(self, literal: str, why: str):
        super().__init__(why)
        self.literal = literal
        self.why = why


def _refuse_constant(name: str):
    raise BadNumber(name, f"{name} is not a number JSON allows (no engine writes it)")


def _checked_int(literal: str) -> int:
    if len(literal) > 300 and len(literal.lstrip("-")) > 300:  # the strip only for a long one
        raise BadNumber(literal, f"a {len(literal):,}-digit integer is beyond any count or cost")
    return int(literal)


def _checked_float(literal: str) -> float:
    value = float(literal)
    if not math.isfinite(value):
        raise BadNumber(literal, f"{literal[:40]} is beyond the range of a float")
    return value


JSON_DECODER = json.JSONDecoder(parse_int=_checked_int, parse_float=_checked_float,
                                parse_constant=_refuse_constant)
"""The one JSON decoder of every engine: it refuses NaN, infinities and over-long numbers with a
`BadNumber`. Its number hooks cost less than a scan of the text for suspect numbers would (on a
35 MB plan: 0.25 s against 0.14 s for the plain decoder plus 1.4 s for the scan)."""


def bad_number_error(exc: BadNumber, text: str, engine: str, numbers: list[int] | None = None) -> PlanParseError:
    """The `PlanParseError` for a refused number, naming the line it stands on."""
    found = re.search(rf"(?<![\w.\"]){re.escape(exc.literal[:60])}", text)
    line = key = None
    if found:
        line = text.count("\n", 0, found.start()) + 1
        named = _KEY_BEFORE.search(text, max(0, found.start() - 300), found.start())
        key = f'"{named.group(1)}"' if named else None
    if line is not None and numbers:
        line = numbers[min(line, len(numbers)) - 1]
    shown = exc.literal if len(exc.literal) <= 40 else exc.literal[:20] + "..."
    return PlanParseError(f"number {shown} refused: {exc.why}", line=line, key=key, engine=engine,
                          fmt="json")


_KEY_BEFORE = re.compile(r'"([^"\\]{1,80})"\s*:\s*(?:\[\s*)?$')


def json_document(body: str, engine: str):
    """`json.loads` with the errors every engine reports the same way (line and column)."""
    try:
        return JSON_DECODER.decode(body)
    except json.JSONDecodeError as exc:
        raise PlanParseError(f"invalid JSON: {exc.msg} (column {exc.colno})", line=exc.lineno,
                             engine=engine, fmt="json") from None
    except BadNumber as exc:
        raise bad_number_error(exc, body, engine) from None
    except RecursionError:
        raise PlanParseError("JSON nested too deeply for the JSON reader; refused", engine=engine,
                             fmt="json") from None
