"""SQLite store: the embedded default, one file in WAL mode.

Tables
  readings     probe, ts, mv, temp_c, ph, neutral_ph, neutral_dev, quality;
               UNIQUE(probe, ts) with INSERT OR IGNORE, so a reading written
               twice (a redelivery after a crash) is stored once
  alerts       one row per alarm transition; UNIQUE(alarm_id, ts, event)
  quarantine   rejected input: source, reason, raw text, received_ts
  calibration_log, calibration_points, grab_samples, maintenance
               the calibration store's tables (``probeflow.calibration.store``),
               created here too so one file holds everything
  alarm_commands
               operator commands (ack, shelve, unshelve) queued for the running
               service (``probeflow.service.alarm_commands``)

Every ``write`` is one transaction, committed before it returns, so the
service may acknowledge the batch's sources afterwards.  Readings go in as
multi-row ``INSERT ... VALUES (...),(...)`` statements of 1, 2, 4, ... 512 rows
(at most ten distinct statements, each prepared once): one statement runs
with a single release of the interpreter lock, where ``executemany`` gives it
up and waits to take it back for every row, which is slow while the MQTT
client and the pipeline threads keep the interpreter busy.
The file is created with mode 0600 (SQLite gives its -wal and -shm files the
same mode).  ``ts`` is epoch seconds (REAL, UTC); NaN is stored as NULL.
"""

from __future__ import annotations

import functools
import itertools
import os
import sqlite3
import threading
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any, Literal

import numpy as np
from pydantic import Field

from probeflow.batch import QUALITY_NAMES, ProcessedBatch, QuarantineItem
from probeflow.calibration.store import create_calibration_tables
from probeflow.errors import StoreError
from probeflow.events import AlertEvent
from probeflow.service.alarm_commands import create_command_table
from probeflow.stores.base import StoreConfigBase, StoreContext

__all__ = ["SCHEMA", "SqliteStore"]

SCHEMA = """
CREATE TABLE IF NOT EXISTS readings (
    probe TEXT NOT NULL, ts REAL NOT NULL, mv REAL, temp_c REAL, ph REAL,
    neutral_ph REAL, neutral_dev REAL, quality TEXT NOT NULL,
    UNIQUE (probe, ts)
);
CREATE TABLE IF NOT EXISTS alerts (
    id INTEGER PRIMARY KEY, alarm_id TEXT NOT NULL, rule TEXT NOT NULL, probe TEXT NOT NULL,
    quantity TEXT, limit_name TEXT, event TEXT NOT NULL, state TEXT NOT NULL, ts REAL NOT NULL,
    value REAL, threshold REAL, severity TEXT, message TEXT,
    UNIQUE (alarm_id, ts, event)
);
CREATE INDEX IF NOT EXISTS alerts_ts ON alerts (ts);
CREATE TABLE IF NOT EXISTS quarantine (
    id INTEGER PRIMARY KEY, source TEXT NOT NULL, reason TEXT NOT NULL, raw TEXT NOT NULL,
    received_ts REAL NOT NULL
);
"""


_QUALITY_ARRAY = np.array(QUALITY_NAMES, dtype=object)

_ALERT_INSERT = (
    "INSERT OR IGNORE INTO alerts (alarm_id, rule, probe, quantity, limit_name, event, "
    "state, ts, value, threshold, severity, message) VALUES (?,?,?,?,?,?,?,?,?,?,?,?)"
)


_READING_COLUMNS = 8
_MAX_STATEMENT_ROWS = 512   # power of two; lowered at connect time if SQLite allows fewer parameters


@functools.cache
def _readings_insert(rows: int) -> str:
    values = ",".join(["(" + ",".join(["?"] * _READING_COLUMNS) + ")"] * rows)
    return f"INSERT OR IGNORE INTO readings VALUES {values}"


