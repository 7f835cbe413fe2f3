"""A durable on-disk outbox of line-protocol lines (SQLite, WAL, full sync).

The time-series store appends lines here and returns; a forwarder thread takes
the oldest rows, sends them, and deletes them only after the server confirms.
What is still here when the service stops is sent on the next start.

Tables::

    outbox(id INTEGER PRIMARY KEY, precision TEXT, n_lines INTEGER, body BLOB)
        One row per chunk of up to ``max_lines_per_row`` lines, joined by "\\n".
        Ids grow, so "oldest first" is "lowest id first".  The precision is kept
        with the lines so a changed config never re-times lines queued earlier.
    rejected(id INTEGER PRIMARY KEY, at REAL, origin TEXT, line TEXT, reason TEXT)
        Lines the server refused (origin "server", with its message) and rows
        that could not be written as line protocol (origin "builder").

Durability: appends run on a connection with ``synchronous=FULL``, one
transaction per append, so a line acknowledged by ``append`` survives a
power cut.  Deletes after a confirmed send run on a second connection with
``synchronous=NORMAL``: losing one in a power cut only means the same points
are sent again, which overwrites them with themselves (a point's identity is
measurement + tag set + timestamp).  The file and its WAL are created with
mode 0600.

Quota (payload bytes, i.e. the sum of the stored line bytes): ``block`` makes
``append`` wait until the forwarder has made room (back-pressure on the
pipeline); ``drop_oldest`` deletes the oldest rows to make room, counts the
lost lines in ``dropped_lines`` and logs each loss.  A warning is logged
when the outbox passes ``warn_fraction`` of its quota.
"""

from __future__ import annotations

import logging
import os
import sqlite3
import threading
import time
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

from probeflow.errors import StoreError

__all__ = ["Outbox", "OutboxRow", "QuotaPolicy"]

QuotaPolicy = Literal["block", "drop_oldest"]

_SCHEMA = """
CREATE TABLE IF NOT EXISTS outbox (
    id INTEGER PRIMARY KEY,
    precision TEXT NOT NULL,
    n_lines INTEGER NOT NULL,
    body BLOB NOT NULL
);
CREATE TABLE IF NOT EXISTS rejected (
    id INTEGER PRIMARY KEY,
    at REAL NOT NULL,
    origin TEXT NOT NULL,
    line TEXT NOT NULL,
    reason TEXT NOT NULL
);
"""


@dataclass(frozen=True, slots=True)
class OutboxRow:
    id: int
    precision: str
    n_lines: int
    body: bytes


