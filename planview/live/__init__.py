"""The live review: run a statement on a connection, read its plan, and (where the engine has
them) re-derive the estimates and measure the data behind each origin.

Caution: EXPLAIN ANALYZE really runs the statement. Run the live review on a replica or a
copy. planview refuses statements that may change data unless writes are allowed, runs each
in a transaction that is always rolled back (READ ONLY on PostgreSQL unless writes are
allowed), with a statement and a lock timeout; no password reaches any message.

``planview.connect(target)`` gives a `Session` (PostgreSQL through psycopg 3, or DuckDB);
``session.review(sql, params)`` gives the `Plan`; ``session.prove(finding)`` tries its fix.
"""

from __future__ import annotations

from .safety import RefusedStatement, classify
from .session import CAUTION, Session, connect

__all__ = ["CAUTION", "RefusedStatement", "Session", "classify", "connect"]
