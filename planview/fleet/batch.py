"""Many plans at once: a server log or a folder into one table, one row per node and per query.

The review of one entry is a pure function (`review_entry`) of the entry's text: the
single-plan review (`planview.load`) and a flattening of its report into rows. So the work is
spread over processes here, and over a Dask cluster in `planview.fleet.dask_run`, without either
knowing more than that function.

Memory: the entries are read as a stream (`planview.fleet.logread`), at most a few chunks of them
are in flight at a time, and `write_batch` appends each chunk's rows to the Parquet or CSV file
as it comes back, so its memory stays flat however long the log; `batch()` returns a
DataFrame, which of course holds every row.
"""

from __future__ import annotations

import hashlib
import os
import re
import sys
from collections import deque
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from typing import Any, Iterator

from ..errors import PlanviewError
from .logread import Entry, Unreadable, fingerprint, input_bytes, iter_tasks, read_task

# the table's columns, in order, with their Arrow types (one schema for every chunk)
COLUMNS: tuple[tuple[str, str], ...] = (
    ("row", "string"),            # "query" or "node"
    ("query_id", "string"),       # file:line of the entry
    ("fingerprint", "string"),
    ("source", "string"),
    ("line", "int64"),
    ("log_time", "string"),
    ("pid", "int64"),
    ("duration_ms", "float64"),
    ("engine", "string"),
    ("format", "string"),
    ("statement", "int64"),
    ("node", "int64"),
    ("parent", "int64"),
    ("position", "string"),       # child indexes from the root, "0.1.0"
    ("depth", "int64"),
    ("operator", "string"),
    ("relation", "string"),
    ("schema", "string"),
    ("alias", "string"),
    ("index_name", "string"),
    ("est_rows", "float64"),
    ("actual_rows", "float64"),
    ("starts", "float64"),
    ("est_total", "float64"),
    ("actual_total", "float64"),
    ("q_error", "float64"),
    ("own_q_error", "float64"),
    ("judged", "bool"),
    ("origin", "bool"),
    ("direction", "string"),
    ("cause", "string"),
    ("confidence", "float64"),
    ("table", "string"),
    ("columns", "string"),
    ("fix", "string"),
    ("caution", "string"),
    ("actual_total_ms", "float64"),
    ("impact_ms", "float64"),
    # per query
    ("query_text", "string"),
    ("shape", "string"),          # a digest of the tree's operators and relations
    ("nodes", "int64"),
    ("judged_nodes", "int64"),
    ("origins", "int64"),
    ("worst_q_error", "float64"),
    ("execution_ms", "float64"),
)
COLUMN_NAMES = tuple(name for name, _ in COLUMNS)


def _position_paths(nodes: list[dict]) -> list[str]:
    """Each node's place as child indexes from its statement's root ("0.1.0"); nodes come in
    pre-order, so a parent's place is known before its children's."""
    paths = [""] * len(nodes)
    for node in nodes:
        if node["parent"] is None:
            paths[node["id"]] = str(node["statement"])
        for i, child in enumerate(node["children"]):
            paths[child] = f"{paths[node['id']]}.{i}"
    return paths


def shape_of(nodes: list[dict]) -> str:
    """A digest of the tree's shape: each node's place, operator and relation."""
    paths = _position_paths(nodes)
    digest = hashlib.sha1()
    for node, path in zip(nodes, paths):
        digest.update(f"{path}|{node['operator']}|{node.get('relation') or ''}\n".encode())
    return digest.hexdigest()[:16]


_QUERY_ONLY = ("query_text", "shape", "nodes", "judged_nodes", "origins", "worst_q_error", "execution_ms")
_COMMON = ("query_id", "fingerprint", "source", "line", "log_time", "pid", "duration_ms", "engine", "format")
_NODE_KEYS = (("statement", "statement"), ("node", "id"), ("parent", "parent"), ("depth", "depth"),
              ("operator", "operator"), ("relation", "relation"), ("schema", "schema"), ("alias", "alias"),
              ("index_name", "index"), ("est_rows", "est_rows"), ("actual_rows", "actual_rows"),
              ("starts", "starts"), ("est_total", "est_total"), ("actual_total", "actual_total"),
              ("q_error", "q_error"), ("actual_total_ms", "actual_total_ms"))
_FINDING_ONLY = ("own_q_error", "direction", "cause", "confidence", "table", "columns", "fix", "caution",
                 "impact_ms")


