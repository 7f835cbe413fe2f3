"""Which probes are due for calibration (per-probe ``calibration_due_days`` in the config).

A probe is overdue when its interval is set and its last accepted buffer or
manual calibration is older than the interval, or it has none.  A grab-sample
offset correction adjusts the offset only, so it does not reset the clock.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

from probeflow.calibration.store import CalibrationStore

__all__ = ["FULL_CALIBRATION_KINDS", "OverdueProbe", "overdue_probes"]

FULL_CALIBRATION_KINDS = ("buffer", "manual")
SECONDS_PER_DAY = 86400.0


@dataclass(frozen=True)
class OverdueProbe:
    probe: str
    interval_days: int
    last_calibrated: float | None   # epoch s, None if never calibrated
    due_at: float | None            # epoch s, None if never calibrated

    def days_overdue(self, now: float) -> float | None:
        return None if self.due_at is None else (now - self.due_at) / SECONDS_PER_DAY

    def message(self, now: float) -> str:
        if self.due_at is None:
            return (f"{self.probe} has no accepted calibration on record; calibrate it "
                    f"(interval {self.interval_days} days).")
        return (f"{self.probe} calibration is {self.days_overdue(now):.1f} days overdue "
                f"(interval {self.interval_days} days).")


def overdue_probes(store: CalibrationStore, probes: Iterable[Any], now: float) -> list[OverdueProbe]:
    """Probes (ProbeConfig-like: ``id``, ``calibration_due_days``) overdue at ``now``."""
    out: list[OverdueProbe] = []
    for probe in probes:
        days = getattr(probe, "calibration_due_days", None)
        if not days:
            continue
        last = store.latest_accepted(probe.id, kinds=FULL_CALIBRATION_KINDS)
        if last is None:
            out.append(OverdueProbe(probe.id, int(days), None, None))
            continue
        due = last.ts + float(days) * SECONDS_PER_DAY
        if now >= due:
            out.append(OverdueProbe(probe.id, int(days), last.ts, due))
    return out
