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
import sys
from collections import deque
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from typing import Any, Iterator

from ..errors import PlanviewError
from .logread import Entry, Unreadable, fingerprint, read_task, read_tasks

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


def review_entry(entry: Entry, threshold: float = 10.0) -> list[dict[str, Any]] | Unreadable:
    """The rows of one entry (the query row first), or why it could not be read."""
    from ..errors import PlanParseError
    from ..plan import load

    try:
        plan = load(entry.text, engine=entry.engine, fmt=entry.fmt, threshold=threshold)
    except PlanParseError as exc:
        line = entry.line
        if getattr(exc, "line", None):
            line = (entry.text_line or entry.line) + exc.line - 1
        return Unreadable(entry.source, line, str(exc))
    except Exception as exc:  # one bad entry never stops the batch; the reason is kept
        return Unreadable(entry.source, entry.line, f"internal error ({type(exc).__name__}: {exc})")
    report = plan.report()
    nodes = report["nodes"]
    findings = {f["node"]: f for f in report["findings"]}
    statements = report["statements"]
    query_text = entry.query_text or next((s["query_text"] for s in statements if s.get("query_text")), None)
    common = {
        "query_id": entry.query_id, "fingerprint": fingerprint(query_text), "source": entry.source,
        "line": entry.line, "log_time": entry.log_time, "pid": entry.pid,
        "duration_ms": entry.duration_ms, "engine": report["engine"], "format": report["format"],
    }
    paths = _position_paths(nodes)
    judged = [n for n in nodes if n.get("judged")]
    query = dict(common, row="query", query_text=query_text, shape=shape_of(nodes), nodes=len(nodes),
                 judged_nodes=len(judged), origins=len(findings),
                 worst_q_error=max((f["own_q_error"] for f in findings.values()), default=None),
                 execution_ms=next((s["execution_ms"] for s in statements
                                    if s.get("execution_ms") is not None), None))
    rows = [query]
    for node, path in zip(nodes, paths):
        found = findings.get(node["id"])
        evidence = (found or {}).get("evidence") or {}
        impact = (found or {}).get("impact") or {}
        columns = evidence.get("columns")
        rows.append(dict(
            common, row="node", statement=node["statement"], node=node["id"], parent=node["parent"],
            position=path, depth=node["depth"], operator=node["operator"], relation=node.get("relation"),
            schema=node.get("schema"), alias=node.get("alias"), index_name=node.get("index"),
            est_rows=node.get("est_rows"), actual_rows=node.get("actual_rows"), starts=node.get("starts"),
            est_total=node.get("est_total"), actual_total=node.get("actual_total"),
            q_error=node.get("q_error"), judged=bool(node.get("judged")), origin=bool(node.get("origin")),
            own_q_error=found["own_q_error"] if found else None,
            direction=found["direction"] if found else None,
            cause=found["cause"] if found else None,
            confidence=found["confidence"] if found else None,
            table=evidence.get("table") if found else None,
            columns=",".join(columns) if found and isinstance(columns, list) else None,
            fix=found.get("fix") if found else None, caution=found.get("caution") if found else None,
            actual_total_ms=node.get("actual_total_ms"), impact_ms=impact.get("ms"),
        ))
    return rows


def review_items(items, threshold: float = 10.0) -> tuple[list[dict], list[Unreadable], int]:
    """The rows of a list of entries (unreadables passed through), and how many entries there were."""
    rows: list[dict] = []
    bad: list[Unreadable] = []
    entries = 0
    for item in items:
        if isinstance(item, Unreadable):
            bad.append(item)
            continue
        entries += 1
        result = review_entry(item, threshold)
        if isinstance(result, Unreadable):
            bad.append(result)
        else:
            rows.extend(result)
    return rows, bad, entries


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
    rows, bad, entries = review_items(read_task(task), threshold)
    queries = [r for r in rows if r["row"] == "query"]
    return Chunk(table=arrow_table(rows), unreadable=bad, entries=entries, queries=len(queries),
                 nodes=len(rows) - len(queries), origins=sum(r["origins"] or 0 for r in queries),
                 worst_q_error=max((r["worst_q_error"] for r in queries if r["worst_q_error"] is not None),
                                   default=1.0), size=task[-1])


def default_workers() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


TASK_BYTES = 1 << 20
"""A log is cut into ranges of about this size, each read and reviewed by one process."""


def run_batch(path, *, workers: int | None = None, threshold: float = 10.0, progress: bool | None = None,
              task_bytes: int = TASK_BYTES) -> Iterator[Chunk]:
    """Review every entry under `path`; yields a `Chunk` per task, in the log's order. Each
    process reads its own byte range, and at most ``2 × workers`` tasks are in flight, so memory
    stays flat however long the log."""
    if not (isinstance(threshold, (int, float)) and threshold > 1):
        raise PlanviewError(f"threshold must be a q-error above 1, got {threshold!r}")
    tasks = read_tasks(path, task_bytes)
    workers = default_workers() if workers is None else max(1, int(workers))
    workers = min(workers, max(1, len(tasks)))
    bar = _progress(sum(t[-1] for t in tasks), progress)
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
          task_bytes: int = TASK_BYTES):
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
                table_frame(chunk.table).to_csv(out, mode="w" if first else "a", header=first, index=False)
            first = False
        if writer is not None and waiting:
            writer.write_table(pa.concat_tables(waiting))
        if kind == "csv" and first:
            rows_frame([]).to_csv(out, index=False)
    finally:
        if writer is not None:
            writer.close()
    return totals
