"""Benchmark: backtest of band rules against a bare numpy comparison pass.

An invented recording of N readings (default 10 million) from 20 probes in
time order, with slow excursions so alarms really happen, is fed in chunks of
1 million readings (as ``probeflow backtest`` does) through 20 band rules,
each with low and high limits, a deadband and on/off delays.

Two rule layouts are timed:

* ``per-probe``: each rule watches one probe (a typical site: one band per
  measuring point), so each reading meets one rule;
* ``all-probes``: each rule watches every probe (the worst case: each reading
  meets 20 rules, 40 limits).

The baseline is the plainest numpy that still looks at every reading once
per rule limit: ``(x > limit)`` over the whole array, once per limit that a
reading meets (2 passes for per-probe, 40 for all-probes).  Reports the
median of repeats as readings per second and the ratio backtest / baseline.

A third line times the live path: ``Engine.process`` (rules plus the alarm
lifecycle) over the first million readings in micro-batches of 2,000.

Run:  .venv/bin/python bench/bench_backtest.py [--readings N] [--repeat R]
"""

from __future__ import annotations

import argparse
import statistics
import time
from collections.abc import Callable
from functools import partial

import numpy as np

from probeflow.batch import ProcessedBatch
from probeflow.rules import build_rule_engine, parse_rules_config
from probeflow.rules.backtest import Backtest
from probeflow.rules.config import RulesConfig

N_PROBES = 20
CHUNK = 1_000_000
LIVE_BATCH = 2_000


def make_recording(n: int, seed: int = 7) -> ProcessedBatch:
    """Invented demo data: 20 probes read in turn every 0.05 s each, pH wandering around 7.5."""
    rng = np.random.default_rng(seed)
    idx = np.arange(n)
    probe_names = np.array([f"cell-{k:02d}" for k in range(N_PROBES)], dtype=object)
    probe = probe_names[idx % N_PROBES]
    ts = 1_764_633_600.0 + idx * (1.0 / N_PROBES) * 0.05
    slow = 1.2 * np.sin(idx / 2.0e5 + (idx % N_PROBES)) + 0.3 * np.sin(idx / 7.0e3)
    ph = 7.5 + slow + rng.normal(0.0, 0.03, n)
    quality = np.where(rng.random(n) < 0.001, 2, 0).astype(np.uint8)
    z = np.zeros(n)
    return ProcessedBatch(probe, ts, (7.0 - ph) * 59.16, z + 25.0, ph, z + 7.0, ph - 7.0, quality)


def rules(layout: str) -> dict[str, list[dict[str, object]]]:
    out = []
    for k in range(20):
        globs = [f"cell-{k:02d}"] if layout == "per-probe" else ["cell-*"]
        out.append({"id": f"band-{k:02d}", "probes": globs, "quantity": "ph",
                    "low": 6.6 + 0.01 * k, "high": 8.4 - 0.01 * k, "deadband": 0.05,
                    "on_delay_s": 2.0, "off_delay_s": 1.0})
    return {"bands": out}


def time_median(fn: Callable[[], object], repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def run_backtest(cfg: RulesConfig, chunks: list[ProcessedBatch]) -> int:
    bt = Backtest(cfg)
    for c in chunks:
        bt.feed(c)
    return sum(s.activations for s in bt.finish().values())


def run_live(cfg: RulesConfig, batches: list[ProcessedBatch]) -> int:
    eng = build_rule_engine(cfg)
    return sum(len(eng.process(b)) for b in batches)


def bare_compare(x: np.ndarray, passes: int) -> None:
    for k in range(passes):
        np.count_nonzero(x > 8.4 - 0.01 * (k % 20))


def main() -> None:
    ap = argparse.ArgumentParser(description=(__doc__ or "").split("\n")[0])
    ap.add_argument("--readings", type=int, default=10_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    n = args.readings
    rec = make_recording(n)
    idx = np.arange(n)
    chunks = [rec.select(idx[a:a + CHUNK]) for a in range(0, n, CHUNK)]
    print(f"{n:,} readings, {N_PROBES} probes, 20 band rules (low + high), chunks of {CHUNK:,}; "
          f"median of {args.repeat}")
    for layout, passes in (("per-probe", 2), ("all-probes", 40)):
        cfg = parse_rules_config(rules(layout))
        t_bt = time_median(partial(run_backtest, cfg, chunks), args.repeat)
        t_base = time_median(partial(bare_compare, rec.ph, passes), args.repeat)
        print(f"{layout:>10}: backtest {n / t_bt / 1e6:6.2f} M readings/s ({t_bt:.2f} s, "
              f"{run_backtest(cfg, chunks[:1])} activations in the first chunk); "
              f"bare (x > limit) x{passes}: {n / t_base / 1e6:7.1f} M/s; time ratio {t_bt / t_base:.1f}")
    # the live path: the same engine in micro-batches, with the alarm lifecycle
    m = min(n, 1_000_000)
    batches = [rec.select(idx[a:min(a + LIVE_BATCH, m)]) for a in range(0, m, LIVE_BATCH)]
    cfg = parse_rules_config(rules("per-probe"))
    t_live = time_median(partial(run_live, cfg, batches), args.repeat)
    t_base = time_median(partial(bare_compare, rec.ph[:m], 2), args.repeat)
    print(f"      live: Engine.process in batches of {LIVE_BATCH:,}, per-probe rules: "
          f"{m / t_live / 1e6:6.2f} M readings/s ({t_live / m * 1e6:.2f} us per reading); "
          f"time ratio to bare x2 {t_live / t_base:.0f}")


if __name__ == "__main__":
    main()
