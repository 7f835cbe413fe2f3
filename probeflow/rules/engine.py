"""The live rules stage: every configured rule plus the alarm book, behind one object.

``Engine.process(batch)`` groups the batch by probe once, lets each rule find
its condition changes vectorised, orders them by reading time and turns them
into ISA-18.2 alert events.  A rule that raises is skipped for that batch,
counted, logged and tried again with the next (see :mod:`probeflow.rules.guard`).
Operator actions (ack, shelve, maintenance) go through the same object, so the
service, the CLI and the tests share one implementation.  Alerts support
operators; they are not a safety system.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from probeflow.batch import ProcessedBatch
from probeflow.errors import PluginError, ProbeflowError
from probeflow.events import AlertEvent
from probeflow.rules.base import Rule, load_rule_kind
from probeflow.rules.config import RulesConfig
from probeflow.rules.grouping import group_batch
from probeflow.rules.guard import RuleGuard
from probeflow.rules.lifecycle import AlarmBook, Transition

__all__ = ["STATE_VERSION", "Engine", "build_rule_engine", "build_rules"]

STATE_VERSION = 1


def build_rules(config: RulesConfig, probe_ids: Sequence[str] = ()) -> list[Rule]:
    """Compile the config into rule objects: every rule-kind section (built-ins first,
    then plugin sections in file order) through its ``probeflow.rules`` plugin.

    Raises :class:`~probeflow.errors.PluginError` naming a plugin that cannot be
    loaded or whose ``build`` fails.
    """
    rules: list[Rule] = []
    for name, entries in config.rule_sections().items():
        kind = load_rule_kind(name)
        try:
            built = list(kind.build(entries, tuple(probe_ids)))
        except ProbeflowError:
            raise
        except Exception as exc:  # plugin code
            raise PluginError(f'rules.{name}: the rule plugin "{name}" could not build its rules '
                              f"({type(exc).__name__}: {exc})") from exc
        for rule in built:
            if not isinstance(rule, Rule):
                raise PluginError(f'rules.{name}: the rule plugin "{name}" built {rule!r}, which '
                                  "lacks id, kind, evaluate, tick, state or restore")
        rules += built
    return rules


class Engine:
    """Implements :class:`probeflow.rules.base.RuleEngine` plus operator actions."""

    def __init__(self, rules: Sequence[Rule], log: Any = None) -> None:
        """``log``: where a failing rule is reported (``error(event, **fields)``, once a
        minute per rule); failures are counted in ``counters["rule_errors"]`` and, per
        rule, in :attr:`rule_errors` either way."""
        self.rules = list(rules)
        self.book = AlarmBook()
        self.guard = RuleGuard(log)
        self._last_seen: dict[str, float] = {}
        self.counters: dict[str, int] = {"readings": 0, "dropped_repeats_or_late": 0,
                                         "rule_errors": 0}

    @property
    def rule_errors(self) -> dict[str, int]:
        """Failures of ``evaluate``/``tick`` per rule (``"<kind>:<id>"``)."""
        return dict(self.guard.errors)

    # --- the reading path ----------------------------------------------------------
    def process(self, batch: ProcessedBatch) -> list[AlertEvent]:
        grouped = group_batch(batch, self._last_seen)
        self.counters["readings"] += len(grouped)
        self.counters["dropped_repeats_or_late"] += grouped.dropped
        if len(grouped) == 0:
            return []
        events = self.book.expire_shelves(float(grouped.t.min()))
        transitions = self.guard.evaluate(self.rules, grouped)
        self.counters["rule_errors"] = self.guard.total
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
        transitions = self.guard.tick(self.rules, now)
        self.counters["rule_errors"] = self.guard.total
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
            "rules": self.guard.state(self.rules),
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
        self.guard.restore(self.rules, saved)
        self.counters["rule_errors"] = self.guard.total
        self.book.restore(state.get("alarms", {}))
        self._last_seen = {k: float(v) for k, v in state.get("last_seen", {}).items()
                           if v is not None and math.isfinite(float(v))}


def build_rule_engine(config: RulesConfig, probe_ids: Sequence[str] = (), log: Any = None) -> Engine:
    """The engine for a validated ``rules:`` section; ``probe_ids`` are the configured probes,
    ``log`` receives failing rules (see :class:`Engine`)."""
    return Engine(build_rules(config, probe_ids), log=log)
