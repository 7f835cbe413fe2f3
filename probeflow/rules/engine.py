"""The live rules stage: every configured rule plus the alarm book, behind one object.

``Engine.process(batch)`` groups the batch by probe once, lets each rule find
its condition changes vectorised, orders them by reading time and turns them
into ISA-18.2 alert events.  Operator actions (ack, shelve, maintenance) go
through the same object, so the service, the CLI and the tests share one
implementation.  Alerts support operators; they are not a safety system.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from probeflow.batch import ProcessedBatch
from probeflow.errors import ProbeflowError
from probeflow.events import AlertEvent
from probeflow.rules.band import BandRule
from probeflow.rules.base import Rule
from probeflow.rules.config import RulesConfig
from probeflow.rules.grouping import group_batch
from probeflow.rules.lifecycle import AlarmBook, Transition

__all__ = ["STATE_VERSION", "Engine", "build_rule_engine", "build_rules"]

STATE_VERSION = 1


def build_rules(config: RulesConfig, probe_ids: Sequence[str] = ()) -> list[Rule]:
    """Compile the config into rule objects, in config order."""
    from probeflow.rules.diagnostics import DiagnosticRules
    from probeflow.rules.drift import DriftRule
    from probeflow.rules.rate import RateOfChangeRule
    from probeflow.rules.redundancy import RedundancyRule

    rules: list[Rule] = [BandRule(c) for c in config.bands]
    rules += [RateOfChangeRule(c) for c in config.rate_of_change]
    if config.diagnostics is not None:
        rules.append(DiagnosticRules(config.diagnostics, probe_ids))
    rules += [RedundancyRule(c) for c in config.redundancy]
    rules += [DriftRule(c) for c in config.drift]
    return rules


class Engine:
    """Implements :class:`probeflow.rules.base.RuleEngine` plus operator actions."""

    def __init__(self, rules: Sequence[Rule]) -> None:
        self.rules = list(rules)
        self.book = AlarmBook()
        self._last_seen: dict[str, float] = {}
        self.counters: dict[str, int] = {"readings": 0, "dropped_repeats_or_late": 0}

    # --- the reading path ----------------------------------------------------------
    def process(self, batch: ProcessedBatch) -> list[AlertEvent]:
        grouped = group_batch(batch, self._last_seen)
        self.counters["readings"] += len(grouped)
        self.counters["dropped_repeats_or_late"] += grouped.dropped
        if len(grouped) == 0:
            return []
        events = self.book.expire_shelves(float(grouped.t.min()))
        transitions: list[Transition] = []
        for rule in self.rules:
            transitions.extend(rule.evaluate(grouped))
        self._last_seen.update(grouped.last_ts())
        events.extend(self._apply(transitions))
        return events

    def _apply(self, transitions: list[Transition]) -> list[AlertEvent]:
        transitions.sort(key=lambda tr: tr.ts)  # stable: config order within one time
        out = []
        for tr in transitions:
            ev = self.book.apply(tr)
            if ev is not None:
                out.append(ev)
        return out

    def tick(self, now: float) -> list[AlertEvent]:
        """Time-based changes with no reading: shelving expiry, stale probes."""
        events = self.book.expire_shelves(now)
        transitions: list[Transition] = []
        for rule in self.rules:
            transitions.extend(rule.tick(now))
        events.extend(self._apply(transitions))
        return events

    # --- operator actions ----------------------------------------------------------
    def ack(self, alarm_id: str, ts: float) -> AlertEvent:
        return self.book.ack(alarm_id, ts)

    def shelve(self, alarm_id: str, until_ts: float, ts: float | None = None) -> AlertEvent:
        now = ts if ts is not None else self._now()
        return self.book.shelve(alarm_id, until_ts, now)

    def unshelve(self, alarm_id: str, ts: float) -> AlertEvent:
        return self.book.unshelve(alarm_id, ts)

    def set_maintenance(self, probe: str, on: bool, ts: float | None = None) -> list[AlertEvent]:
        """Suppress every alarm of ``probe`` while it is in maintenance (``on``)."""
        return self.book.set_maintenance(probe, on, ts if ts is not None else self._now())

    def active_alarms(self) -> list[dict[str, Any]]:
        return self.book.active_alarms()

    # --- conditions found outside the reading path ------------------------------------
    def external(self, rule: str, probe: str, limit: str, active: bool, ts: float,
                 value: float = math.nan, threshold: float = math.nan, message: str = "",
                 severity: str = "medium", quantity: str = "") -> AlertEvent | None:
        """An alarm condition the service finds itself (data gap, outbox quota,
        calibration due, grab-sample and calibration-history checks), through the
        same ISA-18.2 lifecycle as the rules' alarms (``rule/probe/limit`` is its id).

        Only a change of condition makes an event: reporting an active condition
        again (e.g. after a restart restored the alarm) returns None, as does a
        change while the alarm is shelved or its probe is in maintenance.
        """
        alarm_id = f"{rule}/{probe}/{limit}"
        known = {r.alarm_id: r for r in self.book.records()}.get(alarm_id)
        if known is None and not active:
            return None
        if known is not None and known.active == bool(active):
            return None
        return self.book.apply(Transition(rule, probe, quantity, limit, bool(active), float(ts),
                                          float(value), float(threshold), severity, message))

    def _now(self) -> float:
        return max(self._last_seen.values(), default=0.0)

    # --- persistence ----------------------------------------------------------------
    def state(self) -> dict[str, Any]:
        return {
            "version": STATE_VERSION,
            "rules": {f"{r.kind}:{r.id}": r.state() for r in self.rules},
            "alarms": self.book.state(),
            "last_seen": dict(self._last_seen),
        }

    def restore(self, state: dict[str, Any]) -> None:
        if state.get("version") != STATE_VERSION:
            raise ProbeflowError(
                f"rule state has version {state.get('version')!r}, expected {STATE_VERSION}; "
                "delete the state file to start with all alarms normal"
            )
        saved = state.get("rules", {})
        for r in self.rules:
            r.restore(saved.get(f"{r.kind}:{r.id}", {}))
        self.book.restore(state.get("alarms", {}))
        self._last_seen = {k: float(v) for k, v in state.get("last_seen", {}).items()
                           if v is not None and math.isfinite(float(v))}


def build_rule_engine(config: RulesConfig, probe_ids: Sequence[str] = ()) -> Engine:
    """The engine for a validated ``rules:`` section; ``probe_ids`` are the configured probes."""
    return Engine(build_rules(config, probe_ids))
