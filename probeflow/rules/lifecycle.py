"""The alarm lifecycle in ANSI/ISA-18.2 terms, for every alarm a rule can raise.

Rules decide only whether an alarm *condition* is active.  The book turns
each change of condition, and each operator action, into an alert event with
the state after it:

=================  =================  ===========================
state before       what happened      event -> state after
=================  =================  ===========================
normal             condition active   raise -> unack_active
unack_returned     condition active   raise -> unack_active
unack_active       acknowledged       ack -> ack_active
unack_active       condition returns  clear -> unack_returned
ack_active         condition returns  clear -> normal
unack_returned     acknowledged       ack -> normal
any                shelved            shelve -> shelved
shelved            unshelved/expiry   unshelve -> unack_active if the
                                      condition is active, else normal
any                probe maintenance  suppress -> suppressed
suppressed         maintenance ends   unsuppress -> as for unshelve
=================  =================  ===========================

While shelved or suppressed the condition is still followed, silently, so
the alarm comes back in the right state.  Alerts support operators; they are
not a safety system.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

from probeflow.errors import ProbeflowError
from probeflow.events import AlertEvent

__all__ = ["AlarmBook", "AlarmRecord", "Transition"]


@dataclass(frozen=True, slots=True)
class Transition:
    """A rule's alarm condition became active (``active``) or returned."""

    rule: str
    probe: str
    quantity: str
    limit: str
    active: bool
    ts: float
    value: float
    threshold: float
    severity: str
    message: str = ""
    members: tuple[str, ...] = ()

    @property
    def alarm_id(self) -> str:
        return f"{self.rule}/{self.probe}/{self.limit}"


@dataclass(slots=True)
class AlarmRecord:
    rule: str
    probe: str
    quantity: str
    limit: str
    severity: str
    threshold: float
    members: list[str]
    active: bool = False
    unacked: bool = False
    shelved_until: float | None = None
    suppressed: bool = False
    last_ts: float = float("nan")
    last_value: float = float("nan")
    message: str = ""
    changed_ts: float = float("nan")
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def alarm_id(self) -> str:
        return f"{self.rule}/{self.probe}/{self.limit}"

    @property
    def state(self) -> str:
        if self.suppressed:
            return "suppressed"
        if self.shelved_until is not None:
            return "shelved"
        if self.active:
            return "unack_active" if self.unacked else "ack_active"
        return "unack_returned" if self.unacked else "normal"

    def to_dict(self) -> dict[str, Any]:
        """JSON-able view (NaN as None) with the alarm id and ISA-18.2 state."""
        d = asdict(self)
        for key in _FLOAT_KEYS:
            if d[key] != d[key]:
                d[key] = None
        d["alarm_id"] = self.alarm_id
        d["state"] = self.state
        return d


_FLOAT_KEYS = ("threshold", "last_ts", "last_value", "changed_ts")


