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

A csvlog or a jsonlog (``log_destination = 'csvlog'`` / ``'jsonlog'``) is read the same way, a
record at a time: the csv module over the file for the one, a JSON object a line for the other;
the kind of log is told by its first record (`log_kind`).
"""

from __future__ import annotations

import csv
import hashlib
import json
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
_LOG_SUFFIXES = (".log", ".csv")  # read only as a server log (stderr-style or csvlog), never as a plan
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
    one_line_record: bool = False   # a jsonlog record: the whole entry is on its `line`

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


def _opened(path, source: str):
    """The log opened for reading, or None after yielding the one Unreadable that says why
    (``handle = yield from _opened(path, source)`` in a reading generator)."""
    try:
        return open(path, "rb")
    except OSError as exc:
        yield Unreadable(source, None, f"cannot read: {exc.strerror or exc}")
        return None


def read_log(path: str | os.PathLike, *, name: str | None = None) -> Iterator[Entry | Unreadable]:
    """The entries of one server log, in order, as a stream (one entry in memory at a time)."""
    source = name or str(path)
    handle = yield from _opened(path, source)
    if handle is None:
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
    """The entry a stderr log's header line and continuation lines hold."""
    return _entry_from_lines(pending.line, pending.header, pending.ms, pending.lines, source,
                             pending.too_big)


def _entry_from_lines(first_line: int, header: str, duration_ms: float, lines: list[str], source: str,
                      too_big: bool = False) -> Entry | Unreadable:
    pending = _Pending(first_line, header, duration_ms)
    pending.lines, pending.too_big = lines, too_big
    return _read_pending(pending, source)


def _read_pending(pending: _Pending, source: str) -> Entry | Unreadable:
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
# csvlog and jsonlog (log_destination = 'csvlog', 'jsonlog')
# ---------------------------------------------------------------------------------------
# The server writes each message as one record: csvlog a CSV row whose message field holds
# the entry's lines unindented (a quoted field may span lines), jsonlog one JSON object a line
# with the message under "message". The record's own fields give the time and the process,
# so no log_line_prefix is involved. The field order of csvlog is the PostgreSQL manual's
# (section "Using CSV-Format Log Output"; PostgreSQL 13 added backend_type, 14 leader_pid and
# query_id at the end); the jsonlog keys are the manual's table of them (PostgreSQL 15+).

_MESSAGE = re.compile(r"duration: (?P<ms>\d+(?:\.\d+)?) ms\s+plan:[ \t]*(?:\n|$)")
_CSV_TIME, _CSV_PID, _CSV_SEVERITY, _CSV_MESSAGE, _CSV_QUERY_ID = 0, 3, 11, 13, 25
_CSV_MIN_FIELDS = 23
_CSV_START = re.compile(r"^\d{4}-\d\d-\d\d \d\d:\d\d:\d\d(?:\.\d+)?(?: \S+)?,")
_JSON_START = re.compile(r'^\{"timestamp":"\d{4}-\d\d-\d\d')
_SEVERITIES = {"LOG", "INFO", "NOTICE", "WARNING", "ERROR", "FATAL", "PANIC", "DEBUG", "DEBUG1",
               "DEBUG2", "DEBUG3", "DEBUG4", "DEBUG5", "STATEMENT", "DETAIL", "HINT", "CONTEXT"}


def log_kind(path: str | os.PathLike) -> str | None:
    """"stderr", "csvlog" or "jsonlog" when the file is a server log of that kind, else None.

    A csvlog or jsonlog is known by its first record's shape (any log of that kind is read, an
    entry or none); a stderr log by an auto_explain entry's first line in its first 64 KB."""
    try:
        with open(path, "rb") as handle:
            head = handle.read(_SNIFF_BYTES).decode("utf-8", "replace")
    except OSError:
        return None
    first = head.split("\n", 1)[0]
    if _JSON_START.match(first):
        return "jsonlog"
    if _CSV_START.match(first):
        try:
            record = next(csv.reader([head] if "\n" not in head else _lines_with_ends(head)))
        except (csv.Error, StopIteration):
            record = []
        if len(record) > _CSV_SEVERITY and record[_CSV_SEVERITY] in _SEVERITIES:  # a long first
            # record may be cut at 64 KB, but its severity comes before the message
            return "csvlog"
    if any(_HEADER.search(line) for line in head.splitlines()):
        return "stderr"
    return None


def _lines_with_ends(text: str) -> Iterator[str]:
    return iter(text.splitlines(keepends=True))


