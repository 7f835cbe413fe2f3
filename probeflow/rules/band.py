"""Band rules: low_low / low / high / high_high limits on one quantity, per probe."""

from __future__ import annotations

from typing import Any

from probeflow.rules.bank import LatchBank, LatchSpec
from probeflow.rules.config import BAND_LIMITS, BandRuleConfig
from probeflow.rules.grouping import GroupedBatch
from probeflow.rules.lifecycle import Transition
from probeflow.rules.matching import ProbeMatcher

__all__ = ["BandRule"]


class BandRule:
    """Each configured limit is its own alarm (rule/probe/limit) with the latch semantics
    of :mod:`probeflow.rules.latch`; only good readings with a finite value count."""

    kind = "band"

    def __init__(self, config: BandRuleConfig) -> None:
        self.config = config
        self.id = config.id
        self.matcher = ProbeMatcher(config.probes)
        self.banks: list[LatchBank] = []
        for name in BAND_LIMITS:
            value = config.limit_value(name)
            if value is None:
                continue
            self.banks.append(LatchBank(LatchSpec(
                rule=config.id, quantity=config.quantity, limit_name=name, limit=value,
                high=name.startswith("high"), deadband=config.deadband,
                on_delay=config.on_delay_s, off_delay=config.off_delay_s,
                severity=config.limit_severity(name),
            )))

    def evaluate(self, batch: GroupedBatch) -> list[Transition]:
        view = batch.good_view(self.config.quantity)
        view = view.select(self.matcher.mask(view.probes))
        out: list[Transition] = []
        for bank in self.banks:
            out.extend(bank.run(view))
        return out

    def tick(self, now: float) -> list[Transition]:
        return []

    def state(self) -> dict[str, Any]:
        return {b.spec.limit_name: b.state() for b in self.banks}

    def restore(self, state: dict[str, Any]) -> None:
        for b in self.banks:
            b.restore(state.get(b.spec.limit_name, {}))
