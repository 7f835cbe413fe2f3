"""SQLite store on real files, and store isolation in the pipeline."""

from __future__ import annotations

import sqlite3
import stat
import threading
from itertools import pairwise
from pathlib import Path

import numpy as np

from probeflow.batch import QuarantineItem, ReadingBatch
from probeflow.collectors.file import FileCollector
from probeflow.config import ProbeConfig, ServiceSettings
from probeflow.convert import Converter
from probeflow.service.log import Log
from probeflow.service.pipeline import Service
from probeflow.stores.sqlite import SqliteStore, SqliteStoreConfig

PROBES = [ProbeConfig(id="p1", calibration={"offset_mv": 0.0, "slope_pct": 99.0})]


def _processed(n: int, t0: float = 1.7e9):
    batch = ReadingBatch.from_columns(["p1"] * n, t0 + np.arange(n), np.linspace(-50, 50, n),
                                      np.full(n, 25.0))
    return Converter(PROBES).convert(batch)


def test_same_reading_twice_is_stored_once_and_file_is_private(tmp_path: Path):
    store = SqliteStore(SqliteStoreConfig(path=str(tmp_path / "db" / "pf.sqlite")))
    store.write(_processed(100), [])
    store.write(_processed(100), [])      # a redelivery of the same readings
    store.write(_processed(150), [])      # 50 new ones
    store.write_quarantine([QuarantineItem("test", "not valid JSON", "{oops", 1.7e9)])
    store.close()
    db = sqlite3.connect(tmp_path / "db" / "pf.sqlite")
    assert db.execute("SELECT COUNT(*), COUNT(DISTINCT ts) FROM readings").fetchone() == (150, 150)
    assert db.execute("SELECT reason, raw FROM quarantine").fetchall() == [("not valid JSON", "{oops")]
    assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    for f in (tmp_path / "db").iterdir():
        assert stat.S_IMODE(f.stat().st_mode) == 0o600, f


class FlakyStore:
    """A store that fails its first writes, as a database outage would."""

    durable = False

    def __init__(self, failures: int) -> None:
        self.failures = failures
        self.rows = 0
        self.lock = threading.Lock()

    def write(self, batch, alerts):
        with self.lock:
            if self.failures > 0:
                self.failures -= 1
                raise ConnectionError("server not reachable")
            self.rows += len(batch)

    def write_quarantine(self, items):
        pass

    def flush(self):
        pass

    def close(self):
        pass


class StuckStore(FlakyStore):
    """A store that never succeeds."""

    def write(self, batch, alerts):
        raise ConnectionError("always down")


def _recording(path: Path, n: int) -> Path:
    lines = [f'{{"probe":"p1","ts":{1.7e9 + i},"mv":{i % 100},"temp_c":25}}' for i in range(n)]
    lines.insert(7, "this is not a reading")
    path.write_text("\n".join(lines) + "\n")
    return path


def test_failing_store_is_retried_and_never_stalls_sqlite(tmp_path: Path, capsys):
    recording = _recording(tmp_path / "rec.jsonl", 3000)
    sqlite_store = SqliteStore(SqliteStoreConfig(path=str(tmp_path / "pf.sqlite")))
    flaky, stuck = FlakyStore(failures=3), StuckStore(0)
    acks: list[int] = []
    committed_rows: list[int] = []

    class AckingCollector(FileCollector):
        """A file source that asks for an acknowledgement per batch (like MQTT)."""

        def __init__(self, config, context):
            inner_emit = context.emit_batch

            def emit(batch):
                seq = len(acks) + len(pending)
                pending.append(seq)

                def ack(seq: int = seq) -> None:
                    acks.append(seq)
                    db = sqlite3.connect(tmp_path / "pf.sqlite")
                    committed_rows.append(db.execute("SELECT COUNT(*) FROM readings").fetchone()[0])
                    db.close()

                inner_emit(ReadingBatch(batch.probe, batch.ts, batch.mv, batch.temp_c, batch.ohms,
                                        on_committed=(ack,)))

            context.emit_batch = emit
            super().__init__(config, context)

    pending: list[int] = []
    service = Service(
        site="t", converter=Converter(PROBES),
        collectors=[("rec", AckingCollector, AckingCollector.Config(path=str(recording),
                                                                    batch_rows=500))],
        stores=[("sqlite", sqlite_store), ("flaky", flaky), ("stuck", stuck)],
        settings=ServiceSettings(batch_rows=500, batch_ms=0, stop_timeout_s=2.0,
                                 store_retry_max_s=0.2),
        log=Log(fmt="kv"))
    stats = service.run(duration_s=30)
    db = sqlite3.connect(tmp_path / "pf.sqlite")
    assert db.execute("SELECT COUNT(*) FROM readings").fetchone()[0] == 3000
    assert db.execute("SELECT raw FROM quarantine").fetchall() == [("this is not a reading",)]
    assert flaky.rows == 3000                     # retried until it worked
    assert acks == sorted(acks) and len(acks) == len(pending)   # every batch acked, in order
    assert all(later >= earlier for earlier, later in pairwise(committed_rows))
    assert stats.per_store["stuck"]["lost_rows"] > 0            # the loss is counted, not silent
    err = capsys.readouterr().err
    assert "event=store_failed" in err and "store=stuck" in err and "event=store_gave_up" in err


def test_collector_failing_to_start_is_retried_while_others_run(tmp_path: Path, capsys):
    first = _recording(tmp_path / "first.jsonl", 200)
    second = _recording(tmp_path / "second.jsonl", 0)
    second.write_text("".join(f'{{"probe":"p1","ts":{1.8e9 + i},"mv":1}}\n' for i in range(50)))
    attempts = []

    class ShyCollector(FileCollector):
        """Its source is not there at the first attempt (a device not yet plugged in)."""

        def start(self) -> None:
            attempts.append(1)
            if len(attempts) == 1:
                raise ConnectionError("device not ready")
            super().start()

    sqlite_store = SqliteStore(SqliteStoreConfig(path=str(tmp_path / "pf.sqlite")))
    service = Service(
        site="t", converter=Converter(PROBES),
        collectors=[("first", FileCollector, FileCollector.Config(path=str(first))),
                    ("shy", ShyCollector, ShyCollector.Config(path=str(second)))],
        stores=[("sqlite", sqlite_store)], settings=ServiceSettings(batch_ms=0),
        log=Log(fmt="kv"), retry_collectors=True)
    service.run(duration_s=30)
    count = sqlite3.connect(tmp_path / "pf.sqlite").execute("SELECT COUNT(*) FROM readings")
    assert count.fetchone()[0] == 250 and len(attempts) == 2
    assert "event=collector_start_failed collector=shy attempt=1" in capsys.readouterr().err
