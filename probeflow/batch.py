"""The data that flows between pipeline stages, as numpy columns.

``Collector -> ReadingBatch -> Converter -> ProcessedBatch -> Rules -> Stores``

Readings move in micro-batches of columns, never as one Python object per
reading, so every stage can work vectorised.  Times are float64 epoch seconds
(UTC); absent values are NaN.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from enum import IntEnum

import numpy as np

__all__ = [
    "QUALITY_NAMES",
    "CommitHook",
    "ProcessedBatch",
    "Quality",
    "QuarantineItem",
    "ReadingBatch",
    "factorize_probe_ids",
]

CommitHook = Callable[[], None]
"""Called once the batch it rides on is durably committed (e.g. an MQTT ack)."""


class Quality(IntEnum):
    """Quality flag carried by every processed reading (stored by name)."""

    GOOD = 0
    UNCALIBRATED = 1
    TEMP_FAULT = 2
    MV_OUT_OF_RANGE = 3
    MAINTENANCE = 4


QUALITY_NAMES: tuple[str, ...] = tuple(q.name.lower() for q in Quality)
"""Index by the uint8 quality code to get its name (``good``, ``temp_fault`` ...)."""


def _f64(values: Iterable[float] | np.ndarray) -> np.ndarray:
    return np.asarray(values, dtype=np.float64)


def _obj(values: Iterable[str] | np.ndarray) -> np.ndarray:
    arr = np.asarray(values, dtype=object)
    return arr


@dataclass(frozen=True, slots=True)
class ReadingBatch:
    """Raw readings as they arrive: one row per reading.

    probe   object array of probe ids (str)
    ts      float64 epoch seconds, UTC (time of measurement, or of arrival)
    mv      float64 electrode potential [mV]
    temp_c  float64 temperature [°C]; NaN when the reading carried none
    ohms    float64 RTD resistance [Ω]; NaN when the reading carried none
    on_committed  hooks to call after the batch is durably stored (acks)
    """

    probe: np.ndarray
    ts: np.ndarray
    mv: np.ndarray
    temp_c: np.ndarray
    ohms: np.ndarray
    on_committed: tuple[CommitHook, ...] = field(default=())

    def __len__(self) -> int:
        return int(self.ts.shape[0])

    @classmethod
    def empty(cls) -> ReadingBatch:
        e = np.empty(0, dtype=np.float64)
        return cls(np.empty(0, dtype=object), e, e.copy(), e.copy(), e.copy())

    @classmethod
    def from_columns(
        cls,
        probe: Sequence[str] | np.ndarray,
        ts: Sequence[float] | np.ndarray,
        mv: Sequence[float] | np.ndarray,
        temp_c: Sequence[float] | np.ndarray | None = None,
        ohms: Sequence[float] | np.ndarray | None = None,
        on_committed: tuple[CommitHook, ...] = (),
    ) -> ReadingBatch:
        ts_a = _f64(ts)
        n = ts_a.shape[0]
        nan = np.full(n, np.nan)
        return cls(
            probe=_obj(probe),
            ts=ts_a,
            mv=_f64(mv),
            temp_c=nan.copy() if temp_c is None else _f64(temp_c),
            ohms=nan.copy() if ohms is None else _f64(ohms),
            on_committed=on_committed,
        )

    @classmethod
    def from_records(
        cls, records: Sequence[Mapping[str, object]], on_committed: tuple[CommitHook, ...] = ()
    ) -> ReadingBatch:
        """Build from already-validated dicts with keys probe, ts, mv and optional temp_c, ohms."""
        nan = math.nan
        return cls.from_columns(
            [r["probe"] for r in records],
            [r["ts"] for r in records],  # type: ignore[misc]
            [r["mv"] for r in records],  # type: ignore[misc]
            [r.get("temp_c", nan) if r.get("temp_c") is not None else nan for r in records],  # type: ignore[misc]
            [r.get("ohms", nan) if r.get("ohms") is not None else nan for r in records],  # type: ignore[misc]
            on_committed,
        )

    @staticmethod
    def concat(batches: Sequence[ReadingBatch]) -> ReadingBatch:
        if not batches:
            return ReadingBatch.empty()
        if len(batches) == 1:
            return batches[0]
        hooks: tuple[CommitHook, ...] = tuple(h for b in batches for h in b.on_committed)
        return ReadingBatch(
            probe=np.concatenate([b.probe for b in batches]),
            ts=np.concatenate([b.ts for b in batches]),
            mv=np.concatenate([b.mv for b in batches]),
            temp_c=np.concatenate([b.temp_c for b in batches]),
            ohms=np.concatenate([b.ohms for b in batches]),
            on_committed=hooks,
        )


@dataclass(frozen=True, slots=True)
class ProcessedBatch:
    """Converted readings: the raw columns plus pH, neutral pH and quality.

    temp_c is the temperature actually used (from the sensor, the RTD or the
    probe's fixed temperature).  ph is never clipped.  quality holds uint8
    codes of :class:`Quality`.
    """

    probe: np.ndarray
    ts: np.ndarray
    mv: np.ndarray
    temp_c: np.ndarray
    ph: np.ndarray
    neutral_ph: np.ndarray
    neutral_dev: np.ndarray
    quality: np.ndarray
    on_committed: tuple[CommitHook, ...] = field(default=())

    def __len__(self) -> int:
        return int(self.ts.shape[0])

    def column(self, quantity: str) -> np.ndarray:
        """The column for a rule quantity name: ph, neutral_dev, temp_c, mv, neutral_ph."""
        if quantity not in ("ph", "neutral_dev", "temp_c", "mv", "neutral_ph"):
            raise KeyError(quantity)
        return getattr(self, quantity)  # type: ignore[no-any-return]

    def quality_names(self) -> list[str]:
        return [QUALITY_NAMES[int(q)] for q in self.quality]

    def select(self, mask: np.ndarray) -> ProcessedBatch:
        """Rows where ``mask`` is true (hooks are kept with the parent batch)."""
        return ProcessedBatch(
            self.probe[mask], self.ts[mask], self.mv[mask], self.temp_c[mask],
            self.ph[mask], self.neutral_ph[mask], self.neutral_dev[mask], self.quality[mask],
        )

    @staticmethod
    def concat(batches: Sequence[ProcessedBatch]) -> ProcessedBatch:
        if len(batches) == 1:
            return batches[0]
        names = ("probe", "ts", "mv", "temp_c", "ph", "neutral_ph", "neutral_dev", "quality")
        cols = {n: np.concatenate([getattr(b, n) for b in batches]) for n in names}
        hooks = tuple(h for b in batches for h in b.on_committed)
        return ProcessedBatch(**cols, on_committed=hooks)


@dataclass(frozen=True, slots=True)
class QuarantineItem:
    """One rejected input kept aside with the reason (never silently dropped)."""

    source: str      # collector name, e.g. "mqtt:plant/+/reading" or "serial:/dev/ttyUSB0"
    reason: str      # what was wrong, for a technician
    raw: str         # the raw text (invalid UTF-8 kept as backslash escapes)
    received_ts: float


def factorize_probe_ids(probe: np.ndarray, *, sort: bool) -> tuple[np.ndarray, list[str]] | None:
    """``(codes, ids)``: each row's index in the list of distinct probe ids (in
    order of first appearance, or sorted), without pandas; None unless every id
    is a ``str`` (callers then take their general path).  C-level dict work:
    faster than ``pandas.factorize`` up to a few thousand rows, about 1.5x slower
    at 100,000 (0.5 ms more)."""
    ids = probe.tolist()
    try:
        distinct = list(dict.fromkeys(ids))
    except TypeError:   # an unhashable id
        return None
    if not all(type(p) is str for p in distinct):
        return None     # None or numbers (7, 7.0 and True are one dict key)
    if sort:
        distinct.sort()
    position = {p: i for i, p in enumerate(distinct)}
    codes = np.fromiter(map(position.__getitem__, ids), dtype=np.intp, count=len(ids))
    return codes, distinct