def _create_private(path: Path) -> None:
    """Create the database file with mode 0600 (SQLite gives its WAL and shm files the same mode)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_CREAT | os.O_RDWR, 0o600)
    os.close(fd)
    os.chmod(path, 0o600)


class Outbox:
    """Durable FIFO of line-protocol chunks with a byte quota."""

    def __init__(
        self,
        path: str | Path,
        *,
        quota_bytes: int | None = None,
        on_quota: QuotaPolicy = "block",
        warn_fraction: float = 0.8,
        log: logging.Logger | None = None,
    ) -> None:
        self.path = Path(path)
        self.quota_bytes = quota_bytes
        self.on_quota = on_quota
        self.warn_fraction = warn_fraction
        self.log = log or logging.getLogger("probeflow.stores.outbox")
        try:
            _create_private(self.path)
            self._append_conn = self._connect("FULL")
            self._append_conn.executescript(_SCHEMA)
            self._drain_conn = self._connect("NORMAL")
            rows, lines, size = self._append_conn.execute(
                "SELECT COUNT(*), COALESCE(SUM(n_lines), 0), COALESCE(SUM(LENGTH(body)), 0) FROM outbox"
            ).fetchone()
            (rejected,) = self._append_conn.execute("SELECT COUNT(*) FROM rejected").fetchone()
        except (sqlite3.Error, OSError) as exc:
            raise StoreError(f"cannot open the outbox file {self.path}: {exc}") from exc
        self._append_lock = threading.Lock()
        self._drain_lock = threading.Lock()
        self._state = threading.Condition()
        self._rows, self._lines, self._bytes = int(rows), int(lines), int(size)
        self._rejected = int(rejected)
        self._dropped = 0
        self._warned = False
        self._closed = False
        self._check_quota_warning()

    def _connect(self, synchronous: str) -> sqlite3.Connection:
        conn = sqlite3.connect(self.path, timeout=60.0, isolation_level=None, check_same_thread=False)
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute(f"PRAGMA synchronous={synchronous}")
        # Some SQLite builds (Debian's among them) overwrite every freed page with
        # zeros by default.  A sent chunk is ~100 overflow pages, so each delete
        # wrote them all to the WAL again (7 ms a chunk, a third of a send);
        # FAST zeroes only where it costs no extra write.  The outbox holds
        # copies of readings already on their way to the server, nothing secret.
        conn.execute("PRAGMA secure_delete=FAST")
        return conn

    # -- depth, for metrics -------------------------------------------------
    @property
    def rows(self) -> int:
        """Chunks waiting to be sent."""
        return self._rows

    @property
    def lines(self) -> int:
        """Lines (points) waiting to be sent."""
        return self._lines

    @property
    def bytes(self) -> int:
        """Payload bytes waiting to be sent (what the quota counts)."""
        return self._bytes

    @property
    def rejected(self) -> int:
        """Lines in the ``rejected`` table."""
        return self._rejected

    @property
    def dropped_lines(self) -> int:
        """Lines deleted unsent by the ``drop_oldest`` policy since this process opened the outbox."""
        return self._dropped

    @property
    def quota_fraction(self) -> float:
        """Payload bytes as a fraction of the quota (0 without a quota)."""
        return self._bytes / self.quota_bytes if self.quota_bytes else 0.0

    # -- appending ----------------------------------------------------------
    def append(
        self,
        lines: Sequence[str],
        precision: str,
        max_lines_per_row: int = 5000,
        rejected: Sequence[tuple[str, str]] = (),
    ) -> None:
        """Store ``lines`` durably, in chunks of at most ``max_lines_per_row``, in one transaction.

        ``rejected`` holds (row, reason) pairs that could not become lines; they go to the
        ``rejected`` table (origin "builder") in the same transaction.
        """
        if not lines and not rejected:
            return
        chunks: list[tuple[str, int, bytes]] = []
        for start in range(0, len(lines), max_lines_per_row):
            part = lines[start : start + max_lines_per_row]
            chunks.append((precision, len(part), "\n".join(part).encode("utf-8")))
        size = sum(len(c[2]) for c in chunks)
        self._make_room(size)
        with self._append_lock:
            try:
                cur = self._append_conn.cursor()
                cur.execute("BEGIN IMMEDIATE")
                cur.executemany("INSERT INTO outbox(precision, n_lines, body) VALUES (?, ?, ?)", chunks)
                if rejected:
                    now = time.time()
                    cur.executemany(
                        "INSERT INTO rejected(at, origin, line, reason) VALUES (?, 'builder', ?, ?)",
                        [(now, line, reason) for line, reason in rejected],
                    )
                cur.execute("COMMIT")
            except sqlite3.Error as exc:
                self._rollback(self._append_conn)
                raise StoreError(f"cannot write to the outbox file {self.path}: {exc}") from exc
        with self._state:
            self._rows += len(chunks)
            self._lines += len(lines)
            self._bytes += size
            self._rejected += len(rejected)
            self._state.notify_all()
        self._check_quota_warning()

    def _make_room(self, size: int) -> None:
        if not self.quota_bytes:
            return
        if self.on_quota == "drop_oldest":
            self._drop_oldest_for(size)
            return
        waited_since: float | None = None
        with self._state:
            while self._bytes > 0 and self._bytes + size > self.quota_bytes and not self._closed:
                if waited_since is None:
                    waited_since = time.monotonic()
                    if not self._quota_log_due():
                        continue
                    self.log.warning(
                        "influx outbox %s is full (%d of %d bytes): holding new readings until "
                        "the database accepts the queued ones",
                        self.path, self._bytes, self.quota_bytes,
                    )
                self._state.wait(1.0)
        if waited_since is not None and time.monotonic() - waited_since >= 1.0:
            self.log.warning(
                "influx outbox %s has room again after %.1f s", self.path, time.monotonic() - waited_since
            )

    def _drop_oldest_for(self, size: int) -> None:
        quota = self.quota_bytes or 0
        dropped_lines = 0
        while self._bytes > 0 and self._bytes + size > quota:
            with self._drain_lock:
                row = self._drain_conn.execute(
                    "SELECT id FROM outbox ORDER BY id LIMIT 1"
                ).fetchone()
                if row is None:
                    break
                gone = self._delete_locked([row[0]])
            dropped_lines += gone
        if dropped_lines:
            with self._state:
                self._dropped += dropped_lines
            if not self._quota_log_due():
                return  # counted; the next report (within a minute) gives the running total
            self.log.warning(
                "influx outbox %s reached its quota of %d bytes: deleted the %d oldest unsent "
                "points (on_quota: drop_oldest); %d lost since start",
                self.path, self.quota_bytes, dropped_lines, self._dropped,
            )

    QUOTA_LOG_INTERVAL_S = 60.0
    """At most one quota log line (full, dropping) per this interval; counts stay exact."""

    def _quota_log_due(self) -> bool:
        now = time.monotonic()
        last = getattr(self, "_last_quota_log", None)
        if last is not None and now - last < self.QUOTA_LOG_INTERVAL_S:
            return False
        self._last_quota_log = now
        return True

    def _check_quota_warning(self) -> None:
        if not self.quota_bytes:
            return
        frac = self.quota_fraction
        if frac >= self.warn_fraction and not self._warned:
            self._warned = True
            self.log.warning(
                "influx outbox %s is %.0f %% full (%d of %d bytes, %d points waiting): "
                "the database has not been taking points fast enough",
                self.path, 100 * frac, self._bytes, self.quota_bytes, self._lines,
            )
        elif frac < self.warn_fraction * 0.9 and self._warned:
            self._warned = False
            self.log.info("influx outbox %s is back below %.0f %% of its quota", self.path,
                          100 * self.warn_fraction)

    # -- draining -----------------------------------------------------------
    def oldest(self, max_lines: int) -> list[OutboxRow]:
        """The oldest rows of one precision, up to ``max_lines`` lines (always at least one row)."""
        with self._drain_lock:
            conn = self._drain_conn
            try:
                # The rows first, then only their bodies (a body is hundreds of
                # kilobytes of overflow pages: reading one more than is sent costs).
                # One read transaction, so both see the same rows.
                conn.execute("BEGIN")
                try:
                    chosen: list[tuple[int, str, int]] = []
                    total = 0
                    for rid, prec, n in conn.execute(
                        "SELECT id, precision, n_lines FROM outbox ORDER BY id LIMIT ?",
                        (max(1, max_lines),),
                    ):
                        if chosen and (prec != chosen[0][1] or total + n > max_lines):
                            break
                        chosen.append((rid, prec, n))
                        total += n
                    bodies = dict(conn.execute(
                        "SELECT id, body FROM outbox WHERE id BETWEEN ? AND ?",
                        (chosen[0][0], chosen[-1][0]),
                    ).fetchall()) if chosen else {}
                finally:
                    conn.execute("COMMIT")
                return [OutboxRow(rid, prec, n, bytes(bodies[rid])) for rid, prec, n in chosen]
            except sqlite3.Error as exc:
                raise StoreError(f"cannot read the outbox file {self.path}: {exc}") from exc

    def delete(self, ids: Iterable[int]) -> int:
        """Delete sent rows; returns the number of lines removed."""
        with self._drain_lock:
            return self._delete_locked(list(ids))

    def _delete_locked(self, ids: list[int], rejected: Sequence[tuple[str, str, str]] = ()) -> int:
        if not ids and not rejected:
            return 0
        try:
            cur = self._drain_conn.cursor()
            cur.execute("BEGIN IMMEDIATE")
            if rejected:
                now = time.time()
                cur.executemany(
                    "INSERT INTO rejected(at, origin, line, reason) VALUES (?, ?, ?, ?)",
                    [(now, origin, line, reason) for origin, line, reason in rejected],
                )
            marks = ",".join("?" * len(ids))
            gone = cur.execute(
                f"DELETE FROM outbox WHERE id IN ({marks}) RETURNING n_lines, LENGTH(body)", ids
            ).fetchall() if ids else []
            cur.execute("COMMIT")
        except sqlite3.Error as exc:
            self._rollback(self._drain_conn)
            raise StoreError(f"cannot update the outbox file {self.path}: {exc}") from exc
        lines = sum(r[0] for r in gone)
        with self._state:
            self._rows -= len(gone)
            self._lines -= lines
            self._bytes -= sum(r[1] for r in gone)
            self._rejected += len(rejected)
            self._state.notify_all()
        self._check_quota_warning()
        return lines

    def reject(self, ids: Iterable[int], bad: Sequence[tuple[str, str]], origin: str = "server") -> int:
        """In one transaction: keep ``bad`` (line, reason) pairs aside and delete rows ``ids``."""
        with self._drain_lock:
            return self._delete_locked(list(ids), [(origin, line, reason) for line, reason in bad])

    def rejected_rows(self) -> list[tuple[str, str, str]]:
        """All rejected (origin, line, reason), oldest first."""
        with self._drain_lock:
            return list(self._drain_conn.execute(
                "SELECT origin, line, reason FROM rejected ORDER BY id"
            ))

    def notify_waiters(self) -> None:
        """Wake :meth:`wait_for_change` now (the forwarder finished a send)."""
        with self._state:
            self._state.notify_all()

    def wait_for_change(self, timeout: float) -> None:
        """Block until rows are added or removed, or ``timeout`` seconds pass."""
        with self._state:
            self._state.wait(timeout)

    # -- closing ------------------------------------------------------------
    def release_waiters(self) -> None:
        """Let appends blocked on a full quota through (used when the store shuts down)."""
        with self._state:
            self._closed = True
            self._state.notify_all()

    def close(self) -> None:
        self.release_waiters()
        with self._append_lock, self._drain_lock:
            for conn in (self._append_conn, self._drain_conn):
                try:
                    conn.close()
                except sqlite3.Error:
                    pass

    @staticmethod
    def _rollback(conn: sqlite3.Connection) -> None:
        try:
            conn.execute("ROLLBACK")
        except sqlite3.Error:
            pass
