"""Helpers for the store tests.

The shared ``victoria`` fixture (tests/servers.py) runs victoria-metrics with
``-dedup.minScrapeInterval=1ms``: it keeps one sample per series and time, as
InfluxDB overwrites a rewritten point, so idempotent re-sends can be checked.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path

import numpy as np
import pytest

from probeflow.batch import ProcessedBatch, Quality
from probeflow.stores.base import StoreContext
from probeflow.stores.influx import InfluxStore, InfluxStoreConfig

T0 = 1764633600.0  # 2025-12-02T00:00:00Z, an invented demo day


def make_batch(
    probes: Sequence[str],
    ts: Sequence[float],
    *,
    ph: Sequence[float] | None = None,
    mv: Sequence[float] | None = None,
    temp_c: Sequence[float] | None = None,
    neutral_ph: Sequence[float] | None = None,
    neutral_dev: Sequence[float] | None = None,
    quality: Sequence[int] | None = None,
) -> ProcessedBatch:
    """A ProcessedBatch built directly from columns (defaults: invented, plausible values)."""
    n = len(ts)
    idx = np.arange(n, dtype=np.float64)

    def col(values: Sequence[float] | None, default: np.ndarray) -> np.ndarray:
        return default if values is None else np.asarray(values, dtype=np.float64)

    return ProcessedBatch(
        probe=np.asarray(probes, dtype=object),
        ts=np.asarray(ts, dtype=np.float64),
        mv=col(mv, -12.25 - idx * 0.5),
        temp_c=col(temp_c, 25.0 + idx * 0.125),
        ph=col(ph, 7.25 + idx * 0.01),
        neutral_ph=col(neutral_ph, np.full(n, 6.997)),
        neutral_dev=col(neutral_dev, 0.25 + idx * 0.01),
        quality=np.asarray(quality if quality is not None else [Quality.GOOD] * n, dtype=np.uint8),
    )


@pytest.fixture
def store_factory(tmp_path: Path) -> Iterator[Callable[..., InfluxStore]]:
    """Builds InfluxStores with short retry delays; closes them after the test."""
    made: list[InfluxStore] = []

    def factory(url: str, **overrides: object) -> InfluxStore:
        settings: dict[str, object] = {
            "type": "influx", "url": url, "org": "works", "bucket": "ph",
            "token": "unit-test-token-not-secret",
            "outbox_path": str(tmp_path / "outbox.sqlite"),
            "retry_initial_s": 0.05, "retry_max_s": 0.4, "timeout_s": 5.0, "flush_timeout_s": 30.0,
        }
        settings.update(overrides)
        store = InfluxStore(InfluxStoreConfig(**settings), StoreContext("north-weir", logging.getLogger("test.influx")))
        made.append(store)
        return store

    yield factory
    for store in made:
        store.close()
