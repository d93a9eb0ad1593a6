"""The batch on a Dask cluster: a bag of entries in, a Dask dataframe out, Parquet in partitions.

A server log is cut into byte ranges on line starts; each range is read where it runs (the
file must be reachable from the workers at the same path: a shared file system or object
store path on a real cluster). A range skips the continuation lines it starts in the middle
of (they belong to the range before) and reads on past its end until the entry it is in
finishes, so every entry is read exactly once. A plan file is an entry of its own. Each
partition is reviewed with the same pure `review_entry` as on one machine, and comes back as
one typed pandas frame, so every Parquet partition has the same schema.

``scheduler``: ``"local"`` starts a LocalCluster with a worker process per core on this machine;
anything else is a scheduler address (``tcp://host:8786``) handed to ``distributed.Client``.
"""

from __future__ import annotations

import os
from pathlib import Path

from ..errors import PlanviewError
from .batch import BatchTotals, review_items, rows_frame, table_frame
from .logread import read_task, read_tasks

PARTITION_BYTES = 32 << 20
"""A log range a partition (each a task on a worker)."""


def _review_partition(items, threshold: float):
    built = review_items(items, threshold)
    stats = {"entries": built.entries, "queries": built.queries, "nodes": built.nodes,
             "origins": built.origins, "worst": built.worst_q_error}
    return [(table_frame(built.table()), built.unreadable, stats)]


def entry_bag(path, partition_bytes: int = PARTITION_BYTES):
    """A Dask bag of the entries under `path` (Entry or Unreadable items), a partition a range."""
    import dask
    import dask.bag as db

    return db.from_delayed([dask.delayed(read_task)(t) for t in read_tasks(path, partition_bytes)])


def batch_frame(path, *, threshold: float = 10.0, partition_bytes: int = PARTITION_BYTES):
    """(Dask dataframe of the batch's rows, delayed unreadable lists, delayed partition stats)."""
    import dask
    import dask.dataframe as dd

    reviewed = entry_bag(path, partition_bytes).map_partitions(_review_partition, threshold).to_delayed()
    frames = [dask.delayed(lambda p: p[0][0])(part) for part in reviewed]
    bad = [dask.delayed(lambda p: p[0][1])(part) for part in reviewed]
    stats = [dask.delayed(lambda p: p[0][2])(part) for part in reviewed]
    return dd.from_delayed(frames, meta=rows_frame([]), verify_meta=False), bad, stats


def _client(scheduler: str):
    from distributed import Client, LocalCluster

    if scheduler == "local":
        from .batch import default_workers

        cluster = LocalCluster(n_workers=default_workers(), threads_per_worker=1, processes=True,
                               dashboard_address=None)
        return Client(cluster), cluster
    return Client(scheduler), None


def _review_and_write(task, folder: str, number: int, threshold: float):
    """One task read, reviewed and written as one Parquet file of the shared schema, all on the
    worker that runs it: only its unreadables and counts come back (no frame crosses the cluster)."""
    import pyarrow.parquet as pq

    built = review_items(read_task(task), threshold)
    pq.write_table(built.table(), os.path.join(folder, f"part.{number:05d}.parquet"))
    return built.unreadable, {"entries": built.entries, "queries": built.queries, "nodes": built.nodes,
                              "origins": built.origins, "worst": built.worst_q_error}


def dask_batch(path, out, *, scheduler: str = "local", threshold: float = 10.0,
               partition_bytes: int = PARTITION_BYTES, client=None) -> BatchTotals:
    """Review `path` on a Dask cluster; write the rows to the folder `out`, a Parquet file a
    partition, each read, reviewed and written by one worker in one task (the same per-entry
    review as `batch_frame`'s bag; nothing but counts and unreadable entries comes back)."""
    import dask

    folder = os.fspath(out)
    if os.path.isfile(folder):
        raise PlanviewError(f"--out {folder}: with --dask this is a folder of Parquet partitions, not a file")
    os.makedirs(folder, exist_ok=True)
    for old in Path(folder).glob("part.*.parquet"):
        old.unlink()
    own = None
    if client is None:
        client, own = _client(scheduler)
    try:
        writes = [dask.delayed(_review_and_write)(task, folder, i, threshold)
                  for i, task in enumerate(read_tasks(path, partition_bytes))]
        results = dask.compute(*writes)
    finally:
        if own is not None:
            client.close()
            own.close()
    totals = BatchTotals()
    for bad, s in results:
        totals.entries += s["entries"]
        totals.queries += s["queries"]
        totals.nodes += s["nodes"]
        totals.origins += s["origins"]
        totals.worst_q_error = max(totals.worst_q_error, s["worst"])
        totals.unreadable.extend(bad)
    return totals
