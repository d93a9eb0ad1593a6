"""Reading many plans as a stream: PostgreSQL server logs holding auto_explain output, and folders.

A server log is read line by line and never held whole: each auto_explain entry (a log line
``... LOG:  duration: 12.3 ms  plan:`` followed by its continuation lines, which the server
writes with a leading tab) is cut out, handed on as an `Entry`, and dropped. Any
``log_line_prefix`` works, because the entry is found by what follows the prefix; a time stamp
(``%m``, ``%t``, ``%n``) and a process id (``%p`` written as ``[1234]`` or ``pid=1234``) are picked out of the
prefix when it has them. Other log lines between entries are passed over. An entry that cannot
be read (cut short, over the size limit, not a plan) becomes an `Unreadable` naming its file
and line, and the stream goes on.

Continuation lines carry no prefix, so a line that another process wrote into the middle of an
entry (possible with ``logging_collector = off`` under load) ends that entry early; the entry
is then reported unreadable rather than guessed at.
"""

from __future__ import annotations

import hashlib
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

from ..errors import PlanviewError
from ..source import max_input_bytes

_HEADER = re.compile(r"(?P<level>LOG|INFO|NOTICE|DEBUG\d?|WARNING):\s+duration: (?P<ms>\d+(?:\.\d+)?) ms\s+plan:\s*$")
_TIME = re.compile(r"(?P<ts>\d{4}-\d\d-\d\d[ T]\d\d:\d\d:\d\d(?:\.\d+)?(?: ?(?:[A-Z]{2,5}|[+-]\d\d(?::?\d\d)?))?)"
                   r"|(?P<epoch>\b\d{10}\.\d{3}\b)")
_PID = re.compile(r"\[(\d+)\]|\bpid[=:](\d+)", re.I)
_TEXT_ROOT = re.compile(r"^\S.*?  \((?:cost=|actual )")
_HEADER_KEYS = ("Query Text:", "Query Identifier:", "Query Parameters:")
_PLAN_SUFFIXES = (".txt", ".json", ".xml", ".yaml", ".yml", ".sql", ".plan", ".explain", "")
_LOG_SUFFIXES = (".log", ".csv")  # a .csv is read only when it holds stderr-style entries
_SNIFF_BYTES = 65536
MAX_ENTRY_BYTES = max_input_bytes("json")
"""An entry longer than this is refused unread (its lines are skipped, not kept)."""


@dataclass
class Entry:
    """One plan to review: its text and what the log said around it."""

    source: str
    line: int
    text: str
    fmt: str | None = None          # "text" or "json" for a log entry; None: detect
    engine: str | None = None
    query_text: str | None = None
    query_identifier: str | None = None
    log_time: str | None = None
    pid: int | None = None
    duration_ms: float | None = None
    text_line: int | None = None    # the file's line where `text` begins (default: `line`)

    @property
    def query_id(self) -> str:
        return f"{self.source}:{self.line}"


@dataclass
class Unreadable:
    """An entry or file that could not be read, with the place and the reason."""

    source: str
    line: int | None
    reason: str

    def __str__(self) -> str:
        where = f"{self.source}:{self.line}" if self.line else self.source
        return f"{where}: unreadable: {self.reason}"


def fingerprint(query_text: str | None) -> str | None:
    """A short stable id of a query's shape: constants, comments, case and spacing left out,
    so the same statement with other values gets the same fingerprint."""
    normal = normalise_query(query_text)
    if not normal:
        return None
    return hashlib.sha1(normal.encode("utf-8")).hexdigest()[:16]


_COMMENT = re.compile(r"--[^\n]*|/\*.*?\*/", re.S)
_STRING = re.compile(r"'(?:[^']|'')*'")
_NUMBER = re.compile(r"(?<![\w$.])[-+]?\d+(?:\.\d+)?(?:e[-+]?\d+)?\b", re.I)
_PARAM = re.compile(r"\$\d+")
_LIST = re.compile(r"\(\s*\?(?:\s*,\s*\?)*\s*\)")
_SPACE = re.compile(r"\s+")


def normalise_query(query_text: str | None) -> str | None:
    if not query_text or not query_text.strip():
        return None
    text = _COMMENT.sub(" ", query_text)
    text = _STRING.sub("?", text)
    text = _PARAM.sub("?", text)
    text = _NUMBER.sub("?", text)
    text = _SPACE.sub(" ", text).strip().rstrip(";").strip().lower()
    return _LIST.sub("(?)", text)


# ---------------------------------------------------------------------------------------
# a server log
# ---------------------------------------------------------------------------------------

def looks_like_log(path: str | os.PathLike) -> bool:
    """True when the file's first 64 KB hold an auto_explain entry's first line."""
    try:
        with open(path, "rb") as handle:
            head = handle.read(_SNIFF_BYTES).decode("utf-8", "replace")
    except OSError:
        return False
    return any(_HEADER.search(line) for line in head.splitlines())


