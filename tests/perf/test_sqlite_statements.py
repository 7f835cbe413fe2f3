"""The SQLite store's multi-row statements against the straightforward path:
the same rows inserted by one ``executemany`` into a second file with the
same table.  Every value read back is compared bit for bit (``float.hex``),
NaN stored as NULL by both, duplicates ignored alike, and a write that fails
in a later statement leaves nothing behind (one transaction per write).

Reference: sqlite3 ``executemany`` of the batch's own columns with quality
names from the Quality enum one reading at a time (the plain path the store
used before).  That a bound NaN reads back as NULL is asserted here on the
store's file; the reference file must agree bit for bit.
"""

from __future__ import annotations

import math
import sqlite3
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from perf_batches import processed_batch

from probeflow.batch import Quality
from probeflow.errors import StoreError
from probeflow.stores.sqlite import SCHEMA, SqliteStore, SqliteStoreConfig

_SELECT = ("SELECT probe, ts, mv, temp_c, ph, neutral_ph, neutral_dev, quality FROM readings "
           "ORDER BY rowid")


def _reference(path: Path, batches: list[Any]) -> list[tuple[Any, ...]]:
    db = sqlite3.connect(path)
    db.executescript(SCHEMA)
    for batch in batches:
        rows = list(zip(batch.probe.tolist(), batch.ts.tolist(), batch.mv.tolist(),
                        batch.temp_c.tolist(), batch.ph.tolist(), batch.neutral_ph.tolist(),
                        batch.neutral_dev.tolist(),
                        [Quality(int(q)).name.lower() for q in batch.quality]))
        with db:
            db.executemany("INSERT OR IGNORE INTO readings VALUES (?,?,?,?,?,?,?,?)", rows)
    got = db.execute(_SELECT).fetchall()
    db.close()
    return got


def _bits(row: tuple[Any, ...]) -> tuple[Any, ...]:
    return tuple(v.hex() if isinstance(v, float) else v for v in row)


def _stored(path: Path) -> list[tuple[Any, ...]]:
    db = sqlite3.connect(path)
    try:
        return db.execute(_SELECT).fetchall()
    finally:
        db.close()


@pytest.mark.parametrize("n", [1, 2, 3, 7, 100, 511, 512, 513, 1300])
def test_rows_equal_executemany_bit_for_bit(tmp_path: Path, n: int) -> None:
    batch = processed_batch(n, 100 + n)
    batch.mv[0] = np.nan
    batch.ph[-1] = np.inf   # not produced by conversion, but must not be turned into NULL
    store = SqliteStore(SqliteStoreConfig(path=str(tmp_path / "store.sqlite")))
    store.write(batch, ())
    store.close()
    got = _stored(tmp_path / "store.sqlite")
    want = _reference(tmp_path / "reference.sqlite", [batch])
    assert len(got) == n
    assert [_bits(r) for r in got] == [_bits(r) for r in want]
    assert got[0][2] is None            # NaN -> NULL
    assert got[-1][4] == math.inf


def test_duplicates_ignored_like_executemany(tmp_path: Path) -> None:
    first = processed_batch(600, 7)
    ts = first.ts.copy()
    ts[300:] = ts[:300]                 # the second half repeats (probe, ts) pairs of the first
    second = processed_batch(600, 8, probes=list(first.probe), ts=ts)
    second.probe[:] = first.probe[np.r_[0:300, 0:300]]
    store = SqliteStore(SqliteStoreConfig(path=str(tmp_path / "store.sqlite")))
    store.write(first, ())
    store.write(first, ())              # a redelivery: stored once
    store.write(second, ())
    store.close()
    got = _stored(tmp_path / "store.sqlite")
    want = _reference(tmp_path / "reference.sqlite", [first, first, second])
    assert len(got) == len(want) < 1200
    assert [_bits(r) for r in got] == [_bits(r) for r in want]


def test_failure_in_a_later_statement_rolls_back_the_whole_write(tmp_path: Path) -> None:
    path = tmp_path / "store.sqlite"
    store = SqliteStore(SqliteStoreConfig(path=str(path)))
    db = sqlite3.connect(path)
    db.execute("CREATE TRIGGER refuse BEFORE INSERT ON readings WHEN NEW.probe = 'refused' "
               "BEGIN SELECT RAISE(ABORT, 'refused by test trigger'); END")
    db.commit()
    db.close()
    batch = processed_batch(700, 9, probes=["tank-3"])
    batch.probe[650] = "refused"        # past the first 512-row statement
    with pytest.raises(StoreError):
        store.write(batch, ())
    store.close()
    assert _stored(path) == []


def test_statement_rows_fit_a_lower_parameter_limit() -> None:
    from probeflow.stores.sqlite import _statement_rows, _statement_sizes
    db = sqlite3.connect(":memory:")
    db.setlimit(sqlite3.SQLITE_LIMIT_VARIABLE_NUMBER, 100)   # 12 rows of 8 parameters fit
    most = _statement_rows(db)
    db.close()
    assert most == 8
    sizes = list(_statement_sizes(1000, most))
    assert sum(sizes) == 1000 and max(sizes) == 8
