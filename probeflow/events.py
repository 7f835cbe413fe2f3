"""Alert events: the records every rule emits on each alarm transition."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from datetime import UTC, datetime
from typing import Any

__all__ = ["AlertEvent", "rfc3339"]


def rfc3339(ts: float) -> str:
    """Epoch seconds to an RFC 3339 UTC string with microseconds, e.g. 2026-12-01T00:00:00.250000Z."""
    return datetime.fromtimestamp(ts, UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


@dataclass(frozen=True, slots=True)
class AlertEvent:
    """One alarm transition (ISA-18.2 state after it in ``state``).

    event: raise | clear | ack | shelve | unshelve | suppress | unsuppress | return
    state: normal | unack_active | ack_active | unack_returned | shelved | suppressed
    """

    rule: str
    probe: str
    quantity: str
    limit: str
    event: str
    state: str
    ts: float
    value: float
    threshold: float
    severity: str = "medium"
    message: str = ""

    @property
    def alarm_id(self) -> str:
        """Stable id of the alarm this event belongs to: rule/probe/limit."""
        return f"{self.rule}/{self.probe}/{self.limit}"

    def to_record(self) -> dict[str, Any]:
        rec: dict[str, Any] = {"kind": "alert", "alarm_id": self.alarm_id}
        rec.update(asdict(self))
        rec["ts"] = rfc3339(self.ts)
        for key in ("value", "threshold"):
            if isinstance(rec[key], float) and not math.isfinite(rec[key]):
                rec[key] = None
        return rec