def read_log(path: str | os.PathLike, *, name: str | None = None) -> Iterator[Entry | Unreadable]:
    """The entries of one server log, in order, as a stream (one entry in memory at a time)."""
    source = name or str(path)
    try:
        handle = open(path, "rb")
    except OSError as exc:
        yield Unreadable(source, None, f"cannot read: {exc.strerror or exc}")
        return
    with handle:
        yield from read_log_lines(_decoded(handle), source)


def _decoded(handle) -> Iterator[str]:
    for raw in handle:
        yield raw.decode("utf-8", "replace").rstrip("\r\n")


class _Pending:
    __slots__ = ("line", "header", "ms", "lines", "size", "too_big")

    def __init__(self, line: int, header: str, ms: float):
        self.line, self.header, self.ms = line, header, ms
        self.lines: list[str] = []
        self.size = 0
        self.too_big = False


def read_log_lines(lines, source: str, first_line: int = 1) -> Iterator[Entry | Unreadable]:
    """The entries in an iterable of log lines (without line ends), the first numbered `first_line`."""
    pending: _Pending | None = None
    for number, line in enumerate(lines, first_line):
        if pending is not None and line.startswith("\t"):
            if not pending.too_big:
                pending.size += len(line)
                if pending.size > MAX_ENTRY_BYTES:
                    pending.too_big = True
                    pending.lines = []
                else:
                    pending.lines.append(line[1:])
            continue
        if pending is not None:
            yield _finish(pending, source)
            pending = None
        match = _HEADER.search(line)
        if match:
            pending = _Pending(number, line[: match.start()], float(match.group("ms")))
    if pending is not None:
        yield _finish(pending, source)


def _finish(pending: _Pending, source: str) -> Entry | Unreadable:
    if pending.too_big:
        return Unreadable(source, pending.line, f"entry over the {MAX_ENTRY_BYTES / 1e6:.0f} MB limit; "
                                                "skipped unread")
    lines = pending.lines
    if not lines:
        return Unreadable(source, pending.line, "an auto_explain entry with no plan (cut short)")
    entry = Entry(source=source, line=pending.line, text="", duration_ms=pending.ms)
    stamp = _TIME.search(pending.header)
    if stamp:
        entry.log_time = stamp.group("ts") or stamp.group("epoch")
    pid = _PID.search(pending.header)
    if pid:
        entry.pid = int(pid.group(1) or pid.group(2))
    first = lines[0].lstrip()
    if first.startswith(("{", "[")):
        entry.fmt = "json"
        entry.engine = "postgresql"
        entry.text = "\n".join(lines)
        entry.text_line = pending.line + 1
        return entry
    # text format: the header keys (a query text may run over several lines), then the plan
    start = None
    key = None
    values: dict[str, list[str]] = {}
    for i, line in enumerate(lines):
        if _TEXT_ROOT.match(line):
            start = i
            break
        found = next((k for k in _HEADER_KEYS if line.startswith(k)), None)
        if found:
            key = found
            values[key] = [line[len(found):].strip()]
        elif key is not None:
            values[key].append(line)
    if start is None:
        return Unreadable(source, pending.line, "no plan operator line in the entry (cut short, "
                                                "or not an auto_explain plan)")
    entry.fmt = "text"
    entry.engine = "postgresql"
    entry.text = "\n".join(lines[start:])
    entry.text_line = pending.line + 1 + start
    if "Query Text:" in values:
        entry.query_text = "\n".join(values["Query Text:"]).strip()
    if "Query Identifier:" in values:
        entry.query_identifier = " ".join(values["Query Identifier:"]).strip()
    return entry


# ---------------------------------------------------------------------------------------
# a folder, a file, or a mix
# ---------------------------------------------------------------------------------------

def _beside_plans(path: Path) -> bool:
    """Files kept beside plans that are not plans: expected results, capture manifests."""
    return path.name.endswith(".expected.json") or path.name == "manifest.json"


def iter_files(path: str | os.PathLike) -> Iterator[Path]:
    root = Path(path)
    if root.is_file():
        yield root
        return
    for found in sorted(root.rglob("*")):
        if found.is_file() and not found.name.startswith(".") and not _beside_plans(found) \
                and not found.name.lower().startswith("readme"):
            yield found


