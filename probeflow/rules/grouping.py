"""A processed batch regrouped by probe, each probe's rows sorted by time.

Every rule works on this view: rows of one probe form a contiguous segment,
so run-length logic is plain numpy over the whole batch.  Readings that
repeat a (probe, ts) already seen, or arrive older than the newest reading
already processed for their probe, are dropped here (and counted): rule state
moves forward in time only, and a redelivered reading never counts twice.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from probeflow.batch import ProcessedBatch, factorize_probe_ids

__all__ = ["GroupedBatch", "QuantityView", "compress_view", "factorize_sorted", "group_batch"]


@dataclass(slots=True)
class QuantityView:
    """Good, finite rows of one quantity: segments of probes, time-sorted."""

    probes: list[str]
    seg_starts: np.ndarray
    t: np.ndarray
    v: np.ndarray
    _seg_id: np.ndarray | None = None

    def seg_id(self) -> np.ndarray:
        """Segment number of every row (computed once)."""
        if self._seg_id is None:
            lens = np.diff(np.append(self.seg_starts, self.t.shape[0]))
            self._seg_id = np.repeat(np.arange(lens.shape[0], dtype=np.int64), lens)
        return self._seg_id

    def select(self, wanted: np.ndarray) -> QuantityView:
        """Only the segments whose flag in ``wanted`` (per segment) is true.

        Copies only the rows kept (a plain slice when the kept segments are
        adjacent), so a rule on a few probes costs in proportion to them.
        """
        if wanted.all():
            return self
        keep = np.flatnonzero(wanted)
        if keep.shape[0] == 0:
            return QuantityView([], np.empty(0, np.int64), self.t[:0], self.v[:0])
        ends = np.append(self.seg_starts[1:], self.t.shape[0])
        starts_k, ends_k = self.seg_starts[keep], ends[keep]
        probes = [self.probes[k] for k in keep.tolist()]
        lens = ends_k - starts_k
        new_starts = np.concatenate([[0], np.cumsum(lens)[:-1]]).astype(np.int64)
        if np.all(keep[1:] == keep[:-1] + 1):
            a, b = int(starts_k[0]), int(ends_k[-1])
            return QuantityView(probes, new_starts, self.t[a:b], self.v[a:b])
        pairs = list(zip(starts_k.tolist(), ends_k.tolist(), strict=True))
        return QuantityView(probes, new_starts, np.concatenate([self.t[a:b] for a, b in pairs]),
                            np.concatenate([self.v[a:b] for a, b in pairs]))


@dataclass(slots=True)
class GroupedBatch:
    """Rows sorted by (probe, ts); ``seg_starts[k]`` is the first row of ``probes[k]``."""

    probes: list[str]
    seg_starts: np.ndarray
    t: np.ndarray
    quality: np.ndarray
    source: ProcessedBatch | None
    order: np.ndarray
    dropped: int = 0
    _columns: dict[str, np.ndarray] = field(default_factory=dict)
    _views: dict[str, QuantityView] = field(default_factory=dict)

    def column(self, quantity: str) -> np.ndarray:
        """A quantity column in this view's row order (gathered once, then cached)."""
        col = self._columns.get(quantity)
        if col is None:
            if self.source is None:
                col = np.empty(0)
            else:
                col = np.asarray(self.source.column(quantity), dtype=np.float64)[self.order]
            self._columns[quantity] = col
        return col

    def __len__(self) -> int:
        return int(self.t.shape[0])

    def seg_lengths(self) -> np.ndarray:
        return np.diff(np.append(self.seg_starts, self.t.shape[0]))

    def last_ts(self) -> dict[str, float]:
        ends = np.append(self.seg_starts[1:], self.t.shape[0]) - 1
        return {p: float(self.t[e]) for p, e in zip(self.probes, ends, strict=True)}

    def good_view(self, quantity: str) -> QuantityView:
        """Rows of quality good with a finite value of ``quantity``."""
        view = self._views.get(quantity)
        if view is None:
            v = self.column(quantity)
            mask = (self.quality == 0) & np.isfinite(v)
            view = compress_view(self.probes, self.seg_starts, self.t, v, mask)
            self._views[quantity] = view
        return view

    def view_where(self, values: np.ndarray, mask: np.ndarray) -> QuantityView:
        """Any per-row values restricted to ``mask`` (e.g. diagnostic conditions)."""
        return compress_view(self.probes, self.seg_starts, self.t, values, mask)


