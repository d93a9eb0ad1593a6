"""What every engine's live backend shares: its connection, closed only when the session opened it."""

from __future__ import annotations


class Backend:
    def __init__(self, conn, *, owns: bool, dsn: str | None = None):
        self.conn = conn
        self.owns = owns
        """The session opened the connection (from a DSN), so it closes it; a caller's stays open."""
        self.dsn = dsn

    def close(self) -> None:
        if self.owns:
            try:
                self.conn.close()
            except Exception:  # closing a broken connection: nothing left to release
                pass
