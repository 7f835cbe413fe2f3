"""Calibrations, maintenance and lab checks from the calibration store into the running service.

Which calibration converts a reading (decided here, for every configured probe):

* ``calibration: store`` -- the accepted calibrations in the store, each for
  readings stamped at or after its ``applies_from``; before the first one the
  probe is uncalibrated (flagged).
* an inline ``calibration: {...}`` -- the starting point.  Once the store holds
  an accepted calibration of the probe (a technician calibrated it, or a grab
  sample standardised it), that one is used from its ``applies_from`` on: a
  technician's calibration is never silently ignored.  The service logs
  ``calibration_overrides_config`` when this happens; edit the config (or use
  ``calibration: store``) to make it explicit.
* no calibration -- likewise, store calibrations apply from their time on.

At start the accepted history is loaded (so a replay of older readings uses the
calibration that was valid then); afterwards :class:`CalibrationWatcher` is
polled before every micro-batch (an indexed ``max(id)`` query), so a reading
queued after a calibration was committed is converted with it.  Maintenance
periods go to the converter (quality ``maintenance``) and to the rule engine
(alarms suppressed).  A new accepted calibration is checked against the
previous one (offset/slope jump) and the slope trend is forecast against the
probe's minimum acceptable slope; a new grab sample is checked against its
limit and the trend of differences (``rules.lab_checks``).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from probeflow.calibration.due import FULL_CALIBRATION_KINDS
from probeflow.calibration.site import load_limits
from probeflow.calibration.watch import CalibrationUpdate, CalibrationWatcher
from probeflow.config.models import ProbeConfig
from probeflow.convert import Converter
from probeflow.errors import ProbeflowError, StoreError
from probeflow.events import AlertEvent, rfc3339
from probeflow.rules.config import LabChecksConfig
from probeflow.rules.lab_checks import (
    SECONDS_PER_DAY,
    calibration_jumps,
    grab_sample_findings,
    grab_sample_trend_per_day,
    slope_limit_forecast,
)
from probeflow.service.log import Log

__all__ = ["CalibrationFeed"]

GRAB_RULE = "grab-sample"
HISTORY_RULE = "calibration-history"


class CalibrationFeed:
    """Applies the calibration store to a converter and a rule engine (module docstring)."""

    def __init__(self, db_path: str | Path, probes: Sequence[ProbeConfig], converter: Converter,
                 log: Log, lab: LabChecksConfig | None = None) -> None:
        self.probes = {p.id: p for p in probes}
        self.converter = converter
        self.log = log
        self.lab = lab or LabChecksConfig()
        self.watcher = CalibrationWatcher(db_path, any_thread=True)
        self.store = self.watcher.store
        self._maintenance = {p.id: bool(p.maintenance) for p in probes}
        self._unknown: set[str] = set()
        self._last_grab_id = 0
        self.applied = 0

    def close(self) -> None:
        self.watcher.close()

    # -- start ---------------------------------------------------------------------------
    def load(self) -> None:
        """Install every probe's accepted history (oldest first) and note where polling starts."""
        loaded: set[int] = set()
        for probe in self.probes.values():
            records = [r for r in self.store.history(probe.id, accepted_only=True)
                       if r.offset_mv is not None and r.slope_pct is not None]
            records.sort(key=lambda r: (r.applies_from, r.id))
            for record in records:
                self._apply(CalibrationUpdate.of(record), quiet=record is not records[-1])
                loaded.add(record.id)
            if not records and probe.calibration_from_store:
                self.log.warning("calibration_missing", probe=probe.id,
                                 hint="no accepted calibration in the store yet; readings are "
                                      "flagged uncalibrated until one is recorded")
        # the watcher's first poll returns the latest of each probe: the same ones, unless a
        # calibration was recorded just now (then it is applied here, not lost)
        updates, _maintenance = self.watcher.poll()
        for update in updates:
            if update.id not in loaded:
                self._apply(update)
        self._last_grab_id = self._max_grab_id()

    # -- before every batch ---------------------------------------------------------------
    def poll(self, engine: Any, now: float, *, live: bool = True) -> list[AlertEvent]:
        """New calibrations and (``live``) maintenance changes and calibration-history
        checks; returns the alert events they caused."""
        updates, maintenance = self.watcher.poll()
        events: list[AlertEvent] = []
        for update in updates:
            if self._apply(update) and live:
                events.extend(self._history_checks(engine, update.probe, now))
        if not live:
            return events
        for probe, on in maintenance.items():
            if probe not in self.probes or self._maintenance.get(probe) == on:
                continue
            self._maintenance[probe] = on
            self.converter.set_maintenance(probe, on)
            if engine is not None:
                events.extend(engine.set_maintenance(probe, on, now))
            self.log.info("maintenance_" + ("started" if on else "ended"), probe=probe,
                          at=rfc3339(now))
        return events

    def _apply(self, u: CalibrationUpdate, quiet: bool = False) -> bool:
        probe = self.probes.get(u.probe)
        if probe is None:
            if u.probe not in self._unknown:
                self._unknown.add(u.probe)
                self.log.warning("calibration_for_unknown_probe", probe=u.probe,
                                 hint="the store holds a calibration of a probe this config lacks")
            return False
        try:
            self.converter.set_calibration(u.probe, u.offset_mv, u.slope_pct, u.zero_ph,
                                           valid_from=u.applies_from)
        except ProbeflowError as exc:
            self.log.error("calibration_not_applied", probe=u.probe, calibration_id=u.id, error=str(exc))
            return False
        self.applied += 1
        if quiet:
            return True
        self.log.info("calibration_applied", probe=u.probe, calibration_id=u.id, kind=u.kind,
                      applies_from=rfc3339(u.applies_from), offset_mv=round(u.offset_mv, 3),
                      slope_pct=round(u.slope_pct, 3), zero_ph=u.zero_ph)
        if probe.calibration is not None and not probe.calibration_from_store:
            self.log.warning("calibration_overrides_config", probe=u.probe, calibration_id=u.id,
                             applies_from=rfc3339(u.applies_from),
                             config_offset_mv=probe.calibration.offset_mv,
                             config_slope_pct=probe.calibration.slope_pct,
                             hint="a calibration recorded in the store replaces the config's "
                                  "inline one from its applies_from on")
        return True

    # -- calibration history checks ---------------------------------------------------
    def _history_checks(self, engine: Any, probe: str, now: float) -> list[AlertEvent]:
        if engine is None:
            return []
        lab = self.lab
        rows = [(r.ts, r.offset_mv, r.slope_pct) for r in self.store.history(probe, accepted_only=True)
                if r.offset_mv is not None and r.slope_pct is not None]
        events: list[AlertEvent] = []
        if len(rows) >= 2:
            jumps = calibration_jumps(rows[-2:], lab.offset_jump_mv, lab.slope_jump_pct)
            last = jumps[0] if jumps else None
            d_off = rows[-1][1] - rows[-2][1]
            d_slope = rows[-1][2] - rows[-2][2]
            events += _maybe(engine.external(
                HISTORY_RULE, probe, "offset_jump", bool(last and last.offset_exceeds), now,
                value=d_off, threshold=lab.offset_jump_mv, quantity="mv", severity="medium",
                message=f"offset moved {d_off:+.1f} mV since the previous calibration "
                        f"(limit {lab.offset_jump_mv:g} mV): check the reference junction"))
            events += _maybe(engine.external(
                HISTORY_RULE, probe, "slope_jump", bool(last and last.slope_exceeds), now,
                value=d_slope, threshold=lab.slope_jump_pct, quantity="slope_pct", severity="medium",
                message=f"slope moved {d_slope:+.1f} % since the previous calibration "
                        f"(limit {lab.slope_jump_pct:g} %): check buffers and the glass membrane"))
        full = [(r.ts, r.offset_mv, r.slope_pct) for r in self.store.history(probe, accepted_only=True)
                if r.kind in FULL_CALIBRATION_KINDS and r.offset_mv is not None and r.slope_pct is not None]
        try:
            minimum = load_limits(None, self.probes[probe]).slope_min_pct
            when = slope_limit_forecast(full, minimum, lab.slope_forecast_min_points)
        except ProbeflowError as exc:
            self.log.error("slope_forecast_failed", probe=probe, error=str(exc))
            return events
        days = math.nan if when is None else (when - now) / SECONDS_PER_DAY
        soon = when is not None and days <= lab.slope_forecast_days
        events += _maybe(engine.external(
            HISTORY_RULE, probe, "slope_forecast", soon, now, value=days,
            threshold=lab.slope_forecast_days, quantity="days", severity="low",
            message=(f"the slope trend reaches the minimum {minimum:g} % on {rfc3339(when)[:10]}: "
                     "plan an electrode replacement") if when is not None else ""))
        return events

    # -- grab samples (about once a second) ----------------------------------------------
    def _max_grab_id(self) -> int:
        try:
            return self.store.max_grab_id()
        except StoreError as exc:
            self.log.error("grab_samples_unreadable", error=str(exc))
            return self._last_grab_id

    def poll_grab_samples(self, engine: Any, now: float) -> list[AlertEvent]:
        """Check grab samples recorded since the last call; returns the alert events."""
        top = self._max_grab_id()
        if top <= self._last_grab_id or engine is None:
            self._last_grab_id = max(top, self._last_grab_id)
            return []
        try:
            new = self.store.probes_with_grab_after(self._last_grab_id)
        except StoreError as exc:
            self.log.error("grab_samples_unreadable", error=str(exc))
            return []
        self._last_grab_id = top
        events: list[AlertEvent] = []
        lab = self.lab
        for probe in new:
            if probe not in self.probes:
                continue
            rows = [(g.ts, g.lab_ph, g.online_ph) for g in self.store.grab_samples(probe)
                    if g.online_ph is not None]
            if not rows:
                continue
            latest = grab_sample_findings(rows, lab.grab_limit_ph)[-1]
            events += _maybe(engine.external(
                GRAB_RULE, probe, "deviation", latest.exceeds, now, value=latest.difference,
                threshold=lab.grab_limit_ph, quantity="ph", severity="medium",
                message=f"online pH differs from the lab value {latest.lab_ph:.2f} by "
                        f"{latest.difference:+.2f} (limit {lab.grab_limit_ph:g}): check or "
                        "recalibrate the probe"))
            if lab.grab_trend_limit_ph_per_day is not None and len(rows) >= lab.grab_trend_min_samples:
                trend = grab_sample_trend_per_day(rows)
                over = math.isfinite(trend) and abs(trend) > lab.grab_trend_limit_ph_per_day
                events += _maybe(engine.external(
                    GRAB_RULE, probe, "trend", over, now, value=trend,
                    threshold=lab.grab_trend_limit_ph_per_day, quantity="ph_per_day",
                    message=f"online-minus-lab difference drifts {trend:+.3f} pH/day"))
        return events


def _maybe(event: AlertEvent | None) -> list[AlertEvent]:
    return [] if event is None else [event]