class AlarmBook:
    """All alarm records, keyed by alarm id (rule/probe/limit)."""

    def __init__(self) -> None:
        self._records: dict[str, AlarmRecord] = {}
        self._maintenance: set[str] = set()

    # --- queries -------------------------------------------------------------
    def get(self, alarm_id: str) -> AlarmRecord:
        rec = self._records.get(alarm_id)
        if rec is None:
            known = ", ".join(sorted(self._records)) or "none yet"
            raise ProbeflowError(f"no alarm with id {alarm_id!r} (known alarms: {known})")
        return rec

    def records(self) -> list[AlarmRecord]:
        return list(self._records.values())

    def active_alarms(self) -> list[dict[str, Any]]:
        """Every alarm not in the normal state, oldest change first."""
        out = [r.to_dict() for r in self._records.values() if r.state != "normal"]
        return sorted(out, key=lambda d: (d["changed_ts"] or 0.0, d["alarm_id"]))

    def in_maintenance(self) -> list[str]:
        return sorted(self._maintenance)

    # --- events ----------------------------------------------------------------
    def _event(self, rec: AlarmRecord, event: str, ts: float, message: str = "") -> AlertEvent:
        rec.changed_ts = ts
        return AlertEvent(
            rule=rec.rule, probe=rec.probe, quantity=rec.quantity, limit=rec.limit,
            event=event, state=rec.state, ts=float(ts), value=float(rec.last_value),
            threshold=float(rec.threshold), severity=rec.severity,
            message=message or rec.message,
        )

    def apply(self, tr: Transition) -> AlertEvent | None:
        """A condition change from a rule; returns the event, or None while shelved/suppressed."""
        rec = self._records.get(tr.alarm_id)
        if rec is None:
            rec = AlarmRecord(
                tr.rule, tr.probe, tr.quantity, tr.limit, tr.severity, tr.threshold,
                list(tr.members or (tr.probe,)),
            )
            rec.suppressed = any(m in self._maintenance for m in rec.members)
            self._records[tr.alarm_id] = rec
        rec.active = tr.active
        rec.last_ts = tr.ts
        rec.last_value = tr.value
        rec.threshold = tr.threshold
        rec.severity = tr.severity
        rec.message = tr.message
        if rec.suppressed or rec.shelved_until is not None:
            return None
        if tr.active:
            rec.unacked = True
            return self._event(rec, "raise", tr.ts)
        return self._event(rec, "clear", tr.ts)

    def ack(self, alarm_id: str, ts: float) -> AlertEvent:
        rec = self.get(alarm_id)
        if rec.state not in ("unack_active", "unack_returned"):
            raise ProbeflowError(
                f"alarm {alarm_id} is {rec.state}; only an unacknowledged alarm can be acknowledged"
            )
        rec.unacked = False
        return self._event(rec, "ack", ts, f"acknowledged ({rec.message})" if rec.message else "acknowledged")

    def shelve(self, alarm_id: str, until_ts: float, ts: float) -> AlertEvent:
        rec = self.get(alarm_id)
        if not until_ts > ts:
            raise ProbeflowError(f"shelving {alarm_id}: the end time must be later than now")
        rec.shelved_until = float(until_ts)
        rec.unacked = False
        return self._event(rec, "shelve", ts, f"shelved until epoch {until_ts:.0f}")

    def unshelve(self, alarm_id: str, ts: float) -> AlertEvent:
        rec = self.get(alarm_id)
        if rec.shelved_until is None:
            raise ProbeflowError(f"alarm {alarm_id} is not shelved")
        rec.shelved_until = None
        rec.unacked = rec.active
        return self._event(rec, "unshelve", ts, "shelving ended")

    def expire_shelves(self, now: float) -> list[AlertEvent]:
        """Unshelve every alarm whose shelving ended at or before ``now`` (event at its end time)."""
        due = [r for r in self._records.values() if r.shelved_until is not None and r.shelved_until <= now]
        due.sort(key=lambda r: (r.shelved_until or 0.0, r.alarm_id))
        out = []
        for rec in due:
            end = float(rec.shelved_until or now)
            out.append(self.unshelve(rec.alarm_id, end))
        return out

    def set_maintenance(self, probe: str, on: bool, ts: float) -> list[AlertEvent]:
        """Suppress (``on``) or restore every alarm of a probe; returns the events."""
        out: list[AlertEvent] = []
        if on:
            if probe in self._maintenance:
                return out
            self._maintenance.add(probe)
            for rec in self._records.values():
                if probe in rec.members and not rec.suppressed:
                    before = rec.state
                    rec.suppressed = True
                    rec.unacked = False
                    if before != "normal":
                        out.append(self._event(rec, "suppress", ts, f"{probe} in maintenance"))
                    rec.extra["announced"] = before != "normal"
            return out
        if probe not in self._maintenance:
            return out
        self._maintenance.discard(probe)
        for rec in self._records.values():
            if rec.suppressed and not any(m in self._maintenance for m in rec.members):
                rec.suppressed = False
                if rec.shelved_until is None:
                    rec.unacked = rec.active
                announced = bool(rec.extra.pop("announced", False))
                if announced or rec.state != "normal":
                    out.append(self._event(rec, "unsuppress", ts, f"{probe} back in service"))
        return out

    # --- persistence -------------------------------------------------------------
    def state(self) -> dict[str, Any]:
        recs = []
        for r in self._records.values():
            d = asdict(r)
            for key in _FLOAT_KEYS:
                if d[key] != d[key]:  # NaN is not JSON
                    d[key] = None
            recs.append(d)
        return {"records": recs, "maintenance": sorted(self._maintenance)}

    def restore(self, state: dict[str, Any]) -> None:
        self._records = {}
        for raw in state.get("records", []):
            d = dict(raw)
            for key in _FLOAT_KEYS:
                if d.get(key) is None:
                    d[key] = float("nan")
            d["members"] = list(d.get("members", []))
            rec = AlarmRecord(**d)
            self._records[rec.alarm_id] = rec
        self._maintenance = set(state.get("maintenance", []))
