"""Benchmark: the SQLite store's write path against a bare executemany.

N processed readings (default 500,000) of 1,000 probes, written in batches of
B rows (default 10,000), each batch one transaction, into a fresh file per
run (WAL, synchronous=NORMAL, unique index on probe and time).  Ours:
``SqliteStore.write`` from numpy columns (row tuples built from the columns,
quality codes named, alerts table touched).  Baseline: ``bare_executemany``
of the same rows already prepared as tuples (its preparation is not timed).
Median of the repeats (interleaved) as rows per second, and the ratio.

Run:  .venv/bin/python bench/bench_sqlite.py [--readings N] [--batch B] [--repeat R]
"""

from __future__ import annotations

import argparse
import math
import tempfile
from pathlib import Path

import numpy as np
from baselines import bare_executemany, bare_readings_table
from harness import interleaved, make_readings, result

from probeflow.batch import QUALITY_NAMES, ProcessedBatch
from probeflow.stores.sqlite import SqliteStore, SqliteStoreConfig

N_PROBES = 1000


def make_batches(n: int, batch: int) -> list[ProcessedBatch]:
    """Invented processed readings, a few with quality flags and NaN temperature."""
    cols = make_readings(n, N_PROBES)
    rng = np.random.default_rng(4)
    temp = cols["temp_c"].copy()
    temp[rng.random(n) < 0.001] = np.nan
    ph = 7.0 - cols["mv"] / 58.0
    neutral = 7.0 - 0.0165 * (temp - 25.0)
    quality = np.where(rng.random(n) < 0.01, 1, 0).astype(np.uint8)
    quality[np.isnan(temp)] = 2
    full = ProcessedBatch(cols["probe"], cols["ts"], cols["mv"], temp, ph, neutral, ph - neutral,
                          quality)
    return [full.select(slice(i, i + batch)) for i in range(0, n, batch)]


def rows_of(b: ProcessedBatch) -> list[tuple[object, ...]]:
    names = QUALITY_NAMES
    return [(p, t, m, c, h, u, d, names[q]) for p, t, m, c, h, u, d, q in zip(
        b.probe.tolist(), b.ts.tolist(), b.mv.tolist(),
        [None if math.isnan(x) else x for x in b.temp_c.tolist()], b.ph.tolist(),
        [None if math.isnan(x) else x for x in b.neutral_ph.tolist()],
        [None if math.isnan(x) else x for x in b.neutral_dev.tolist()], b.quality.tolist())]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readings", type=int, default=500_000)
    ap.add_argument("--batch", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--full", action="store_true", help="2 million readings")
    args = ap.parse_args()
    n = 2_000_000 if args.full else args.readings
    batches = make_batches(n, args.batch)
    rows = [r for b in batches for r in rows_of(b)]
    with tempfile.TemporaryDirectory(prefix="bench-sqlite-") as tmp:
        counter = iter(range(10_000))

        def ours() -> None:
            store = SqliteStore(SqliteStoreConfig(path=f"{tmp}/ours-{next(counter)}.sqlite"))
            for b in batches:
                store.write(b, ())
            store.close()

        def bare() -> None:
            db = bare_readings_table(Path(tmp) / f"bare-{next(counter)}.sqlite")
            bare_executemany(db, rows, args.batch)
            db.close()

        medians = interleaved({"ours": ours, "bare": bare}, args.repeat)
        # both files hold the same rows
        import sqlite3
        last = max(Path(tmp).glob("ours-*.sqlite"))
        stored = sqlite3.connect(last).execute("SELECT count(*) FROM readings").fetchone()[0]
        if stored != n:
            raise RuntimeError(f"the store holds {stored} rows, expected {n}")
    ours_rate, bare_rate = n / medians["ours"], n / medians["bare"]
    ratio = ours_rate / bare_rate
    print(f"SqliteStore.write      : {ours_rate:12,.0f} rows/s  ({medians['ours']:.2f} s)")
    print(f"bare executemany       : {bare_rate:12,.0f} rows/s  ({medians['bare']:.2f} s)")
    print(f"ratio {ratio:.2f}; {n:,} rows in batches of {args.batch:,}, median of {args.repeat}")
    result("SQLite store write", f"{ours_rate:,.0f} rows/s", f"{bare_rate:,.0f} rows/s", ratio,
           "(>= 0.7x, as replay)", f"{n:,} rows, batches of {args.batch:,}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
