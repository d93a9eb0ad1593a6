"""The exceptions planview raises on purpose. Each message names the line or key at fault."""

from __future__ import annotations


class PlanviewError(Exception):
    """Base class of every error planview raises on purpose."""


class PlanParseError(PlanviewError, ValueError):
    """The input is not a plan planview can read.

    `line` (1-based, in the text as given) or `key` (a path such as
    ``[0].Plan.Plans[1]."Plan Rows"``) says where; `message` says what.
    """

    def __init__(self, message: str, *, line: int | None = None, key: str | None = None,
                 engine: str | None = None, fmt: str | None = None):
        self.message = message
        self.line = line
        self.key = key
        self.engine = engine
        self.fmt = fmt
        super().__init__(self._render())

    def _render(self) -> str:
        where = []
        if self.engine or self.fmt:
            where.append(" ".join(x for x in (self.engine, self.fmt) if x))
        if self.line is not None:
            where.append(f"line {self.line}")
        if self.key is not None:
            where.append(f"key {self.key}")
        return f"{', '.join(where)}: {self.message}" if where else self.message


class ProbeError(PlanviewError):
    """A live-database probe could not run (no connection, refused statement...)."""


class LiveError(ProbeError):
    """A live review could not run: no connection, a refused statement, a timeout. The
    message is one line, with every password masked."""