def _record_entry(source: str, line: int, message: str, log_time, pid, query_id,
                  one_line: bool) -> Entry | Unreadable | None:
    """The entry a csvlog or jsonlog message holds, or None when it is not auto_explain's."""
    match = _MESSAGE.match(message)
    if not match:
        return None
    if len(message) > MAX_ENTRY_BYTES:
        return Unreadable(source, line, f"entry over the {MAX_ENTRY_BYTES / 1e6:.0f} MB limit; skipped unread")
    body = message[match.end():]
    lines = body.split("\n") if body else []
    while lines and not lines[-1].strip():
        lines.pop()
    entry = _entry_from_lines(line, "", float(match.group("ms")), lines, source)
    if isinstance(entry, Entry):
        entry.log_time = log_time or None
        try:
            entry.pid = int(pid) if pid not in (None, "") else None
        except (TypeError, ValueError):
            entry.pid = None
        if not entry.query_identifier and query_id not in (None, "", 0, "0"):
            entry.query_identifier = str(query_id)
        entry.one_line_record = one_line
        if one_line:
            entry.text_line = line
    return entry


def _raw_lines(handle, start: int, end: int | None):
    """(byte offset, decoded line with its end) of each line from `start` whose start is before
    `end`; a line longer than the entry limit is cut there (the reader then reports it)."""
    pos = start
    while end is None or pos < end:
        raw = handle.readline(MAX_ENTRY_BYTES + 2)
        if not raw:
            return
        at = pos
        pos += len(raw)
        if len(raw) > MAX_ENTRY_BYTES and not raw.endswith(b"\n"):
            while True:  # the rest of the over-long line, dropped unread
                more = handle.readline(1 << 20)
                pos += len(more)
                if not more or more.endswith(b"\n"):
                    break
            yield at, None
            continue
        yield at, raw.decode("utf-8", "replace")


def read_csvlog(path: str | os.PathLike, *, name: str | None = None, start: int = 0, end: int | None = None,
                first_line: int = 1) -> Iterator[Entry | Unreadable]:
    """The auto_explain entries of a csvlog, as a stream: the csv module reads one record at a
    time from the file. With `start`/`end`, only the records that begin in that byte range
    (`start` must be a record's first byte: `iter_log_ranges` cuts only where the quotes balance)."""
    source = name or str(path)
    handle = yield from _opened(path, source)
    if handle is None:
        return
    csv.field_size_limit(max(csv.field_size_limit(), MAX_ENTRY_BYTES + 1))
    state = {"lines": 0, "fresh": True, "too_long": None}

    def lines():
        for at, text in _raw_lines(handle, start, None):
            if end is not None and at >= end and state["fresh"]:
                return  # a new record would begin past the range: the next range's
            state["fresh"] = False
            state["lines"] += 1
            if text is None:  # an over-long line: dropped, its record reported
                state["too_long"] = state["too_long"] or first_line + state["lines"] - 1
                text = "\n"
            yield text

    with handle:
        handle.seek(start)
        reader = csv.reader(lines())
        while True:
            line = first_line + state["lines"]
            state["fresh"] = True
            try:
                record = next(reader)
            except StopIteration:
                return
            except csv.Error as exc:
                state["too_long"] = None
                yield Unreadable(source, line, f"not a csvlog record ({exc})")
                continue
            if state["too_long"] is not None:
                state["too_long"] = None
                yield Unreadable(source, line, f"a record over the {MAX_ENTRY_BYTES / 1e6:.0f} MB limit; "
                                               "skipped unread")
                continue
            if len(record) < _CSV_MIN_FIELDS:
                if _MESSAGE.search(",".join(record)):
                    yield Unreadable(source, line, f"a csvlog record of {len(record)} fields "
                                                   f"(cut short?); an entry has at least {_CSV_MIN_FIELDS}")
                continue
            item = _record_entry(source, line, record[_CSV_MESSAGE], record[_CSV_TIME], record[_CSV_PID],
                                 record[_CSV_QUERY_ID] if len(record) > _CSV_QUERY_ID else None, one_line=False)
            if item is not None:
                yield item


def read_jsonlog(path: str | os.PathLike, *, name: str | None = None, start: int = 0, end: int | None = None,
                 first_line: int = 1) -> Iterator[Entry | Unreadable]:
    """The auto_explain entries of a jsonlog (one JSON object a line), as a stream; with
    `start`/`end`, the lines that begin in that byte range."""
    source = name or str(path)
    handle = yield from _opened(path, source)
    if handle is None:
        return
    with handle:
        handle.seek(start)
        for number, (_at, text) in enumerate(_raw_lines(handle, start, end), first_line):
            if text is None:
                yield Unreadable(source, number, f"a record over the {MAX_ENTRY_BYTES / 1e6:.0f} MB limit; "
                                                 "skipped unread")
                continue
            if not text.strip():
                continue
            try:
                record = json.loads(text)
            except ValueError as exc:
                if '"message":"duration: ' in text:
                    yield Unreadable(source, number, f"a jsonlog record that is not whole JSON (cut short?): "
                                                     f"{exc.msg} (column {exc.colno})")
                continue
            if not isinstance(record, dict) or not isinstance(record.get("message"), str):
                continue
            item = _record_entry(source, number, record["message"], record.get("timestamp"), record.get("pid"),
                                 record.get("query_id"), one_line=True)
            if item is not None:
                yield item


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
        kind = log_kind(file)
        if kind is not None:
            yield from _LOG_READERS[kind](file, name=name)
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