class RowColumns:
    """The batch table being built a column at a time: a list per column, the query row of an
    entry and then its nodes. A worker fills one and sends back the Arrow table made from it,
    so no row dictionary is built and only typed columns cross between processes."""

    def __init__(self):
        self.columns: dict[str, list] = {name: [] for name in COLUMN_NAMES}
        self.entries = 0
        self.queries = 0
        self.nodes = 0
        self.origins = 0
        self.worst_q_error = 1.0
        self.unreadable: list[Unreadable] = []

    def add(self, item, threshold: float = 10.0) -> None:
        """Review one entry (an Unreadable is only counted) and append its rows."""
        if isinstance(item, Unreadable):
            self.unreadable.append(item)
            return
        self.entries += 1
        bad = self._append(item, threshold)
        if bad is not None:
            self.unreadable.append(bad)

    def _append(self, entry: Entry, threshold: float) -> Unreadable | None:
        from ..errors import PlanParseError
        from ..plan import load

        try:
            plan = load(entry.text, engine=entry.engine, fmt=entry.fmt, threshold=threshold)
        except PlanParseError as exc:
            line = entry.line
            if getattr(exc, "line", None) and not entry.one_line_record:
                line = (entry.text_line or entry.line) + exc.line - 1
            return Unreadable(entry.source, line, str(exc))
        except Exception as exc:  # one bad entry never stops the batch; the reason is kept
            return Unreadable(entry.source, entry.line, f"internal error ({type(exc).__name__}: {exc})")
        report = plan.report()
        nodes = report["nodes"]
        statements = report["statements"]
        findings = {f["node"]: f for f in report["findings"]}
        query_text = entry.query_text or next((s["query_text"] for s in statements if s.get("query_text")), None)
        common = (entry.query_id, fingerprint(query_text), entry.source, entry.line, entry.log_time, entry.pid,
                  entry.duration_ms, report["engine"], report["format"])
        worst = max((f["own_q_error"] for f in findings.values() if f["own_q_error"] is not None), default=None)
        query = dict(zip(_COMMON, common), row="query", query_text=query_text, shape=shape_of(nodes),
                     nodes=len(nodes), judged_nodes=sum(1 for n in nodes if n.get("judged")),
                     origins=len(findings), worst_q_error=worst,
                     execution_ms=next((s["execution_ms"] for s in statements
                                        if s.get("execution_ms") is not None), None))
        cols = self.columns
        for name in COLUMN_NAMES:
            cols[name].append(query.get(name))
        n = len(nodes)
        cols["row"].extend(["node"] * n)
        for name, value in zip(_COMMON, common):
            cols[name].extend([value] * n)
        for name in _QUERY_ONLY:
            cols[name].extend([None] * n)
        for name, key in _NODE_KEYS:
            cols[name].extend([node.get(key) for node in nodes])
        cols["position"].extend(_position_paths(nodes))
        cols["judged"].extend([bool(node.get("judged")) for node in nodes])
        cols["origin"].extend([bool(node.get("origin")) for node in nodes])
        own = {name: [None] * n for name in _FINDING_ONLY}
        for i, node in enumerate(nodes):
            found = findings.get(node["id"])
            if found is None:
                continue
            evidence = found.get("evidence") or {}
            columns = evidence.get("columns")
            own["own_q_error"][i] = found["own_q_error"]
            own["direction"][i] = found["direction"]
            own["cause"][i] = found["cause"]
            own["confidence"][i] = found["confidence"]
            own["table"][i] = evidence.get("table")
            own["columns"][i] = ",".join(columns) if isinstance(columns, list) else None
            own["fix"][i] = found.get("fix")
            own["caution"][i] = found.get("caution")
            own["impact_ms"][i] = (found.get("impact") or {}).get("ms")
        for name in _FINDING_ONLY:
            cols[name].extend(own[name])
        self.queries += 1
        self.nodes += n
        self.origins += len(findings)
        if worst is not None:
            self.worst_q_error = max(self.worst_q_error, worst)
        return None

    def table(self):
        import pyarrow as pa

        schema = arrow_schema()
        return pa.table([pa.array(self.columns[name], type=schema.field(name).type) for name in COLUMN_NAMES],
                        schema=schema)

    def rows(self) -> list[dict]:
        cols = [self.columns[name] for name in COLUMN_NAMES]
        return [dict(zip(COLUMN_NAMES, values)) for values in zip(*cols)]


def review_entry(entry: Entry, threshold: float = 10.0) -> list[dict[str, Any]] | Unreadable:
    """The rows of one entry (the query row first), or why it could not be read."""
    built = RowColumns()
    built.add(entry, threshold)
    return built.unreadable[0] if built.unreadable else built.rows()


def review_items(items, threshold: float = 10.0) -> RowColumns:
    """The rows of a list of entries (unreadables passed through), built as columns."""
    built = RowColumns()
    for item in items:
        built.add(item, threshold)
    return built


