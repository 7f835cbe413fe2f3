"""Benchmark: full conversion (pH, neutral pH, deviation) against a bare Nernst pass.

10 million readings of 1,000 probes, per-probe calibration gathered by probe
index, float64 throughout.  The baseline is the plainest numpy expression of
the Nernst step alone on the same arrays (gather the calibration, compute pH);
the full conversion adds the neutral pH (table look-up) and the deviation.
Reports the median of several repetitions as readings per second and the
ratio full / bare (target: at most 3).

Run:  .venv/bin/python bench/bench_convert.py [--readings N] [--repeat R]
"""

from __future__ import annotations

import argparse
import statistics
import time
from collections.abc import Callable

import numpy as np

from probeflow.chemistry import ReadingConverter, convert_readings, neutral_ph
from probeflow.chemistry.nernst import NERNST_MV_PER_K


def make_inputs(n_readings: int, n_probes: int, seed: int = 2) -> dict[str, np.ndarray]:
    """Invented demo data: random probes, potentials and temperatures."""
    rng = np.random.default_rng(seed)
    return {
        "index": rng.integers(0, n_probes, n_readings).astype(np.intp),
        "mv": rng.uniform(-400.0, 400.0, n_readings),
        "temp_c": rng.uniform(5.0, 90.0, n_readings),
        "offset_mv": rng.normal(0.0, 10.0, n_probes),
        "slope_pct": rng.uniform(92.0, 102.0, n_probes),
        "zero_ph": np.full(n_probes, 7.0),
    }


def bare_nernst(d: dict[str, np.ndarray]) -> np.ndarray:
    """The baseline: one plain numpy expression, Nernst step only."""
    i = d["index"]
    return d["zero_ph"][i] + (d["offset_mv"][i] - d["mv"]) / (
        d["slope_pct"][i] * 0.01 * NERNST_MV_PER_K * (d["temp_c"] + 273.15)
    )


def median_seconds(func: Callable[[], object], repeat: int) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--readings", type=int, default=10_000_000)
    parser.add_argument("--probes", type=int, default=1000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()

    d = make_inputs(args.readings, args.probes)
    converter = ReadingConverter(d["offset_mv"], d["slope_pct"], d["zero_ph"])

    # Correctness first: the fast path must agree with the plain formulas.
    check = slice(0, 100_000)
    ph, pn, dev = converter.convert(d["index"][check], d["mv"][check], d["temp_c"][check])
    ref_ph = bare_nernst({k: (v[check] if v.size == args.readings else v) for k, v in d.items()})
    ref_pn = np.asarray(neutral_ph(d["temp_c"][check]))
    print(f"check: max |pH - bare| = {np.max(np.abs(ph - ref_ph)):.2e}, "
          f"max |pN - direct| = {np.max(np.abs(pn - ref_pn)):.2e}")

    def functional() -> object:
        i = d["index"]
        return convert_readings(d["mv"], d["temp_c"], d["offset_mv"][i],
                                d["slope_pct"][i], d["zero_ph"][i])

    bare = median_seconds(lambda: bare_nernst(d), args.repeat)
    full = median_seconds(lambda: converter.convert(d["index"], d["mv"], d["temp_c"]), args.repeat)
    func = median_seconds(functional, args.repeat)
    n = args.readings
    print(f"readings: {n:,} of {args.probes:,} probes, median of {args.repeat}")
    print(f"bare Nernst (pH only)               : {n / bare / 1e6:8.1f} M readings/s  ({bare:.3f} s)")
    print(f"ReadingConverter (pH, pN, deviation): {n / full / 1e6:8.1f} M readings/s  ({full:.3f} s)"
          f"  ratio {full / bare:.2f}x")
    print(f"convert_readings (functional)       : {n / func / 1e6:8.1f} M readings/s  ({func:.3f} s)"
          f"  ratio {func / bare:.2f}x")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
