"""Slow drift: a robust slope of a probe's value, or of a redundant pair's difference.

To stay cheap on the live path the good readings are first averaged into one
point per ``step_s`` (time bins aligned to multiples of ``step_s``).  A bin
is complete when the first reading of a later bin arrives; at most once per
``every_s`` the Theil–Sen slope (:mod:`probeflow.rules.theil_sen`) of the
points in the trailing ``window_s`` is computed (thinned evenly to
``max_points``), provided there are ``min_points`` points spanning at least
``min_span_fraction`` of the window.  |slope| in units per day goes through a
high-limit latch at ``limit_per_day``; the event time is that of the reading
which completed the bin.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from probeflow.rules.bank import LatchBank, LatchSpec
from probeflow.rules.config import DriftRuleConfig
from probeflow.rules.grouping import GroupedBatch, QuantityView
from probeflow.rules.lifecycle import Transition
from probeflow.rules.matching import ProbeMatcher
from probeflow.rules.theil_sen import evenly_thinned, theil_sen_slope

__all__ = ["BinAverager", "DriftRule"]

SECONDS_PER_DAY = 86400.0


class BinAverager:
    """Means of readings in fixed time bins; yields each bin once it is complete."""

    def __init__(self, step_s: float) -> None:
        self.step_s = step_s
        self.bin = -1
        self.total = 0.0
        self.count = 0

    def feed(self, t: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """New complete bins: (bin numbers, means, time of the reading that completed each)."""
        if t.shape[0] == 0:
            return np.empty(0, np.int64), np.empty(0), np.empty(0)
        bins = np.floor(t / self.step_s).astype(np.int64)
        uniq, first = np.unique(bins, return_index=True)
        sums = np.add.reduceat(v, first)
        counts = np.diff(np.append(first, t.shape[0]))
        if self.count and uniq[0] == self.bin:
            sums[0] += self.total
            counts[0] += self.count
            carried = False
        else:
            carried = self.count > 0
        done_bins = list(uniq[:-1])
        done_means = list(sums[:-1] / counts[:-1])
        done_ts = list(t[first[1:]])
        if carried:
            done_bins.insert(0, self.bin)
            done_means.insert(0, self.total / self.count)
            done_ts.insert(0, float(t[0]))
        self.bin, self.total, self.count = int(uniq[-1]), float(sums[-1]), int(counts[-1])
        return np.asarray(done_bins, np.int64), np.asarray(done_means, float), np.asarray(done_ts, float)

    def state(self) -> list[float]:
        return [self.bin, self.total, self.count]

    def restore(self, state: list[float]) -> None:
        self.bin, self.total, self.count = int(state[0]), float(state[1]), int(state[2])


class _Series:
    """Decimated points of one series and the time slot of its last evaluation."""

    def __init__(self) -> None:
        self.t: list[float] = []
        self.v: list[float] = []
        self.last_slot = -1

    def state(self) -> dict[str, Any]:
        return {"t": self.t, "v": self.v, "last_slot": self.last_slot}

    def restore(self, s: dict[str, Any]) -> None:
        self.t, self.v, self.last_slot = list(s["t"]), list(s["v"]), int(s["last_slot"])


class DriftRule:
    kind = "drift"

    def __init__(self, config: DriftRuleConfig) -> None:
        self.config = config
        self.id = config.id
        self.matcher = ProbeMatcher(config.probes or [])
        self.pair = tuple(config.pair) if config.pair else None
        self.pair_key = "-".join(self.pair) if self.pair else ""
        self.bank = LatchBank(LatchSpec(
            rule=config.id, quantity=config.quantity, limit_name="drift",
            limit=config.limit_per_day, high=True, severity=config.severity,
        ), self._message)
        self._avg: dict[str, BinAverager] = {}
        self._series: dict[str, _Series] = {}
        self._pending: dict[str, dict[int, tuple[float, float]]] = {}

    def _message(self, spec: LatchSpec, key: str, active: bool, value: float) -> str:
        what = f"difference {key}" if self.pair else key
        if active:
            return (f"{what}: {spec.quantity} drifting {value:.3g} per day "
                    f"(limit {spec.limit:g} per day, Theil-Sen over {self.config.window_s / 3600:g} h)")
        return f"{what}: drift back to {value:.3g} per day"

    def _averager(self, key: str) -> BinAverager:
        if key not in self._avg:
            self._avg[key] = BinAverager(self.config.step_s)
        return self._avg[key]

    def _add_points(self, key: str, bins: np.ndarray, means: np.ndarray, done_ts: np.ndarray
                    ) -> tuple[list[float], list[float]]:
        """Append points; evaluate where due.  Returns (event times, |slope| per day)."""
        c = self.config
        s = self._series.setdefault(key, _Series())
        ev_t: list[float] = []
        ev_v: list[float] = []
        for b, m, ts in zip(bins.tolist(), means.tolist(), done_ts.tolist(), strict=True):
            s.t.append((b + 0.5) * c.step_s)
            s.v.append(m)
            slot = math.floor(ts / c.every_s)
            if slot == s.last_slot:
                continue
            s.last_slot = slot
            tt = np.asarray(s.t)
            lo = int(np.searchsorted(tt, ts - c.window_s, side="right"))
            if lo:
                del s.t[:lo], s.v[:lo]
                tt = tt[lo:]
            if tt.shape[0] < c.min_points or tt[-1] - tt[0] < c.min_span_fraction * c.window_s:
                continue
            keep = evenly_thinned(tt.shape[0], c.max_points)
            slope = theil_sen_slope(tt[keep], np.asarray(s.v)[keep])
            if math.isfinite(slope):
                ev_t.append(ts)
                ev_v.append(abs(slope) * SECONDS_PER_DAY)
        return ev_t, ev_v

    def evaluate(self, batch: GroupedBatch) -> list[Transition]:
        view = batch.good_view(self.config.quantity)
        ends = np.append(view.seg_starts[1:], view.t.shape[0])
        seg = {p: (int(a), int(b)) for p, a, b in zip(view.probes, view.seg_starts, ends, strict=True)}
        keys: list[str] = []
        times: list[np.ndarray] = []
        values: list[np.ndarray] = []
        if self.pair is None:
            for p, (a, b) in seg.items():
                if not self.matcher(p):
                    continue
                bins, means, done = self._averager(p).feed(view.t[a:b], view.v[a:b])
                et, ev = self._add_points(p, bins, means, done)
                if et:
                    keys.append(p)
                    times.append(np.asarray(et))
                    values.append(np.asarray(ev))
        else:
            for m in self.pair:
                if m in seg:
                    a, b = seg[m]
                    bins, means, done = self._averager(m).feed(view.t[a:b], view.v[a:b])
                    pend = self._pending.setdefault(m, {})
                    for bn, mn, ts in zip(bins.tolist(), means.tolist(), done.tolist(), strict=True):
                        pend[bn] = (mn, ts)
            pa = self._pending.setdefault(self.pair[0], {})
            pb = self._pending.setdefault(self.pair[1], {})
            common = sorted(set(pa) & set(pb))
            if common:
                diff = np.array([pa[b][0] - pb[b][0] for b in common])
                done = np.array([max(pa[b][1], pb[b][1]) for b in common])
                et, ev = self._add_points(self.pair_key, np.asarray(common, np.int64), diff, done)
                newest = common[-1]
                for pend in (pa, pb):
                    for b in [b for b in pend if b <= newest]:
                        del pend[b]
                if et:
                    keys.append(self.pair_key)
                    times.append(np.asarray(et))
                    values.append(np.asarray(ev))
        if not keys:
            return []
        lens = np.array([x.shape[0] for x in times])
        sub = QuantityView(keys, np.concatenate([[0], np.cumsum(lens)[:-1]]).astype(np.int64),
                           np.concatenate(times), np.concatenate(values))
        members = {self.pair_key: self.pair} if self.pair else None
        return self.bank.run(sub, members)

    def tick(self, now: float) -> list[Transition]:
        return []

    def state(self) -> dict[str, Any]:
        return {
            "latch": self.bank.state(),
            "avg": {k: a.state() for k, a in self._avg.items()},
            "series": {k: s.state() for k, s in self._series.items()},
            "pending": {m: {str(b): list(x) for b, x in p.items()} for m, p in self._pending.items()},
        }

    def restore(self, state: dict[str, Any]) -> None:
        self.bank.restore(state.get("latch", {}))
        self._avg = {}
        for k, s in state.get("avg", {}).items():
            self._averager(k).restore(s)
        self._series = {}
        for k, s in state.get("series", {}).items():
            self._series[k] = _Series()
            self._series[k].restore(s)
        self._pending = {m: {int(b): (float(x[0]), float(x[1])) for b, x in p.items()}
                         for m, p in state.get("pending", {}).items()}