def _statement_rows(db: sqlite3.Connection) -> int:
    """The largest power of two <= _MAX_STATEMENT_ROWS whose parameters fit this SQLite build."""
    limit = max(1, db.getlimit(sqlite3.SQLITE_LIMIT_VARIABLE_NUMBER) // _READING_COLUMNS)
    rows = _MAX_STATEMENT_ROWS
    while rows > limit:
        rows //= 2
    return rows


def _statement_sizes(rows: int, most: int) -> Iterator[int]:
    """Rows per statement: full statements of ``most`` (a power of two), then
    the remainder as powers of two (so only a few distinct statements exist)."""
    full, rest = divmod(rows, most)
    yield from itertools.repeat(most, full)
    size = most // 2
    while rest:
        if rest >= size:
            yield size
            rest -= size
        size //= 2


def _reading_statements(batch: ProcessedBatch, most: int) -> list[tuple[str, Any]]:
    """(sql, parameters) for one ``execute`` each, covering every row of ``batch``."""
    flat = list(itertools.chain.from_iterable(zip(
        batch.probe.tolist(), batch.ts.tolist(), batch.mv.tolist(), batch.temp_c.tolist(),
        batch.ph.tolist(), batch.neutral_ph.tolist(), batch.neutral_dev.tolist(),
        _QUALITY_ARRAY[batch.quality].tolist())))
    statements = []
    start = 0
    for size in _statement_sizes(len(batch), most):
        stop = start + size * _READING_COLUMNS
        statements.append((_readings_insert(size), flat[start:stop]))
        start = stop
    return statements


class SqliteStoreConfig(StoreConfigBase):
    type: Literal["sqlite"] = "sqlite"
    path: str = "data/probeflow.sqlite"
    synchronous: Literal["normal", "full"] = "normal"
    cache_mib: int = Field(default=64, ge=2, le=4096)   # page cache: keeps the (probe, ts) index in memory
    busy_timeout_s: float = 10.0


def _create_private(path: Path) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    if not path.exists():
        fd = os.open(path, os.O_CREAT | os.O_WRONLY, 0o600)
        os.close(fd)


class SqliteStore:
    """Readings, alerts, quarantine, calibrations and alarm commands in one SQLite file."""

    Config = SqliteStoreConfig
    durable = True  # the service acknowledges sources only after this store commits

    def __init__(self, config: SqliteStoreConfig, context: StoreContext | None = None) -> None:
        self.config = config
        base = Path(context.base_dir if context is not None else ".")
        path = Path(config.path)
        self.path = path if path.is_absolute() else base / path
        self._lock = threading.Lock()
        try:
            _create_private(self.path)
            self._db = sqlite3.connect(self.path, timeout=config.busy_timeout_s,
                                       isolation_level=None, check_same_thread=False)
            self._db.execute("PRAGMA journal_mode=WAL")
            self._db.execute(f"PRAGMA synchronous={config.synchronous.upper()}")
            self._db.execute(f"PRAGMA cache_size=-{int(config.cache_mib) * 1024}")
            self._db.executescript(SCHEMA)
            create_calibration_tables(self._db)
            create_command_table(self._db)
            self._statement_rows = _statement_rows(self._db)
        except (OSError, sqlite3.Error) as exc:
            raise StoreError(f"cannot open the SQLite store {self.path}: {exc}") from exc

    # -- Store protocol -----------------------------------------------------------
    def write(self, batch: ProcessedBatch, alerts: Sequence[AlertEvent]) -> None:
        alert_rows = [(a.alarm_id, a.rule, a.probe, a.quantity, a.limit, a.event, a.state, a.ts,
                       a.value, a.threshold, a.severity, a.message) for a in alerts]
        self._transaction(*((sql, None, params) for sql, params in _reading_statements(batch, self._statement_rows)),
                          (_ALERT_INSERT, alert_rows, None))

    def write_quarantine(self, items: Sequence[QuarantineItem]) -> None:
        rows = [(i.source, i.reason, i.raw, i.received_ts) for i in items]
        self._transaction(
            ("INSERT INTO quarantine (source, reason, raw, received_ts) VALUES (?,?,?,?)", rows, None))

    def flush(self) -> None:
        """Nothing to do: every write is committed before it returns."""

    def close(self) -> None:
        with self._lock:
            try:
                self._db.close()
            except sqlite3.Error as exc:
                raise StoreError(f"closing the SQLite store {self.path} failed: {exc}") from exc

    def _transaction(self, *statements: tuple[str, Any, Any]) -> None:
        """One transaction: each statement is (sql, rows for executemany or None,
        parameters for one execute or None); empty row lists are skipped."""
        with self._lock:
            try:
                self._db.execute("BEGIN IMMEDIATE")
                try:
                    for sql, rows, params in statements:
                        if params is not None:
                            self._db.execute(sql, params)
                        elif rows:
                            self._db.executemany(sql, rows)
                    self._db.execute("COMMIT")
                except BaseException:
                    self._db.execute("ROLLBACK")
                    raise
            except sqlite3.Error as exc:
                raise StoreError(f"writing to the SQLite store {self.path} failed: {exc}") from exc
