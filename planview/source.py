"""Getting the user's input into one string, with the limits every parser relies on."""

from __future__ import annotations

import os
import re
from pathlib import Path

from .errors import PlanParseError

FORMAT_LIMITS = {"text": 20_000_000, "json": 40_000_000, "xml": 20_000_000, "yaml": 20_000_000}
"""The largest input read, per format, in bytes (characters once decoded).

Measured by ``bench/bench_limits.py --mode reader`` on the 2-core machine under load from
other runs, with the densest plan a megabyte holds (an Append over filtered scans, every
operator a misestimate), at 39-78 MB: peak memory per input MB of text 17, JSON 6, XML 14,
YAML 10; reading time per input MB of text 0.40 s, JSON 0.11 s, XML 0.22 s, YAML 0.25 s.
At these limits every reader stayed under 0.36 GB and 4.1 s on the loaded machine (text 3.8 s,
JSON 3.6 s, XML 2.0 s, YAML 4.1 s), the rest of the bar (2 GB, 10 s) left for the check, the diagnosis and
the views. Formats an engine names otherwise (a tree, a table) take the text limit."""

MAX_INPUT_BYTES = max(FORMAT_LIMITS.values())
"""No input longer than this is read at all: the read stops one byte past it."""


def max_input_bytes(fmt: str) -> int:
    """The size limit of one format (see `FORMAT_LIMITS`)."""
    return FORMAT_LIMITS.get(fmt, FORMAT_LIMITS["text"])


def check_format_size(text: str, fmt: str) -> None:
    """Refuse a text over its format's limit (read under the overall one, detected since).

    A text-like format (everything but JSON, XML and YAML) counts its characters other than
    spaces: indentation costs next to nothing to read, and a plan 3,000 levels deep is 27 MB
    of it."""
    limit = max_input_bytes(fmt)
    size = len(text)
    if size > limit and fmt not in ("json", "xml", "yaml"):
        size -= text.count(" ")
    if size > limit:
        raise PlanParseError(f"a {fmt} plan of {size / 1e6:.1f} MB is over the "
                             f"{limit / 1e6:.0f} MB limit for {fmt}; refused unread", fmt=fmt)

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

            data = _read_capped(sys.stdin.buffer, max_bytes)
        else:
            try:
                with open(path, "rb") as handle:
                    data = _read_capped(handle, max_bytes)
            except OSError as exc:
                raise PlanParseError(f"cannot read {path}: {exc.strerror or exc}") from None
        return decode(data, max_bytes=max_bytes)
    if isinstance(source, bytes):
        return decode(source, max_bytes=max_bytes)
    if not isinstance(source, str):
        raise PlanParseError(f"expected plan text, bytes or a path, got {type(source).__name__}")
    if len(source) > max_bytes:
        raise PlanParseError(_too_big(len(source), max_bytes))
    return source


def _read_capped(handle, max_bytes: int) -> bytes:
    """At most ``max_bytes + 1`` bytes, whatever the file claims to be: ``stat()`` says 0 for
    ``/dev/zero``, a FIFO or a pipe, so only the read itself can be trusted."""
    chunks: list[bytes] = []
    left = max_bytes + 1
    while left > 0:
        chunk = handle.read(min(left, 1 << 20))
        if not chunk:
            break
        chunks.append(chunk)
        left -= len(chunk)
    data = b"".join(chunks)
    if len(data) > max_bytes:
        raise PlanParseError(f"input is over the {max_bytes / 1e6:.0f} MB limit; refused after "
                             f"reading {max_bytes + 1:,} bytes")
    return data


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


_SURROGATE = re.compile("[\ud800-\udfff]")
_ESCAPE_HINT = re.compile(r"\\u[dD][89a-fA-F]")
# An escaped backslash is consumed whole, so a \\uD800 that follows one is not an escape.
_ESCAPES = re.compile(r"\\\\|\\u[dD][89abAB][0-9a-fA-F]{2}(?:\\u[dD][c-fC-F][0-9a-fA-F]{2})?"
                      r"|\\u[dD][c-fC-F][0-9a-fA-F]{2}")


def _mend_escape(match: re.Match) -> str:
    escape = match.group()
    return escape if len(escape) in (2, 12) else "\\ufffd"


def without_lone_surrogates(text: str, escapes: bool = False) -> tuple[str, int]:
    """The text with every lone UTF-16 surrogate made U+FFFD, and how many there were.

    A lone surrogate (a string given by a caller, or a ``\\ud800`` escape that JSON and YAML
    decode to one) cannot be printed or written as UTF-8, so every output would fail on it.
    With `escapes`, such escapes in the text are mended too (a valid pair is kept).
    """
    count = 0
    if not text.isascii() and _SURROGATE.search(text):
        text, count = _SURROGATE.subn("\ufffd", text)
    if escapes and _ESCAPE_HINT.search(text):
        mended = _ESCAPES.sub(_mend_escape, text)
        if mended != text:
            count += sum(1 for m in _ESCAPES.finditer(text) if len(m.group()) not in (2, 12))
            text = mended
    return text, count


PLAN_SUFFIXES = (".txt", ".json", ".xml", ".yaml", ".yml", ".plan")
"""The file endings a folder's plans have; any other file in a folder is not read as one."""


def is_beside_the_plans(path: Path) -> bool:
    """A file kept beside plans that is not a plan: an expected result (``*.expected.json``),
    a capture manifest, a README, a hidden file."""
    name = path.name.lower()
    return (name.endswith(".expected.json") or name == "manifest.json" or name.startswith("readme")
            or name.startswith("."))


def plan_files(folder: str | os.PathLike) -> tuple[list[Path], list[Path]]:
    """The plan files under a folder, sorted, and the files skipped as not plans (a manifest,
    an expected result, a README, a script, anything without a plan file's ending). Hidden
    folders are not entered."""
    root = Path(folder)
    plans: list[Path] = []
    skipped: list[Path] = []
    for path in sorted(root.rglob("*")):
        if any(part.startswith(".") for part in path.relative_to(root).parts[:-1]):
            continue
        try:
            if not path.is_file():
                continue
        except OSError:
            continue
        if is_beside_the_plans(path) or path.suffix.lower() not in PLAN_SUFFIXES:
            skipped.append(path)
        else:
            plans.append(path)
    return plans, skipped