@dataclass
class Chunk:
    """One task's result: its rows as an Arrow table, what could not be read, and counts."""

    table: Any
    unreadable: list[Unreadable]
    entries: int
    queries: int
    nodes: int
    origins: int
    worst_q_error: float
    size: int = 0

    def rows(self) -> list[dict]:
        return self.table.to_pylist()


def review_task(task, threshold: float = 10.0) -> Chunk:
    """Read one task (a log range, a group of plan files) and review it, all in this process:
    only the Arrow table and the counts go back to the process that asked."""
    built = review_items(read_task(task), threshold)
    return Chunk(table=built.table(), unreadable=built.unreadable, entries=built.entries,
                 queries=built.queries, nodes=built.nodes, origins=built.origins,
                 worst_q_error=built.worst_q_error, size=task[-1])


def default_workers() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


TASK_BYTES_MIN = 256 << 10
TASK_BYTES_MAX = 4 << 20
"""A log is cut into ranges, each read and reviewed by one process: about an eighth of the
input per worker, between these bounds. Large enough that a task's fixed costs (a result
sent back, an Arrow table built) are small beside its reviews; small enough that the last
tasks leave no worker idle for long."""


def task_size(total_bytes: int, workers: int) -> int:
    return int(min(TASK_BYTES_MAX, max(TASK_BYTES_MIN, total_bytes // max(1, 8 * workers))))


def run_batch(path, *, workers: int | None = None, threshold: float = 10.0, progress: bool | None = None,
              task_bytes: int | None = None) -> Iterator[Chunk]:
    """Review every entry under `path`; yields a `Chunk` per task, in the log's order.

    This process only cuts the input into tasks (byte ranges of a log on line starts, groups
    of plan files), handing each on as soon as it is cut; each worker reads its own range,
    reviews it and returns an Arrow table. At most ``2 × workers`` tasks are in flight, so
    memory stays flat however long the log."""
    if not (isinstance(threshold, (int, float)) and threshold > 1):
        raise PlanviewError(f"threshold must be a q-error above 1, got {threshold!r}")
    total = input_bytes(path)
    workers = default_workers() if workers is None else max(1, int(workers))
    if task_bytes is None:
        task_bytes = task_size(total, workers)
    if total <= task_bytes:
        workers = 1
    tasks = iter_tasks(path, task_bytes)
    bar = _progress(total, progress)
    try:
        if workers == 1:
            for task in tasks:
                chunk = review_task(task, threshold)
                bar.update(chunk.size)
                yield chunk
            return
        with ProcessPoolExecutor(max_workers=workers) as pool:
            flight: deque = deque()
            for task in tasks:
                flight.append(pool.submit(review_task, task, threshold))
                while len(flight) >= 2 * workers:
                    chunk = flight.popleft().result()
                    bar.update(chunk.size)
                    yield chunk
            while flight:
                chunk = flight.popleft().result()
                bar.update(chunk.size)
                yield chunk
    finally:
        bar.close()


class _NoBar:
    def update(self, n):
        pass

    def close(self):
        pass


def _progress(total_bytes: int, progress: bool | None):
    """tqdm on standard error for a long run (over 1 MB of input), unless told otherwise."""
    if progress is None:
        progress = sys.stderr.isatty() and total_bytes > 1_000_000
    if not progress:
        return _NoBar()
    from tqdm import tqdm

    return tqdm(total=total_bytes, unit="B", unit_scale=True, desc="planview batch", file=sys.stderr,
                mininterval=0.5)


def rows_frame(rows: list[dict], unreadable: list[Unreadable] | None = None):
    """The rows as a pandas DataFrame with every column, typed (missing values as NA)."""
    import pandas as pd

    frame = pd.DataFrame.from_records(rows, columns=list(COLUMN_NAMES))
    for name, kind in COLUMNS:
        if kind == "int64":
            frame[name] = frame[name].astype("Int64")
        elif kind == "float64":
            frame[name] = frame[name].astype("Float64")
        elif kind == "bool":
            frame[name] = frame[name].astype("boolean")
        else:
            frame[name] = frame[name].astype("string")
    frame.attrs["unreadable"] = [str(u) for u in (unreadable or [])]
    return frame


def batch(path, *, workers: int | None = None, threshold: float = 10.0, progress: bool | None = False,
          task_bytes: int | None = None):
    """Review every plan under `path` (a server log with auto_explain output, a plan file, or a
    folder of either) into one pandas DataFrame: one row a query (``row == "query"``) and one
    row a node (``row == "node"``). Entries that could not be read are listed, with file and
    line, in ``frame.attrs["unreadable"]``."""
    import pyarrow as pa

    tables, bad = [], []
    for chunk in run_batch(path, workers=workers, threshold=threshold, progress=progress,
                           task_bytes=task_bytes):
        tables.append(chunk.table)
        bad.extend(chunk.unreadable)
    return table_frame(pa.concat_tables(tables) if tables else arrow_table([]), bad)


def table_frame(table, unreadable=None):
    """An Arrow table of batch rows as a pandas DataFrame with nullable types."""
    import pandas as pd
    import pyarrow as pa

    mapping = {pa.string(): pd.StringDtype(), pa.int64(): pd.Int64Dtype(), pa.float64(): pd.Float64Dtype(),
               pa.bool_(): pd.BooleanDtype()}
    frame = table.to_pandas(types_mapper=mapping.get)
    frame.attrs["unreadable"] = [str(u) for u in (unreadable or [])]
    return frame


def arrow_schema():
    import pyarrow as pa

    types = {"string": pa.string(), "int64": pa.int64(), "float64": pa.float64(), "bool": pa.bool_()}
    return pa.schema([(name, types[kind]) for name, kind in COLUMNS])


def arrow_table(rows: list[dict]):
    import pyarrow as pa

    schema = arrow_schema()
    return pa.table({name: pa.array([r.get(name) for r in rows], type=schema.field(name).type)
                     for name in COLUMN_NAMES}, schema=schema)


CSV_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
"""A spreadsheet reads a cell beginning with one of these as a formula (OWASP, "CSV Injection":
prefix such a cell with a single quote so it is shown as text)."""


def csv_safe(frame):
    """The frame with each text cell that begins with a formula character prefixed by a single
    quote, for a spreadsheet opening the .csv. Only text columns: numbers stay numbers (a
    negative number is not a formula), and the Parquet output keeps every value as it is."""
    frame = frame.copy()
    pattern = "^(?:" + "|".join(re.escape(c) for c in CSV_FORMULA_START) + ")"
    for name, kind in COLUMNS:
        if kind != "string":
            continue
        column = frame[name]
        risky = column.str.contains(pattern, regex=True, na=False)
        if risky.any():
            frame[name] = column.where(~risky, "'" + column)
    return frame


ROW_GROUP_ROWS = 65_536
"""Rows gathered before a Parquet row group is written (a task's table is far smaller)."""


@dataclass
class BatchTotals:
    entries: int = 0
    queries: int = 0
    nodes: int = 0
    origins: int = 0
    worst_q_error: float = 1.0
    unreadable: list[Unreadable] = field(default_factory=list)


def write_batch(path, out, *, workers: int | None = None, threshold: float = 10.0,
                progress: bool | None = None, on_unreadable=None, keep=None) -> BatchTotals:
    """Review `path` and write the table to `out` (``.parquet`` through pyarrow, ``.csv``), a chunk
    at a time. `on_unreadable` is called with each unreadable entry as it is found; `keep`, when
    given, is handed each chunk's rows (the summary keeps what it needs from them)."""
    out = os.fspath(out)
    kind = "csv" if out.lower().endswith(".csv") else "parquet" if out.lower().endswith((".parquet", ".pq")) else None
    if kind is None:
        raise PlanviewError(f"--out {out}: the file name must end in .parquet or .csv")
    import pyarrow as pa

    totals = BatchTotals()
    writer = None
    first = True
    waiting: list = []  # tables held back until a row group's worth
    waiting_rows = 0
    try:
        if kind == "parquet":
            import pyarrow.parquet as pq

            writer = pq.ParquetWriter(out, arrow_schema())
        for chunk in run_batch(path, workers=workers, threshold=threshold, progress=progress):
            totals.entries += chunk.entries
            totals.queries += chunk.queries
            totals.nodes += chunk.nodes
            totals.origins += chunk.origins
            totals.worst_q_error = max(totals.worst_q_error, chunk.worst_q_error)
            for item in chunk.unreadable:
                totals.unreadable.append(item)
                if on_unreadable:
                    on_unreadable(item)
            if keep is not None:
                keep(chunk.rows())
            if not chunk.table.num_rows:
                continue
            if writer is not None:
                waiting.append(chunk.table)
                waiting_rows += chunk.table.num_rows
                if waiting_rows >= ROW_GROUP_ROWS:
                    writer.write_table(pa.concat_tables(waiting))
                    waiting, waiting_rows = [], 0
            else:
                csv_safe(table_frame(chunk.table)).to_csv(out, mode="w" if first else "a", header=first,
                                                          index=False)
            first = False
        if writer is not None and waiting:
            writer.write_table(pa.concat_tables(waiting))
        if kind == "csv" and first:
            rows_frame([]).to_csv(out, index=False)
    finally:
        if writer is not None:
            writer.close()
    return totals
