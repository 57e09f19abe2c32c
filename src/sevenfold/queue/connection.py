"""The queue database's connection: opened in WAL mode, and every transaction on it.

Every change is one ``BEGIN IMMEDIATE ... COMMIT`` transaction (:meth:`Connection.write`),
so a process killed at any moment leaves the database as it was before or after that
change, never between. With ``synchronous = FULL`` a committed change is on disk. While
another process holds the write lock, SQLite waits (busy timeout) and the transaction is
retried with backoff, so "database is locked" never reaches a user; only a lock held for
:data:`BUSY_DEADLINE` seconds raises a :class:`QueueError` that says so.
"""

from __future__ import annotations

import random
import sqlite3
import time
from typing import Callable, TypeVar

from ..errors import QueueError
from .home import Home, Timing
from .schema import SCHEMA, SCHEMA_VERSION

T = TypeVar("T")
C = TypeVar("C", bound="Connection")

BUSY_TIMEOUT_MS = 5_000  # SQLite's own wait for the lock, per attempt
BUSY_DEADLINE = 600.0  # s: give up on a lock held this long


def _busy(exc: sqlite3.OperationalError) -> bool:
    code = getattr(exc, "sqlite_errorcode", None)
    if code is not None:
        return (code & 0xFF) in (sqlite3.SQLITE_BUSY, sqlite3.SQLITE_LOCKED)
    text = str(exc).lower()
    return "locked" in text or "busy" in text


class Connection:
    """The database of a queue home, open; one per thread. The queue's operations are
    :class:`sevenfold.queue.db.Queue`'s."""

    def __init__(self, home: Home, timing: Timing | None = None, readonly: bool = False) -> None:
        """Open (and on first use create) the queue database.

        ``readonly``: open an existing database read-only (SQLite ``mode=ro``), for viewers;
        nothing is created, and any change raises :class:`QueueError`. In WAL mode a reader
        never blocks the writers.
        """
        self.home = home
        self.timing = timing or Timing.from_env()
        self.readonly = readonly
        if readonly and not home.db.is_file():
            raise QueueError(f"there is no queue in {str(home.root)!r} yet (no queue.db); "
                             "submit a job there first, or name another --home")
        try:
            if readonly:
                self._conn = sqlite3.connect(home.db.as_uri() + "?mode=ro", uri=True,
                                             timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None)
            else:
                self._conn = sqlite3.connect(
                    str(home.db), timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None
                )
        except sqlite3.Error as exc:
            raise QueueError(f"cannot open the queue database {str(home.db)!r}: {exc}") from None
        self._conn.row_factory = sqlite3.Row
        self._retry(self._check_readable if readonly else self._setup)

    # ---------------------------------------------------------------- transactions
    def _setup(self) -> None:
        c = self._conn
        c.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        mode = c.execute("PRAGMA journal_mode = WAL").fetchone()[0]
        if str(mode).lower() != "wal":
            raise QueueError(f"the queue database {str(self.home.db)!r} cannot use WAL mode (got {mode})")
        c.execute("PRAGMA synchronous = FULL")
        c.execute("PRAGMA foreign_keys = ON")
        c.execute("BEGIN IMMEDIATE")
        try:
            for statement in SCHEMA:
                c.execute(statement)
            row = c.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()
            if row is None:
                c.execute("INSERT INTO meta (key, value) VALUES ('schema', ?)", (str(SCHEMA_VERSION),))
            elif int(row[0]) > SCHEMA_VERSION:
                raise QueueError(
                    f"the queue in {str(self.home.root)!r} was made by a newer sevenfold "
                    f"(schema {row[0]}); upgrade sevenfold to use it"
                )
            c.execute("COMMIT")
        except BaseException:
            if c.in_transaction:
                c.execute("ROLLBACK")
            raise

    def _check_readable(self) -> None:
        c = self._conn
        c.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        row = c.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()
        if row is None or int(row[0]) > SCHEMA_VERSION:
            raise QueueError(f"the queue in {str(self.home.root)!r} has schema "
                             f"{row[0] if row else 'none'}; this sevenfold reads schema {SCHEMA_VERSION}")

    def _retry(self, fn: Callable[[], T]) -> T:
        deadline = time.monotonic() + BUSY_DEADLINE
        delay = 0.005
        while True:
            try:
                return fn()
            except sqlite3.OperationalError as exc:
                if self._conn.in_transaction:
                    try:
                        self._conn.execute("ROLLBACK")
                    except sqlite3.Error:
                        pass
                if not _busy(exc):
                    raise QueueError(f"the queue database {str(self.home.db)!r} failed: {exc}") from None
                if time.monotonic() > deadline:
                    raise QueueError(
                        f"the queue database {str(self.home.db)!r} stayed locked by another process "
                        f"for {BUSY_DEADLINE:.0f} s; is a process stuck holding it?"
                    ) from None
                time.sleep(delay * (0.5 + random.random()))
                delay = min(delay * 2, 0.25)
            except sqlite3.DatabaseError as exc:
                raise QueueError(f"the queue database {str(self.home.db)!r} failed: {exc}") from None

    def write(self, fn: Callable[[sqlite3.Connection], T]) -> T:
        """Run ``fn(connection)`` in one write transaction, retried while the lock is busy.

        ``fn`` must only touch the database (and idempotent files), as it may run again.
        """
        def attempt() -> T:
            c = self._conn
            c.execute("BEGIN IMMEDIATE")
            try:
                result = fn(c)
                c.execute("COMMIT")
                return result
            except BaseException:
                if c.in_transaction:
                    c.execute("ROLLBACK")
                raise

        return self._retry(attempt)

    def read(self, fn: Callable[[sqlite3.Connection], T]) -> T:
        """Run ``fn(connection)`` on one consistent snapshot of the database."""
        def attempt() -> T:
            c = self._conn
            c.execute("BEGIN")
            try:
                return fn(c)
            finally:
                if c.in_transaction:
                    c.execute("COMMIT")

        return self._retry(attempt)

    def close(self) -> None:
        self._conn.close()

    def __enter__(self: C) -> C:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
