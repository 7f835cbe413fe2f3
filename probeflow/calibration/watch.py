"""Let the running service pick up new calibrations and maintenance without a restart.

The service calls :meth:`CalibrationWatcher.poll` every second or so.  A poll
costs one indexed ``max(id)`` query on ``calibration_log`` plus one query of
the open maintenance periods; the full rows are read only when the id moved.

* The first poll returns the latest accepted calibration of every probe (so a
  service that starts later knows where it stands); later polls return each
  newly accepted calibration, in the order they were stored.  Rejected
  calibrations are never returned.
* The maintenance map holds every probe that has, or had since the watcher was
  made, an open maintenance period: True while on, False once stopped or
  expired.  Probes absent from the map are not in maintenance.

Wiring (the service loop)::

    for u in updates: converter.set_calibration(u.probe, u.offset_mv, u.slope_pct,
                                                u.zero_ph, valid_from=u.applies_from)
    for probe, on in maintenance.items(): converter.set_maintenance(probe, on);
                                         rules.set_maintenance(probe, on)
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from probeflow.calibration.store import CalibrationRecord, CalibrationStore

__all__ = ["CalibrationUpdate", "CalibrationWatcher"]


@dataclass(frozen=True)
class CalibrationUpdate:
    """An accepted calibration to apply to readings stamped at or after ``applies_from``."""

    id: int
    probe: str
    applies_from: float
    offset_mv: float
    slope_pct: float
    zero_ph: float
    kind: str

    @classmethod
    def of(cls, record: CalibrationRecord) -> CalibrationUpdate:
        cal = record.calibration()  # offset at the reference temperature for isothermal ones
        return cls(record.id, record.probe, record.applies_from, cal.offset_mv, cal.slope_pct,
                   cal.zero_ph, record.kind)


class CalibrationWatcher:
    """Cheap polling of the calibration store for the running service."""

    def __init__(self, db_path: str | Path, *, clock: Callable[[], float] = time.time,
                 any_thread: bool = False) -> None:
        self.store = CalibrationStore(db_path, any_thread=any_thread)
        self._clock = clock
        self._last_id: int | None = None
        self._seen_maintenance: set[str] = set()

    def close(self) -> None:
        self.store.close()

    def poll(self) -> tuple[list[CalibrationUpdate], dict[str, bool]]:
        """(new accepted calibrations, probe -> in maintenance now); see module docstring."""
        updates: list[CalibrationUpdate] = []
        top = self.store.max_calibration_id()
        if self._last_id is None:
            latest: dict[str, CalibrationRecord] = {}
            records = self.store.accepted_after(0)
            top = max([top, *(r.id for r in records)])
            for record in records:
                known = latest.get(record.probe)
                if known is None or (record.applies_from, record.id) >= (known.applies_from, known.id):
                    latest[record.probe] = record
            updates = [CalibrationUpdate.of(r) for r in sorted(latest.values(), key=lambda r: r.id)]
        elif top > self._last_id:
            updates = [CalibrationUpdate.of(r) for r in self.store.accepted_after(self._last_id)]
            top = max([top, *(u.id for u in updates)])
        self._last_id = top
        state = self.store.maintenance_state(self._clock(), sorted(self._seen_maintenance))
        self._seen_maintenance.update(state)
        return updates, state
