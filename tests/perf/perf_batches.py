"""Invented processed batches for the fast-path tests (helpers, not fixtures)."""

from __future__ import annotations

import numpy as np

from probeflow.batch import ProcessedBatch


def processed_batch(n: int, seed: int, *, probes: list[str] | None = None,
                    ts: np.ndarray | None = None) -> ProcessedBatch:
    """Invented processed readings with NaNs, every quality code and awkward floats."""
    rng = np.random.default_rng(seed)
    names = probes or ["tank-3", "basin-1", "weir/7", 'odd "quoted" \\ id', "t\u00e9st-\u00b5", "x"]
    def column(scale: float) -> np.ndarray:
        values = rng.normal(0.0, scale, n)
        values[rng.random(n) < 0.05] = np.nan
        values[rng.random(n) < 0.05] = 0.0
        pick = rng.random(n) < 0.05
        values[pick] = rng.choice([1e-7, -2.5e-12, 1e16, 123456789.0, 5e-324, -0.0], pick.sum())
        return values
    if ts is None:
        ts = 1_764_633_600.0 + np.cumsum(rng.exponential(0.01, n))
    return ProcessedBatch(
        probe=np.array([names[i] for i in rng.integers(0, len(names), n)], dtype=object),
        ts=np.asarray(ts, dtype=np.float64), mv=column(100.0), temp_c=column(20.0),
        ph=column(3.0), neutral_ph=column(1.0), neutral_dev=column(1.0),
        quality=rng.integers(0, 5, n).astype(np.uint8),
    )
