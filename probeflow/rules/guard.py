"""Run every rule of a set so that one failing rule never stalls the others.

A rule (most likely a site's plugin) whose ``evaluate`` or ``tick`` raises is
skipped for that batch or tick and called again with the next one.  Each
failure is counted per rule (``errors``, keyed ``"<kind>:<id>"`` like the
saved state) and logged at most once a minute per rule, with the number of
failures held back since the last line.  Alerts support operators; they are
not a safety system, and a rule that keeps failing raises no alarm of its own:
watch the ``rule_errors`` count.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from concurrent.futures import Executor
from typing import Any

from probeflow.rules.base import Rule
from probeflow.rules.lifecycle import Transition
from probeflow.service.log import RateLimiter

__all__ = ["LOG_INTERVAL_S", "RuleGuard", "rule_key"]

LOG_INTERVAL_S = 60.0


def rule_key(rule: Rule) -> str:
    """``"<kind>:<id>"``: the rule's name in saved state, error counts and logs."""
    return f"{rule.kind}:{rule.id}"


class RuleGuard:
    """Calls ``evaluate``/``tick`` on each rule in order, isolating failures.

    ``log`` is any object with ``error(event, **fields)`` (the service's
    :class:`~probeflow.service.log.Log`); without one, failures are only counted.
    """

    def __init__(self, log: Any = None, interval_s: float = LOG_INTERVAL_S,
                 clock: Callable[[], float] = time.monotonic) -> None:
        self.log = log
        self.errors: dict[str, int] = {}
        self._limiter = RateLimiter(interval_s, clock)

    @property
    def total(self) -> int:
        return sum(self.errors.values())

    def evaluate(self, rules: Sequence[Rule], batch: Any) -> list[Transition]:
        out: list[Transition] = []
        for rule in rules:
            try:
                out.extend(rule.evaluate(batch))
            except Exception as exc:  # noqa: BLE001 - plugin code must not stop the others
                self._failed(rule, "evaluate", exc)
        return out

    def evaluate_in(self, pool: Executor, rules: Sequence[Rule], batch: Any) -> list[Transition]:
        """As :meth:`evaluate`, with the rules run side by side on ``pool``'s threads
        (numpy gives up the interpreter lock in its array loops).  The results are
        joined in rule order and failures counted on the calling thread, so the
        outcome equals :meth:`evaluate`'s.  Each rule must keep to its own state."""
        futures = [pool.submit(rule.evaluate, batch) for rule in rules]
        out: list[Transition] = []
        for rule, future in zip(rules, futures, strict=True):
            try:
                out.extend(future.result())
            except Exception as exc:  # noqa: BLE001 - plugin code must not stop the others
                self._failed(rule, "evaluate", exc)
        return out

    def tick(self, rules: Sequence[Rule], now: float) -> list[Transition]:
        out: list[Transition] = []
        for rule in rules:
            try:
                out.extend(rule.tick(now))
            except Exception as exc:  # noqa: BLE001 - plugin code must not stop the others
                self._failed(rule, "tick", exc)
        return out

    def state(self, rules: Sequence[Rule]) -> dict[str, Any]:
        """Each rule's saved state by :func:`rule_key`; a rule whose ``state`` raises is
        left out (it starts afresh after a restart) instead of losing every rule's state."""
        out: dict[str, Any] = {}
        for rule in rules:
            try:
                out[rule_key(rule)] = rule.state()
            except Exception as exc:  # noqa: BLE001 - plugin code
                self._failed(rule, "state", exc)
        return out

    def restore(self, rules: Sequence[Rule], saved: dict[str, Any]) -> None:
        for rule in rules:
            try:
                rule.restore(saved.get(rule_key(rule), {}))
            except Exception as exc:  # noqa: BLE001 - plugin code
                self._failed(rule, "restore", exc)

    def _failed(self, rule: Rule, step: str, exc: Exception) -> None:
        key = rule_key(rule)
        self.errors[key] = self.errors.get(key, 0) + 1
        if self.log is None:
            return
        allowed, held = self._limiter.allow(key)
        if allowed:
            self.log.error("rule_failed", rule=key, step=step, error=f"{type(exc).__name__}: {exc}",
                           failures=self.errors[key], suppressed=held,
                           hint="this rule is skipped for the batch and tried again with the "
                                "next; the other rules go on")
