"""An invented demo stream for the rules tests: three probes on one channel (no real site)."""

from __future__ import annotations

import numpy as np
from rules_support import T0

from probeflow.batch import ProcessedBatch


def recording(n=6000, seed=3) -> ProcessedBatch:
    """Invented demo stream: three probes on one channel, with excursions, a gap and a fault."""
    rng = np.random.default_rng(seed)
    rows_p, rows_t, rows_v, rows_q = [], [], [], []
    for k, p in enumerate(("p-1", "p-2", "p-3")):
        t = T0 + np.arange(n) * 5.0 + k * 0.7
        walk = 7.5 + 0.8 * np.sin(np.arange(n) / 150.0) + np.cumsum(rng.normal(0, 0.01, n))
        v = walk + rng.normal(0, 0.05, n) + (0.6 if p == "p-3" else 0.0) * (np.arange(n) > n // 2)
        q = np.where(rng.random(n) < 0.02, 2, 0)
        keep = ~((np.arange(n) > 1000) & (np.arange(n) < 1050) & (k == 1))  # a gap on p-2
        rows_p += [p] * int(keep.sum())
        rows_t.append(t[keep])
        rows_v.append(v[keep])
        rows_q.append(q[keep])
    t = np.concatenate(rows_t)
    order = np.argsort(t, kind="stable")
    ph = np.concatenate(rows_v)[order]
    m = ph.shape[0]
    return ProcessedBatch(np.array(rows_p, dtype=object)[order], t[order], (7 - ph) * 59.16,
                          np.full(m, 25.0), ph, np.full(m, 7.0), ph - 7.0,
                          np.concatenate(rows_q)[order].astype(np.uint8))
