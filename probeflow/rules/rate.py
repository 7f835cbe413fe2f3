"""Rate-of-change rules: |d quantity/dt| over a trailing window above a limit [units per minute].

The rate at a reading is the least-squares slope of the quantity against
time over the good readings in the trailing window (t - window_s, t]
(ordinary least squares: slope = cov(t, v) / var(t)), times 60.  Rates with
fewer than ``min_points`` readings in the window are not evaluated.  The
|rate| then goes through the same delayed latch as a band's high limit.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from probeflow.rules.bank import LatchBank, LatchSpec
from probeflow.rules.config import RateOfChangeRuleConfig
from probeflow.rules.grouping import GroupedBatch, QuantityView, compress_view
from probeflow.rules.lifecycle import Transition
from probeflow.rules.matching import ProbeMatcher
from probeflow.rules.series_tail import SeriesTails
from probeflow.rules.windows import rolling_slope

__all__ = ["RateOfChangeRule", "rolling_rate_per_min"]


BLOCK_ROWS = 8192
"""Rows per block fed to the prefix-sum slope, which keeps its sums small and exact enough."""


def rolling_rate_per_min(t: np.ndarray, v: np.ndarray, window_s: float, min_points: int) -> np.ndarray:
    """Least-squares slope of v against t [units/min] over each trailing window (t - window_s, t].

    ``t`` [s] strictly increasing.  NaN where the window holds fewer than ``min_points`` readings.
    """
    return rolling_slope(t, v, window_s, min_points) * 60.0


class RateOfChangeRule:
    kind = "rate_of_change"

    def __init__(self, config: RateOfChangeRuleConfig) -> None:
        self.config = config
        self.id = config.id
        self.matcher = ProbeMatcher(config.probes)
        self.tails = SeriesTails(config.window_s)
        self.bank = LatchBank(LatchSpec(
            rule=config.id, quantity=config.quantity, limit_name="rate", limit=config.limit_per_min,
            high=True, deadband=config.deadband, on_delay=config.on_delay_s,
            off_delay=config.off_delay_s, severity=config.severity,
        ), self._message)

    def _message(self, spec: LatchSpec, probe: str, active: bool, value: float) -> str:
        if active:
            return (f"{probe}: {spec.quantity} changing at {value:.4g} per minute, "
                    f"above {spec.limit:g} per minute")
        return f"{probe}: {spec.quantity} rate of change back to {value:.4g} per minute"

    def evaluate(self, batch: GroupedBatch) -> list[Transition]:
        c = self.config
        view = batch.good_view(c.quantity)
        view = view.select(self.matcher.mask(view.probes))
        if not view.probes:
            return []
        ends = np.append(view.seg_starts[1:], view.t.shape[0])
        rates = np.empty(view.t.shape[0])
        for key, a, b in zip(view.probes, view.seg_starts.tolist(), ends.tolist(), strict=True):
            for a2 in range(a, b, BLOCK_ROWS):
                b2 = min(a2 + BLOCK_ROWS, b)
                tt, vv, n_tail = self.tails.joined(key, view.t[a2:b2], view.v[a2:b2])
                r = rolling_rate_per_min(tt, vv, c.window_s, c.min_points)
                rates[a2:b2] = np.abs(r[n_tail:])
                self.tails.keep(key, tt, vv)
        ok = np.isfinite(rates)
        sub = QuantityView(view.probes, view.seg_starts, view.t, rates)
        if not ok.all():
            sub = compress_view(view.probes, view.seg_starts, view.t, rates, ok)
        return self.bank.run(sub)

    def tick(self, now: float) -> list[Transition]:
        return []

    def state(self) -> dict[str, Any]:
        return {"latch": self.bank.state(), "tails": self.tails.state()}

    def restore(self, state: dict[str, Any]) -> None:
        self.bank.restore(state.get("latch", {}))
        self.tails.restore(state.get("tails", {}))
