"""Getting the user's input into one string, with the limits every parser relies on."""

from __future__ import annotations

import os
from pathlib import Path

from .errors import PlanParseError

MAX_INPUT_BYTES = 200 * 1024 * 1024
"""Inputs above this are refused before any parsing (a plan of 200 MB is not a plan)."""

MAX_DEPTH = 10_000
"""Trees deeper than this are refused with a clear message. Every walk in planview is
iterative, so depth never costs a RecursionError; the limit keeps the output readable and
the JSON/YAML/XML decoders (which do recurse) within their own limits."""


def read_text(source: str | bytes | os.PathLike, *, max_bytes: int = MAX_INPUT_BYTES) -> str:
    """The plan text from a string, bytes, or a path.

    A string is plan text, unless it is one line naming an existing file. Standard input is
    read only for a ``Path("-")`` (the command line's ``-``), never for the string ``"-"``.
    """
    if isinstance(source, os.PathLike) or (
        isinstance(source, str) and "\n" not in source and len(source) < 4096
        and source.strip() and _looks_like_path(source)
    ):
        path = Path(source)
        if str(path) == "-":
            import sys

            data = sys.stdin.buffer.read(max_bytes + 1)
        else:
            try:
                size = path.stat().st_size
            except OSError as exc:
                raise PlanParseError(f"cannot read {path}: {exc.strerror}") from None
            if size > max_bytes:
                raise PlanParseError(_too_big(size, max_bytes))
            try:
                data = path.read_bytes()
            except OSError as exc:
                raise PlanParseError(f"cannot read {path}: {exc.strerror}") from None
        return decode(data, max_bytes=max_bytes)
    if isinstance(source, bytes):
        return decode(source, max_bytes=max_bytes)
    if not isinstance(source, str):
        raise PlanParseError(f"expected plan text, bytes or a path, got {type(source).__name__}")
    if len(source) > max_bytes:
        raise PlanParseError(_too_big(len(source), max_bytes))
    return source


def _looks_like_path(text: str) -> bool:
    try:
        return Path(text).is_file()
    except (OSError, ValueError):
        return False


def decode(data: bytes, *, max_bytes: int = MAX_INPUT_BYTES) -> str:
    if len(data) > max_bytes:
        raise PlanParseError(_too_big(len(data), max_bytes))
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise PlanParseError(f"not UTF-8 text (byte {exc.start})", line=line) from None


def _too_big(size: int, limit: int) -> str:
    return f"input is {size / 1e6:.1f} MB, over the {limit / 1e6:.0f} MB limit; refused unread"
