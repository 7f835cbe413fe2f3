"""The SQLite store's write path (quality names from a lookup array) against
the straightforward rows: what is read back equals the batch, NaN as NULL.

Reference: the batch's own columns, and the quality names from the Quality
enum one reading at a time.
"""

from __future__ import annotations

import math
import sqlite3
from pathlib import Path

from perf_batches import processed_batch

from probeflow.batch import Quality
from probeflow.stores.sqlite import SqliteStore, SqliteStoreConfig


def test_rows_read_back_equal_the_batch(tmp_path: Path) -> None:
    batch = processed_batch(3000, 21)
    store = SqliteStore(SqliteStoreConfig(path=str(tmp_path / "rows.sqlite")))
    store.write(batch, ())
    store.close()
    rows = sqlite3.connect(tmp_path / "rows.sqlite").execute(
        "SELECT probe, ts, mv, temp_c, ph, neutral_ph, neutral_dev, quality FROM readings "
        "ORDER BY rowid").fetchall()
    expected = list(zip(batch.probe.tolist(), batch.ts.tolist(), batch.mv.tolist(),
                        batch.temp_c.tolist(), batch.ph.tolist(), batch.neutral_ph.tolist(),
                        batch.neutral_dev.tolist(),
                        [Quality(int(q)).name.lower() for q in batch.quality]))
    assert len(rows) == len(expected) == 3000
    for got, want in zip(rows, expected):
        assert got[0] == want[0] and got[1] == want[1] and got[7] == want[7]
        for g, w in zip(got[2:7], want[2:7]):
            assert (g is None and math.isnan(w)) or g == w