def compress_view(
    probes: list[str], seg_starts: np.ndarray, t: np.ndarray, v: np.ndarray, mask: np.ndarray
) -> QuantityView:
    n = t.shape[0]
    if mask.all():
        return QuantityView(list(probes), seg_starts, t, v)
    if n == 0:
        return QuantityView([], np.empty(0, np.int64), t, v)
    counts = np.add.reduceat(mask.astype(np.int64), seg_starts) if seg_starts.shape[0] else np.empty(0, np.int64)
    nonempty = counts > 0
    starts = np.concatenate([[0], np.cumsum(counts[nonempty])[:-1]]).astype(np.int64)
    return QuantityView(
        [p for p, keep in zip(probes, nonempty, strict=True) if keep],
        starts if nonempty.any() else np.empty(0, np.int64),
        t[mask],
        v[mask],
    )


def factorize_sorted(probe: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Codes of each probe id in the sorted list of the distinct ids, and that list:
    what ``pandas.factorize(probe, sort=True)`` gives (tested), without importing
    pandas (0.2 s at the start of every command that runs rules) for string ids."""
    found = factorize_probe_ids(probe, sort=True)
    if found is None:
        import pandas as pd   # ids that are not strings (never from the collectors): pandas decides

        codes, uniques = pd.factorize(probe, sort=True)
        return np.asarray(codes, dtype=np.intp), np.asarray(uniques, dtype=object)
    codes, distinct = found
    uniques = np.empty(len(distinct), dtype=object)
    uniques[:] = distinct
    return codes, uniques


def group_batch(batch: ProcessedBatch, last_seen: Mapping[str, float] | None = None) -> GroupedBatch:
    """Sort a batch by (probe, ts), dropping repeats and readings older than ``last_seen``."""
    n = len(batch)
    if n == 0:
        return GroupedBatch([], np.empty(0, np.int64), np.empty(0), np.empty(0, np.uint8),
                            None, np.empty(0, np.int64))
    codes, uniques = factorize_sorted(batch.probe)
    ts = np.asarray(batch.ts, dtype=np.float64)
    small = codes.astype(np.uint16) if uniques.shape[0] < 65536 else codes
    order = np.argsort(small, kind="stable")
    c_sorted = codes[order]
    t_sorted = ts[order]
    same = c_sorted[1:] == c_sorted[:-1]
    if not np.all(~same | (t_sorted[1:] >= t_sorted[:-1])):
        order = np.lexsort((ts, codes))
        c_sorted = codes[order]
        t_sorted = ts[order]
        same = c_sorted[1:] == c_sorted[:-1]
    keep = np.ones(n, dtype=bool)
    keep[1:] = ~(same & (t_sorted[1:] == t_sorted[:-1]))
    if last_seen:
        floor = np.array([last_seen.get(str(p), -np.inf) for p in uniques], dtype=np.float64)
        keep &= t_sorted > floor[c_sorted]
    dropped = int(n - np.count_nonzero(keep))
    if dropped:
        order = order[keep]
        c_sorted = c_sorted[keep]
        t_sorted = t_sorted[keep]
    starts_mask = np.ones(c_sorted.shape[0], dtype=bool)
    starts_mask[1:] = c_sorted[1:] != c_sorted[:-1]
    seg_starts = np.flatnonzero(starts_mask)
    probes = [str(uniques[c]) for c in c_sorted[seg_starts]]
    return GroupedBatch(
        probes, seg_starts, t_sorted, np.asarray(batch.quality)[order], batch, order, dropped
    )