def iter_log_ranges(path: str | os.PathLike, partition_bytes: int = 1 << 20,
                    quoted: bool = False) -> Iterator[tuple[int, int, int]]:
    """(start, end, first line number) of each range, every start on a line start, each
    handed on as soon as it is found (one pass over the file counting line ends, 1 MB at a
    time). `quoted` (a csvlog): cut only at a line end outside a quoted field, that is where the
    count of double quotes so far is even (a quote inside a field is written doubled)."""
    size = os.path.getsize(path)
    start, first_line, line_ends, quotes, pos = 0, 1, 0, 0, 0
    target = partition_bytes
    cut_any = False
    with open(path, "rb") as handle:
        while True:
            block = handle.read(1 << 20)
            if not block:
                break
            offset = 0  # line ends and quotes are counted up to here
            while pos + len(block) > target:  # the cut falls in this block, at the next line end
                cut = block.find(b"\n", max(offset, target - pos))
                if cut < 0:
                    break  # no line end before the block's end: the next block has it
                line_ends += block.count(b"\n", offset, cut + 1)
                if quoted:
                    quotes += block.count(b'"', offset, cut + 1)
                offset = cut + 1
                if quoted and quotes % 2:
                    target = pos + offset  # inside a quoted field: try the next line end
                    continue
                yield (start, pos + offset, first_line)
                cut_any = True
                start, first_line = pos + offset, line_ends + 1
                target = start + partition_bytes
            line_ends += block.count(b"\n", offset)
            if quoted:
                quotes += block.count(b'"', offset)
            pos += len(block)
    if start < size or not cut_any:
        yield (start, size, first_line)


def log_ranges(path: str | os.PathLike, partition_bytes: int = 1 << 20) -> list[tuple[int, int, int]]:
    return list(iter_log_ranges(path, partition_bytes))


def read_range(path: str, name: str, start: int, end: int, first_line: int) -> list:
    """The entries whose first line starts in [start, end) of a stderr log."""
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


_LOG_READERS = {"stderr": read_log, "csvlog": read_csvlog, "jsonlog": read_jsonlog}

FILES_PER_TASK = 16


def iter_tasks(path: str | os.PathLike, partition_bytes: int = 1 << 20) -> Iterator[tuple]:
    """The reading of `path` cut into tasks a process can do alone, each handed on as soon as
    it is cut: a byte range of a log (stderr, csvlog or jsonlog), or a group of plan files.
    Each task's last item is its size in bytes (for a progress bar)."""
    root = Path(path)
    if not root.exists():
        raise PlanviewError(f"{os.fspath(path)}: no such file or folder")
    plain = []
    for file in iter_files(root):
        name = str(file.relative_to(root)) if root.is_dir() else str(file)
        kind = log_kind(file)
        if kind is not None:
            for start, end, first in iter_log_ranges(file, partition_bytes, quoted=kind == "csvlog"):
                yield (kind, str(file.resolve()), name, start, end, first, end - start)
        else:
            plain.append(file)
    base = str(root.resolve()) if root.is_dir() else None
    for i in range(0, len(plain), FILES_PER_TASK):
        group = plain[i:i + FILES_PER_TASK]
        yield ("files", [str(p.resolve()) for p in group], base, sum(_size(p) for p in group))


def read_tasks(path: str | os.PathLike, partition_bytes: int = 1 << 20) -> list[tuple]:
    return list(iter_tasks(path, partition_bytes))


def input_bytes(path: str | os.PathLike) -> int:
    """The bytes under `path` (for a progress bar and the task size), from the file sizes only."""
    root = Path(path)
    if not root.exists():
        raise PlanviewError(f"{os.fspath(path)}: no such file or folder")
    return sum(_size(file) for file in iter_files(root))


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError:
        return 0


def read_task(task) -> list:
    """The entries (and unreadables) of one task from `iter_tasks`."""
    kind = task[0]
    if kind in _LOG_READERS:
        _, path, name, start, end, first, _size = task
        if kind == "stderr":
            return read_range(path, name, start, end, first)
        return list(_LOG_READERS[kind](path, name=name, start=start, end=end, first_line=first))
    _, paths, base, _size = task
    out = []
    for p in paths:
        for item in iter_entries(p):
            item.source = os.path.relpath(p, base) if base else p
            out.append(item)
    return out
