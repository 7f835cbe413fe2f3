"""The interface of the rules stage.

A rule engine is built once from the validated ``rules:`` config section and
then fed processed batches in time order per probe.  It returns the alert
events each batch caused.  ``tick(now)`` lets time-based rules (stale
readings, shelving expiry) fire when no reading arrives.  Its state can be
saved and restored so a restart neither re-raises nor forgets an alarm.
"""

from __future__ import annotations

from typing import Any, Protocol, runtime_checkable

from probeflow.batch import ProcessedBatch
from probeflow.events import AlertEvent

__all__ = ["Rule", "RuleEngine"]


@runtime_checkable
class RuleEngine(Protocol):
    def process(self, batch: ProcessedBatch) -> list[AlertEvent]: ...

    def tick(self, now: float) -> list[AlertEvent]: ...

    def state(self) -> dict[str, Any]:
        """JSON-serialisable state to persist."""

    def restore(self, state: dict[str, Any]) -> None: ...


@runtime_checkable
class Rule(Protocol):
    """One configured rule inside the engine: turns grouped readings into condition changes.

    ``evaluate`` and ``tick`` return :class:`~probeflow.rules.lifecycle.Transition`
    objects (condition became active / returned); the engine's alarm book turns
    them into ISA-18.2 alert events.
    """

    id: str
    kind: str

    def evaluate(self, batch: Any) -> list[Any]: ...

    def tick(self, now: float) -> list[Any]: ...

    def state(self) -> dict[str, Any]: ...

    def restore(self, state: dict[str, Any]) -> None: ...
