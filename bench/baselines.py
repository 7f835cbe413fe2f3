"""Bare baselines: the simplest code doing the same I/O as a probeflow stage,
with no probeflow logic (no validation, no conversion, no rules, no quarantine).

Each benchmark times its probeflow stage against one of these in the same run
and reports the ratio.  Baselines only move bytes and rows; they never import
probeflow.

Run as a script, ``python bench/baselines.py echo`` is the bare stream filter:
an orjson decode/encode loop from stdin to stdout, one line at a time;
``python bench/baselines.py parquet-sqlite REC DB`` the bare replay: pyarrow
reads the recording, executemany writes its rows.
"""

from __future__ import annotations

import sqlite3
import sys
import threading
import time
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import orjson

__all__ = ["BareSubscriber", "bare_executemany", "bare_readings_table", "echo_loop"]

READINGS_TABLE = """
CREATE TABLE IF NOT EXISTS readings (
    probe TEXT NOT NULL, ts REAL NOT NULL, mv REAL, temp_c REAL, ph REAL,
    neutral_ph REAL, neutral_dev REAL, quality TEXT NOT NULL,
    UNIQUE (probe, ts)
)"""
"""The same table shape (and unique index) as probeflow's SQLite store, so both
pay for the same index maintenance."""


def echo_loop(stdin: Any = None, stdout: Any = None) -> None:
    """Decode every JSON line with orjson and encode it again: the bare filter."""
    fin = stdin if stdin is not None else sys.stdin.buffer
    fout = stdout if stdout is not None else sys.stdout.buffer
    loads, dumps = orjson.loads, orjson.dumps
    write = fout.write
    for line in fin:
        write(dumps(loads(line)) + b"\n")
    fout.flush()


def bare_readings_table(path: Path) -> sqlite3.Connection:
    """A fresh SQLite file in WAL mode with the readings table."""
    db = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
    db.execute("PRAGMA journal_mode=WAL")
    db.execute("PRAGMA synchronous=NORMAL")
    db.execute(READINGS_TABLE)
    return db


def bare_executemany(db: sqlite3.Connection, rows: Sequence[tuple[Any, ...]],
                     batch: int = 10_000) -> None:
    """Insert prepared row tuples with executemany, ``batch`` rows per transaction."""
    sql = "INSERT OR IGNORE INTO readings VALUES (?,?,?,?,?,?,?,?)"
    for start in range(0, len(rows), batch):
        db.execute("BEGIN")
        db.executemany(sql, rows[start:start + batch])
        db.execute("COMMIT")


class BareSubscriber:
    """A paho subscriber that only parses each payload (orjson) and counts the
    readings; QoS 1 with paho's automatic acknowledgement, MQTT 5 persistent
    session under a fixed client id (so the broker queues while it is away)."""

    def __init__(self, host: str, port: int, topic: str, client_id: str) -> None:
        import paho.mqtt.client as paho
        from paho.mqtt.packettypes import PacketTypes
        from paho.mqtt.properties import Properties

        self.readings = 0
        self.messages = 0
        self.errors = 0
        self.first = 0.0
        self.last = 0.0
        self._subscribed = threading.Event()
        self._client = paho.Client(paho.CallbackAPIVersion.VERSION2, client_id=client_id,
                                   protocol=paho.MQTTv5)
        self._client.on_connect = lambda c, u, f, rc, p: c.subscribe(topic, qos=1)
        self._client.on_subscribe = lambda c, u, mid, rcs, p: self._subscribed.set()
        self._client.on_message = self._on_message
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = 3600
        self._client.connect(host, port, clean_start=False, properties=props)
        self._client.loop_start()
        if not self._subscribed.wait(10):
            raise RuntimeError("the bare subscriber could not subscribe")

    def _on_message(self, client: Any, userdata: Any, message: Any) -> None:
        try:
            obj = orjson.loads(message.payload)
            now = time.perf_counter()
            if self.messages == 0:
                self.first = now
            self.readings += len(obj) if type(obj) is list else 1
            self.messages += 1
            self.last = now
        except Exception:  # noqa: BLE001 - a raise would end paho's network thread
            self.errors += 1

    def wait_for(self, readings: int, timeout: float) -> bool:
        deadline = time.monotonic() + timeout
        while self.readings < readings and time.monotonic() < deadline:
            time.sleep(0.01)
        return self.readings >= readings

    def close(self) -> None:
        self._client.disconnect()
        self._client.loop_stop()


def parquet_into_sqlite(recording: Path, db_path: Path, batch: int = 10_000) -> int:
    """Read a Parquet recording with pyarrow and insert its rows with executemany
    (the float columns stand in for pH and friends: same row width, no maths)."""
    import pyarrow.parquet as pq

    db = bare_readings_table(db_path)
    total = 0
    for rb in pq.ParquetFile(recording).iter_batches(batch_size=batch):
        cols = [rb.column(i).to_pylist() for i in range(rb.num_columns)]
        probe, ts, mv, temp = cols[0], cols[1], cols[2], cols[3]
        rows = list(zip(probe, ts, mv, temp, mv, temp, mv, ["good"] * len(ts)))
        bare_executemany(db, rows, batch)
        total += len(rows)
    db.close()
    return total


def chunks(items: Sequence[Any], size: int) -> Iterable[Sequence[Any]]:
    for start in range(0, len(items), size):
        yield items[start:start + size]


if __name__ == "__main__":
    if sys.argv[1:] == ["echo"]:
        echo_loop()
    elif len(sys.argv) == 4 and sys.argv[1] == "parquet-sqlite":
        parquet_into_sqlite(Path(sys.argv[2]), Path(sys.argv[3]))
    else:
        raise SystemExit("usage: baselines.py echo                         (orjson echo loop)\n"
                         "       baselines.py parquet-sqlite REC.parquet DB  (bare replay)")
