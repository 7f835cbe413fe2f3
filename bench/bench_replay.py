"""Benchmark: ``probeflow replay`` of a Parquet recording into SQLite, as fast as possible.

An invented recording of N readings (default 500,000) of 1,000 probes in
Parquet (probe, ts, mv, temp_c); ``probeflow replay REC --config C`` with
the SQLite store only and ``--speed 0``, as a subprocess.  Baseline, also a
subprocess: ``baselines.py parquet-sqlite``, pyarrow reading the same file and
executemany writing rows of the same width into the same table shape,
10,000 rows per transaction, no validation, conversion or rules.  Both
include interpreter start-up.  Median of the repeats (interleaved) as readings
per second, and the ratio (target >= 0.7).

Run:  .venv/bin/python bench/bench_replay.py [--readings N] [--repeat R] [--full]
"""

from __future__ import annotations

import argparse
import sqlite3
import subprocess
import tempfile
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
from harness import PYTHON, REPO, interleaved, make_readings, result, write_config

N_PROBES = 1000


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readings", type=int, default=500_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--full", action="store_true", help="2 million readings")
    args = ap.parse_args()
    n = 2_000_000 if args.full else args.readings
    with tempfile.TemporaryDirectory(prefix="bench-replay-") as tmp:
        tmpdir = Path(tmp)
        recording = tmpdir / "recording.parquet"
        cols = make_readings(n, N_PROBES)
        pq.write_table(pa.table({k: (v.tolist() if k == "probe" else v) for k, v in cols.items()}),
                       recording)
        counter = iter(range(1000))
        last: dict[str, Path] = {}

        def ours() -> None:
            db = tmpdir / f"ours-{next(counter)}.sqlite"
            config = write_config(tmpdir / "replay.yaml", N_PROBES,
                                  stores=[{"type": "sqlite", "path": str(db)}])
            subprocess.run([PYTHON, "-m", "probeflow", "replay", str(recording), "--config",
                            str(config), "--speed", "0"], check=True,
                           stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
            last["ours"] = db

        def bare() -> None:
            db = tmpdir / f"bare-{next(counter)}.sqlite"
            subprocess.run([PYTHON, str(REPO / "bench" / "baselines.py"), "parquet-sqlite",
                            str(recording), str(db)], check=True)
            last["bare"] = db

        medians = interleaved({"ours": ours, "bare": bare}, args.repeat)
        for name, db in last.items():
            stored = sqlite3.connect(db).execute("SELECT count(*) FROM readings").fetchone()[0]
            if stored != n:
                raise RuntimeError(f"{name}: {stored} rows stored, expected {n}")
    ours_rate, bare_rate = n / medians["ours"], n / medians["bare"]
    ratio = ours_rate / bare_rate
    print(f"probeflow replay (Parquet -> SQLite): {ours_rate:12,.0f} readings/s  ({medians['ours']:.2f} s)")
    print(f"bare pyarrow + executemany          : {bare_rate:12,.0f} readings/s  ({medians['bare']:.2f} s)")
    print(f"ratio {ratio:.2f} (target >= 0.7); {n:,} readings, {N_PROBES} probes, median of {args.repeat}")
    result("replay Parquet -> SQLite", f"{ours_rate:,.0f} readings/s", f"{bare_rate:,.0f} rows/s", ratio,
           ">= 0.7x", f"{n:,} readings")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
