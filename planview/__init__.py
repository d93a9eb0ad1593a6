"""planview: review query plans, estimated against actual rows, operator by operator."""

from __future__ import annotations

from .errors import PlanParseError, PlanviewError, ProbeError
from .magic import load_ipython_extension, review  # noqa: F401  (the notebook entry points)
from .model import Condition, Finding, PlanNode
from .plan import Plan, load


def batch(path, **options):
    """Every plan in a server log or a folder as one pandas DataFrame (see `planview.fleet.batch`)."""
    from .fleet.batch import batch as _batch

    return _batch(path, **options)


def connect(target, **options):
    """A live session on a PostgreSQL connection string, a psycopg 3 connection, a DuckDB
    connection or ``duckdb:///path`` (see `planview.live.connect`). EXPLAIN ANALYZE really
    runs the statement: use a replica or a copy."""
    from .live import connect as _connect

    return _connect(target, **options)


def compare(before, after, **options):
    """Two plans of the same query compared node by node (see `planview.fleet.compare`)."""
    from .fleet.compare import compare as _compare

    return _compare(before, after, **options)

__all__ = ["Condition", "Finding", "Plan", "PlanNode", "PlanParseError", "PlanviewError",
           "ProbeError", "batch", "compare", "connect", "load"]
__version__ = "0.1.0"