def iter_entries(path: str | os.PathLike) -> Iterator[Entry | Unreadable]:
    """Every plan under a path, as a stream: a server log's entries one by one, a plan file as
    one entry (read by the single-plan reader's own limits, not here)."""
    root = Path(path)
    if not root.exists():
        yield Unreadable(str(root), None, "no such file or folder")
        return
    for file in iter_files(root):
        name = str(file.relative_to(root)) if root.is_dir() else str(file)
        suffix = file.suffix.lower()
        if looks_like_log(file):
            yield from read_log(file, name=name)
        elif suffix in _PLAN_SUFFIXES and suffix not in _LOG_SUFFIXES:
            try:
                size = file.stat().st_size
            except OSError as exc:
                yield Unreadable(name, None, f"cannot read: {exc.strerror or exc}")
                continue
            if size > MAX_ENTRY_BYTES:
                yield Unreadable(name, None, f"a file of {size / 1e6:.1f} MB is over the "
                                             f"{MAX_ENTRY_BYTES / 1e6:.0f} MB limit; skipped unread")
                continue
            try:
                text = file.read_bytes()
            except OSError as exc:
                yield Unreadable(name, None, f"cannot read: {exc.strerror or exc}")
                continue
            try:
                decoded = text.decode("utf-8-sig")
            except UnicodeDecodeError as exc:
                yield Unreadable(name, text[: exc.start].count(b"\n") + 1, f"not UTF-8 text (byte {exc.start})")
                continue
            yield Entry(source=name, line=1, text=decoded)
        else:
            yield Unreadable(name, None, "neither a plan file nor a server log with auto_explain entries")


# ---------------------------------------------------------------------------------------
# the reading cut into tasks: byte ranges of a log, groups of plan files
# ---------------------------------------------------------------------------------------

def log_ranges(path: str | os.PathLike, partition_bytes: int = 1 << 20) -> list[tuple[int, int, int]]:
    """(start, end, first line number) of each range, every start on a line start. One pass
    over the file counting line ends, 1 MB at a time."""
    size = os.path.getsize(path)
    ranges: list[tuple[int, int, int]] = []
    start, first_line, line_ends, pos = 0, 1, 0, 0
    target = partition_bytes
    with open(path, "rb") as handle:
        while True:
            block = handle.read(1 << 20)
            if not block:
                break
            offset = 0
            while pos + len(block) > target:  # the cut falls in this block, at the next line end
                cut = block.find(b"\n", max(offset, target - pos))
                if cut < 0:
                    break  # no line end before the block's end: the next block has it
                line_ends += block.count(b"\n", offset, cut + 1)
                offset = cut + 1
                ranges.append((start, pos + offset, first_line))
                start, first_line = pos + offset, line_ends + 1
                target = start + partition_bytes
            line_ends += block.count(b"\n", offset)
            pos += len(block)
    if start < size or not ranges:
        ranges.append((start, size, first_line))
    return ranges


def read_range(path: str, name: str, start: int, end: int, first_line: int) -> list:
    """The entries whose first line starts in [start, end) of a log."""
    handle = open(path, "rb")
    handle.seek(start)
    state = {"first": first_line}

    def lines():
        pos = start
        leading = start > 0
        for raw in handle:
            at = pos
            pos += len(raw)
            text = raw.decode("utf-8", "replace").rstrip("\r\n")
            if leading and text.startswith("\t"):
                state["first"] += 1  # the tail of the range before's entry
                continue
            if leading:
                leading = False
                yield None  # a marker: the leading continuation lines are behind
            if at >= end and not text.startswith("\t"):
                return
            yield text

    with handle:
        stream = lines()
        if start > 0:
            next(stream, None)  # past the leading continuation lines: now the first line is known
        return list(read_log_lines(stream, name, state["first"]))


FILES_PER_TASK = 16


def read_tasks(path: str | os.PathLike, partition_bytes: int = 1 << 20) -> list[tuple]:
    """The reading of `path` cut into tasks a process can do alone: a byte range of a log, or a
    group of plan files. Each task's last item is its size in bytes (for a progress bar)."""
    root = Path(path)
    if not root.exists():
        raise PlanviewError(f"{os.fspath(path)}: no such file or folder")
    tasks = []
    plain = []
    for file in iter_files(root):
        name = str(file.relative_to(root)) if root.is_dir() else str(file)
        if looks_like_log(file):
            for start, end, first in log_ranges(file, partition_bytes):
                tasks.append(("log", str(file.resolve()), name, start, end, first, end - start))
        else:
            plain.append(file)
    base = str(root.resolve()) if root.is_dir() else None
    for i in range(0, len(plain), FILES_PER_TASK):
        group = plain[i:i + FILES_PER_TASK]
        tasks.append(("files", [str(p.resolve()) for p in group], base, sum(_size(p) for p in group)))
    return tasks


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError:
        return 0


def read_task(task) -> list:
    """The entries (and unreadables) of one task from `read_tasks`."""
    if task[0] == "log":
        _, path, name, start, end, first, _size = task
        return read_range(path, name, start, end, first)
    _, paths, base, _size = task
    out = []
    for p in paths:
        for item in iter_entries(p):
            item.source = os.path.relpath(p, base) if base else p
            out.append(item)
    return out
