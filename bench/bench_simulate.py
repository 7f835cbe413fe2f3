"""Simulator speed: readings per second generated into a Parquet file, against a bare baseline.

The baseline writes the same number of rows of plain ``numpy`` normal numbers
(five float64 columns) to Parquet with the same compression (lz4, the default): the cost of
the file alone.  Random normals compress worse than readings, so the baseline
is no upper bound; it is the yardstick that makes figures comparable between
machines.  The ratio says how much the physics costs on top.  Median of
repeats; run with ``.venv/bin/python bench/bench_simulate.py``.
"""

from __future__ import annotations

import argparse
import os
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from probeflow.simulate.generator import Simulation
from probeflow.simulate.outputs.files import ParquetOutput
from probeflow.simulate.run import file_metadata, run_simulation
from probeflow.simulate.scenario import Scenario, scenario_from_mapping

PROBES = 12


def bench_scenario(probes: int = PROBES) -> Scenario:
    """Three streams, ``probes`` probes sampling every second, drifting and ageing, with
    one electrode fault each on a few probes (invented bench site)."""
    streams = {
        f"line-{i}": {
            "ph": {"set_point": 7.0 + 0.3 * i, "disturbance": {"sigma": 0.2, "tau": "20min"},
                   "waves": [{"amplitude": 0.1, "period": "6h"}],
                   "events": [{"kind": "step", "at": "2h", "delta": -0.5, "duration": "1h"},
                              {"kind": "excursion", "at": "5h", "to": 10.5}]},
            "temperature": {"set_point": 20 + 15 * i, "disturbance": {"sigma": 2, "tau": "1h"}},
        }
        for i in range(3)
    }
    faults = [
        [{"kind": "coated", "at": "3h", "duration": "2h"}],
        [{"kind": "flatline", "at": "4h", "duration": "30min"}],
        [{"kind": "dropout", "at": "1h", "duration": "10min"}],
        [],
    ]
    plist = [
        {"id": f"bench-{i:02d}", "stream": f"line-{i % 3}",
         "electrode": {"offset_mv": 2.0, "offset_drift_mv_per_day": 1.0, "slope_pct": 98.0,
                       "slope_loss_pct_per_month": 0.5, "response": "8s", "noise_mv": 0.3},
         "faults": faults[i % 4]}
        for i in range(probes)
    ]
    return scenario_from_mapping({"site": "Bench Works", "site_id": "bench",
                                  "start": "2026-01-01T00:00:00Z", "streams": streams,
                                  "probes": plist}, "<bench>")


def run_simulator(path: Path, duration_ms: int, seed: int) -> tuple[int, float, float]:
    """(readings, wall seconds, CPU seconds of this process)."""
    sim = Simulation(bench_scenario(), seed, duration_ms=duration_ms)
    t0, c0 = time.perf_counter(), time.process_time()
    out = ParquetOutput(path, file_metadata(sim))
    summary = run_simulation(sim, [out])
    out.close()
    return summary.delivered, time.perf_counter() - t0, time.process_time() - c0


def run_baseline(path: Path, rows: int, chunk: int) -> tuple[float, float]:
    """(wall seconds, CPU seconds)."""
    rng = np.random.default_rng(1)
    t0, c0 = time.perf_counter(), time.process_time()
    schema = pa.schema([(n, pa.float64()) for n in ("probe", "ts", "mv", "temp_c", "ohms")])
    with pq.ParquetWriter(path, schema, compression="lz4", use_dictionary=False,
                          write_statistics=["ts"]) as writer:
        for i in range(0, rows, chunk):
            n = min(chunk, rows - i)
            cols = [pa.array(rng.standard_normal(n)) for _ in range(5)]
            writer.write_table(pa.Table.from_arrays(cols, schema=schema))
    return time.perf_counter() - t0, time.process_time() - c0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--hours", type=float, default=96.0, help="simulated hours per run")
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    duration_ms = int(args.hours * 3_600_000)
    sim_times: list[float] = []
    base_times: list[float] = []
    sim_cpu: list[float] = []
    base_cpu: list[float] = []
    rows = 0
    with tempfile.TemporaryDirectory() as tmp:
        # warm-up (imports, pyarrow kernels, page cache), not counted
        run_simulator(Path(tmp) / "sim.parquet", 3_600_000, seed=99)
        run_baseline(Path(tmp) / "base.parquet", 100_000, 1 << 19)
        for r in range(args.repeats):
            rows, dt, cpu = run_simulator(Path(tmp) / "sim.parquet", duration_ms, seed=r)
            sim_times.append(dt)
            sim_cpu.append(cpu)
            dt, cpu = run_baseline(Path(tmp) / "base.parquet", rows, 1 << 19)
            base_times.append(dt)
            base_cpu.append(cpu)
    sim_s = statistics.median(sim_times)
    base_s = statistics.median(base_times)
    load = os.getloadavg()[0]
    print(f"readings per run:        {rows:,} ({PROBES} probes, {args.hours:g} h at 1 s)")
    print(f"simulator -> Parquet:    {rows / sim_s / 1e6:6.2f} M readings/s (median of {args.repeats})")
    print(f"baseline  -> Parquet:    {rows / base_s / 1e6:6.2f} M rows/s (numpy normal, 5 columns)")
    print(f"simulator / baseline:    {base_s / sim_s:6.2f} (share of the bare file speed)")
    print(f"CPU per reading:         simulator {statistics.median(sim_cpu) / rows * 1e9:.0f} ns, "
          f"baseline {statistics.median(base_cpu) / rows * 1e9:.0f} ns (all threads)")
    print(f"load average at the end: {load:.2f} on {os.cpu_count()} CPUs (other work slows both)")


if __name__ == "__main__":
    main()
