"""Helpers for the rules tests: ProcessedBatch objects built directly from rows.

A plain module (not conftest) so test files import it by a name no other test folder uses."""

from __future__ import annotations

import numpy as np

from probeflow.batch import ProcessedBatch

T0 = 1_764_633_600.0  # 2025-12-02T00:00:00Z, an arbitrary origin for hand-made sequences


def batch_of(rows: list[tuple], quantity: str = "ph") -> ProcessedBatch:
    """Rows (probe, t_offset_s, value[, quality]) -> a ProcessedBatch; the value goes in ``quantity``.

    Other columns get plausible constant values (mv 0, 25 °C, neutral pH 7).
    """
    n = len(rows)
    probe = np.array([r[0] for r in rows], dtype=object)
    ts = np.array([T0 + r[1] for r in rows], dtype=np.float64)
    val = np.array([r[2] for r in rows], dtype=np.float64)
    quality = np.array([r[3] if len(r) > 3 else 0 for r in rows], dtype=np.uint8)
    cols = {"mv": np.zeros(n), "temp_c": np.full(n, 25.0), "ph": np.full(n, 7.0),
            "neutral_ph": np.full(n, 7.0), "neutral_dev": np.zeros(n)}
    cols[quantity] = val
    if quantity == "ph":
        cols["neutral_dev"] = val - 7.0
    return ProcessedBatch(probe, ts, cols["mv"], cols["temp_c"], cols["ph"], cols["neutral_ph"],
                          cols["neutral_dev"], quality)


def times(events, kind: str | None = None) -> list[tuple[str, float]]:
    """(event, t offset) pairs, optionally only one event kind."""
    return [(e.event, round(e.ts - T0, 6)) for e in events if kind is None or e.event == kind]
