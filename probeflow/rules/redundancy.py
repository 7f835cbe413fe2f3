"""Redundant probes on one stream: deviation between them, and the odd one out.

Readings of the members rarely share a timestamp, so each member's last good
value is held (sample and hold, for at most ``max_age_s``) and the members are
compared at every time any of them reports.

* Two probes: the deviation is |a - b|; the alarm is ``<rule>/<a>~<b>/deviation``.
* Three probes: each member's deviation is its distance from the median of
  the three; the member farthest from the median is the odd one out (median
  voting; a tie goes to the member listed first).  Each member has its own
  alarm ``<rule>/<member>/deviation``, fed the odd one's deviation while it is
  the odd one and 0 otherwise, so the alarm names the suspect probe.

Either way the deviation then goes through the delayed latch (on-delay
``for_s``).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from probeflow.rules.bank import LatchBank, LatchSpec
from probeflow.rules.config import RedundancyRuleConfig
from probeflow.rules.grouping import GroupedBatch, QuantityView
from probeflow.rules.lifecycle import Transition

__all__ = ["RedundancyRule", "odd_one_out"]


def odd_one_out(values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Median voting over rows of three values: (median, index of the odd one, its deviation)."""
    med = np.median(values, axis=1)
    dev = np.abs(values - med[:, None])
    odd = np.argmax(dev, axis=1)
    return med, odd, dev[np.arange(values.shape[0]), odd]


class RedundancyRule:
    kind = "redundancy"

    def __init__(self, config: RedundancyRuleConfig) -> None:
        self.config = config
        self.id = config.id
        self.members = tuple(config.probes)
        self.pair_key = "~".join(self.members)
        self.bank = LatchBank(LatchSpec(
            rule=config.id, quantity=config.quantity, limit_name="deviation", limit=config.limit,
            high=True, deadband=config.deadband, on_delay=config.for_s,
            off_delay=config.off_delay_s, severity=config.severity,
        ), self._message)
        n = len(self.members)
        self._held_v = np.full(n, np.nan)
        self._held_t = np.full(n, np.nan)

    def _message(self, spec: LatchSpec, key: str, active: bool, value: float) -> str:
        group = ", ".join(self.members)
        if len(self.members) == 2:
            if active:
                return f"{group} disagree by {value:.3g} (limit {spec.limit:g} {spec.quantity})"
            return f"{group} agree again (deviation {value:.3g})"
        if active:
            return (f"{key} is the odd one out of {group} by median voting: "
                    f"{value:.3g} {spec.quantity} from the median (limit {spec.limit:g})")
        return f"{key} agrees with the median of {group} again"

    def evaluate(self, batch: GroupedBatch) -> list[Transition]:
        c = self.config
        view = batch.good_view(c.quantity)
        pos = {p: k for k, p in enumerate(view.probes)}
        present = [m for m in self.members if m in pos]
        if not present:
            return []
        ends = np.append(view.seg_starts[1:], view.t.shape[0])
        parts_t, parts_v, parts_m = [], [], []
        for k, m in enumerate(self.members):
            if m in pos:
                a, b = int(view.seg_starts[pos[m]]), int(ends[pos[m]])
                parts_t.append(view.t[a:b])
                parts_v.append(view.v[a:b])
                parts_m.append(np.full(b - a, k))
        t = np.concatenate(parts_t)
        v = np.concatenate(parts_v)
        mem = np.concatenate(parts_m)
        order = np.lexsort((mem, t))
        t, v, mem = t[order], v[order], mem[order]
        n_m = len(self.members)
        held_v = np.empty((t.shape[0], n_m))
        held_t = np.empty((t.shape[0], n_m))
        rows = np.arange(t.shape[0])
        for k in range(n_m):
            last = np.maximum.accumulate(np.where(mem == k, rows, -1))
            has = last >= 0
            held_v[:, k] = np.where(has, v[np.maximum(last, 0)], self._held_v[k])
            held_t[:, k] = np.where(has, t[np.maximum(last, 0)], self._held_t[k])
        self._held_v = held_v[-1].copy()
        self._held_t = held_t[-1].copy()
        # evaluate once per distinct time (after every member reporting at it)
        last_of_time = np.r_[t[1:] != t[:-1], True]
        fresh = np.all(np.isfinite(held_t) & (t[:, None] - held_t <= c.max_age_s), axis=1)
        use = last_of_time & fresh
        t_u, hv = t[use], held_v[use]
        if t_u.shape[0] == 0:
            return []
        if n_m == 2:
            dev = np.abs(hv[:, 0] - hv[:, 1])
            sub = QuantityView([self.pair_key], np.array([0]), t_u, dev)
            return self.bank.run(sub, {self.pair_key: self.members})
        _, odd, dev = odd_one_out(hv)
        nu = t_u.shape[0]
        vals = np.concatenate([np.where(odd == k, dev, 0.0) for k in range(n_m)])
        sub = QuantityView(list(self.members), np.arange(n_m) * nu, np.tile(t_u, n_m), vals)
        return self.bank.run(sub, {m: self.members for m in self.members})

    def tick(self, now: float) -> list[Transition]:
        return []

    def state(self) -> dict[str, Any]:
        def clean(a: np.ndarray) -> list[float | None]:
            return [None if math.isnan(x) else float(x) for x in a]
        return {"latch": self.bank.state(), "held_v": clean(self._held_v), "held_t": clean(self._held_t)}

    def restore(self, state: dict[str, Any]) -> None:
        self.bank.restore(state.get("latch", {}))
        n = len(self.members)
        hv = state.get("held_v") or [None] * n
        ht = state.get("held_t") or [None] * n
        self._held_v = np.array([math.nan if x is None else x for x in hv], dtype=np.float64)
        self._held_t = np.array([math.nan if x is None else x for x in ht], dtype=np.float64)
