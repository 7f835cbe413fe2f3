"""The pipeline's batching changes for speed, checked for correctness with a
real SQLite store (probeflow/service/pipeline.py):

* batches holding acknowledgements are grouped while the durable store is busy,
  and each acknowledgement still runs only after its readings are committed,
  once, in order;
* a replay that reads far faster than the store writes stores every reading,
  even with a short stop deadline (the service waits for its backlog when the
  sources have ended and nobody asked it to stop).
"""

from __future__ import annotations

import sqlite3
import subprocess
import sys
import threading
from pathlib import Path

import numpy as np
import orjson

from probeflow.batch import ReadingBatch
from probeflow.config.models import CalibrationSpec, ProbeConfig, ServiceSettings
from probeflow.convert import Converter
from probeflow.service.pipeline import Service
from probeflow.stores.sqlite import SqliteStore, SqliteStoreConfig

REPO = Path(__file__).resolve().parents[2]
PROBES = [ProbeConfig(id=f"cell-{k}", calibration=CalibrationSpec(offset_mv=1.0, slope_pct=98.0))
          for k in range(20)]


class HookedSource:
    """A finite test source: emits batches whose commit hooks record how many
    readings were visible in the SQLite file (another connection) when they ran."""

    class Config:
        pass

    def __init__(self, config: object, context) -> None:
        self.context = context
        self.db_path: Path = config.db_path  # type: ignore[attr-defined]
        self.batches: int = config.batches   # type: ignore[attr-defined]
        self.rows: int = config.rows         # type: ignore[attr-defined]
        self.calls: list[tuple[int, int]] = []
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _visible(self) -> int:
        con = sqlite3.connect(self.db_path)
        try:
            return int(con.execute("SELECT count(*) FROM readings").fetchone()[0])
        finally:
            con.close()

    def _hook(self, k: int) -> None:
        self.calls.append((k, self._visible()))

    def _run(self) -> None:
        names = np.array([p.id for p in PROBES], dtype=object)
        for k in range(self.batches):
            i = np.arange(k * self.rows, (k + 1) * self.rows)
            batch = ReadingBatch.from_columns(names[i % len(names)], 1764633600.0 + i * 0.01,
                                              np.full(self.rows, 12.0), np.full(self.rows, 20.0),
                                              on_committed=(lambda k=k: self._hook(k),))
            self.context.emit(batch)
        self._done.set()

    def start(self) -> None:
        self._thread.start()

    def stop(self, timeout: float = 5.0) -> None:
        self._thread.join(timeout)

    @property
    def done(self) -> bool:
        return self._done.is_set()


def test_acknowledgements_follow_their_commit_in_order(tmp_path: Path) -> None:
    db = tmp_path / "acks.sqlite"
    store = SqliteStore(SqliteStoreConfig(path=str(db)))
    config = type("Cfg", (), {"db_path": db, "batches": 300, "rows": 40})()
    service = Service(site="test-works", converter=Converter(PROBES),
                      collectors=[("hooked", HookedSource, config)], stores=[("sqlite", store)],
                      settings=ServiceSettings(batch_ms=50, batch_rows=5000))
    source = service.collectors[0][1]
    service.run(duration_s=120)
    assert [k for k, _ in source.calls] == list(range(300))
    for k, visible in source.calls:
        assert visible >= (k + 1) * 40, (k, visible)
    assert sqlite3.connect(db).execute("SELECT count(*) FROM readings").fetchone()[0] == 300 * 40


def test_a_fast_replay_stores_every_reading_despite_a_short_stop_deadline(tmp_path: Path) -> None:
    n, n_probes = 300_000, 1000
    idx = np.arange(n)
    recording = tmp_path / "rec.jsonl"
    recording.write_bytes(b"".join(
        orjson.dumps({"probe": f"cell-{i % n_probes}", "ts": 1764633600.0 + i * 0.001, "mv": 3.5})
        + b"\n" for i in idx.tolist()))
    db = tmp_path / "replay.sqlite"
    probes = "\n".join(f"  - id: cell-{k}\n    calibration: {{offset_mv: 1.0, slope_pct: 98.0}}"
                       for k in range(n_probes))
    config = tmp_path / "replay.yaml"
    config.write_text(f"site: test-works\nprobes:\n{probes}\nstores:\n  - type: sqlite\n"
                      f"    path: {db}\n    synchronous: full\n    cache_mib: 2\n"
                      "service:\n  stop_timeout_s: 2.0\n")
    done = subprocess.run([sys.executable, "-m", "probeflow", "replay", str(recording),
                           "--config", str(config)], check=False, capture_output=True, cwd=REPO, timeout=300)
    assert done.returncode == 0, done.stderr.decode()[-2000:]
    assert sqlite3.connect(db).execute("SELECT count(*) FROM readings").fetchone()[0] == n
