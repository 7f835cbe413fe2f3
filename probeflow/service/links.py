"""What ties the running service to things beside the reading path.

The pipeline thread calls :meth:`ServiceLinks.before_batch` before converting
each micro-batch and :meth:`ServiceLinks.every_second` about once a second,
so everything that touches the rule engine runs on that one thread:

* calibrations and maintenance from the calibration store
  (:mod:`probeflow.service.calibration_feed`), before every batch;
* operator alarm commands from the ``alarm_commands`` table and the MQTT
  command topic (:mod:`probeflow.service.alarm_commands`);
* alarms for conditions found outside the rules, through the engine's
  lifecycle (:meth:`probeflow.rules.engine.Engine.external`):

  ============================  ==========================================
  alarm id                      raised when
  ============================  ==========================================
  data-gap/COLLECTOR/session    an MQTT broker forgot the persistent session
                                (raise and clear at once: stays
                                unack_returned until acknowledged)
  outbox-quota/STORE/warn       a store's outbox passes its warn fraction
                                (clears below 90 % of it)
  calibration-due/PROBE/overdue a probe's calibration interval has passed
                                (checked at start, hourly and after each
                                new calibration)
  grab-sample/PROBE/...         see calibration_feed
  calibration-history/PROBE/... see calibration_feed
  ============================  ==========================================

Other threads (collector callbacks, the MQTT command listener) hand work in
with :meth:`post`.  Alerts support operators; they are not a safety system.
"""

from __future__ import annotations

import collections
import functools
import threading
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from probeflow.calibration.due import overdue_probes
from probeflow.config.load import LoadedConfig
from probeflow.convert import Converter
from probeflow.errors import ProbeflowError
from probeflow.events import AlertEvent, rfc3339
from probeflow.service.alarm_commands import AlarmCommand, CommandInbox, apply_command
from probeflow.service.calibration_feed import CalibrationFeed
from probeflow.service.log import Log

__all__ = ["OVERDUE_CHECK_S", "QUOTA_CLEAR_RATIO", "ServiceLinks", "sqlite_path_of"]

OVERDUE_CHECK_S = 3600.0
QUOTA_CLEAR_RATIO = 0.9
"""An outbox-quota alarm clears below this share of the warn fraction (hysteresis)."""

Posted = Callable[[Any, float], list[AlertEvent]]


def sqlite_path_of(store_objects: Sequence[tuple[str, Any]]) -> Path | None:
    """The file of the first SQLite store (the service's own record), if any."""
    for _name, store in store_objects:
        path = getattr(store, "path", None)
        if path is not None and type(store).__name__ == "SqliteStore":
            return Path(path)
    return None


class ServiceLinks:
    """Calibration feed, alarm commands and external alarms for one service."""

    def __init__(self, config: LoadedConfig, converter: Converter, engine: Any, log: Log,
                 db_path: Path | None, stores: Sequence[tuple[str, Any]], *,
                 commands: bool = True) -> None:
        """``commands`` False (replay): apply stored calibrations only; no operator
        commands, maintenance states or external alarms, which belong to the live service."""
        self.config = config
        self.log = log
        self.stores = list(stores)
        if engine is None:  # no rules section: external alarms still get a lifecycle
            from probeflow.rules.engine import Engine

            engine = Engine([])
        self.engine = engine
        lab = getattr(config.rules, "lab_checks", None)
        self.feed = (CalibrationFeed(db_path, config.probes, converter, log, lab)
                     if db_path is not None else None)
        self.live = commands
        self.inbox = CommandInbox(db_path) if db_path is not None and commands else None
        self._posted: collections.deque[Posted] = collections.deque()
        self._posted_lock = threading.Lock()
        self._next_overdue = 0.0
        self.listeners: list[Any] = []
        self._after_commit: list[Callable[[], None]] = []
        self.counters = {"commands_applied": 0, "commands_refused": 0, "external_alarms": 0}

    # -- life cycle -----------------------------------------------------------------------
    def start(self) -> None:
        if self.feed is not None:
            self.feed.load()
        for listener in self.listeners:
            listener.start()

    def close(self) -> None:
        for listener in self.listeners:
            try:
                listener.stop()
            except Exception as exc:  # noqa: BLE001 - closing: report and go on
                self.log.error("command_listener_stop_failed", error=str(exc))
        for part in (self.feed, self.inbox):
            if part is not None:
                try:
                    part.close()
                except ProbeflowError as exc:
                    self.log.error("link_close_failed", error=str(exc))

    # -- any thread -------------------------------------------------------------------------
    def post(self, work: Posted) -> None:
        """Run ``work(engine, now)`` on the pipeline thread; its events go to the stores."""
        with self._posted_lock:
            self._posted.append(work)

    def post_command(self, cmd: AlarmCommand) -> None:
        self.post(lambda engine, now: self._apply(cmd, now))

    def session_lost(self, collector: str, detail: str) -> None:
        """CollectorContext.on_session_lost: a data-gap alarm (raised and cleared at once)."""
        def work(engine: Any, now: float) -> list[AlertEvent]:
            out = []
            for active in (True, False):
                ev = engine.external("data-gap", collector, "session", active, now,
                                     severity="high", quantity="readings",
                                     message=f"DATA GAP: {detail}")
                if ev is not None:
                    out.append(ev)
            return out
        self.post(work)

    # -- the pipeline thread ----------------------------------------------------------------
    def commit_hooks(self) -> tuple[Callable[[], None], ...]:
        """Hooks to run once the events just returned are committed to the durable store:
        an operator command is reported done only when its event is on record."""
        hooks = tuple(self._after_commit)
        self._after_commit.clear()
        return hooks

    def before_batch(self, now: float) -> list[AlertEvent]:
        return self._drain_posted(now) + self._calibrations(now)

    def _calibrations(self, now: float) -> list[AlertEvent]:
        events: list[AlertEvent] = []
        if self.feed is None:
            return events
        try:
            applied_before = self.feed.applied
            events += self.feed.poll(self.engine, now, live=self.live)
            if self.feed.applied != applied_before:
                self._next_overdue = 0.0  # a calibration may end an overdue alarm
        except ProbeflowError as exc:
            self.log.error("calibration_poll_failed", error=str(exc))
        return events

    def every_second(self, now: float) -> list[AlertEvent]:
        events = self._drain_posted(now) + self._calibrations(now)
        if self.inbox is not None:
            try:
                for cmd in self.inbox.take(now):
                    found, result = self._apply_logged(cmd, now)
                    events += found
                    if cmd.id is not None:
                        self._after_commit.append(functools.partial(self._finish, cmd.id, result))
            except ProbeflowError as exc:
                self.log.error("alarm_commands_failed", error=str(exc))
        if not self.live:
            return events
        events += self._quota_alarms(now)
        if self.feed is not None:
            try:
                events += self.feed.poll_grab_samples(self.engine, now)
                if now >= self._next_overdue:
                    self._next_overdue = now + OVERDUE_CHECK_S
                    events += self._overdue_alarms(now)
            except ProbeflowError as exc:
                self.log.error("calibration_checks_failed", error=str(exc))
        self.counters["external_alarms"] += sum(1 for e in events if e.event == "raise")
        return events

    def _drain_posted(self, now: float) -> list[AlertEvent]:
        if not self._posted:
            return []
        with self._posted_lock:
            work = list(self._posted)
            self._posted.clear()
        events: list[AlertEvent] = []
        for item in work:
            try:
                events += item(self.engine, now)
            except Exception as exc:  # noqa: BLE001 - one bad item must not stop the pipeline
                self.log.error("posted_work_failed", error=f"{type(exc).__name__}: {exc}")
        return events

    def _finish(self, command_id: int, result: str) -> None:
        """Runs on a store worker's thread after the commit."""
        if self.inbox is None:
            return
        try:
            self.inbox.finish(command_id, result)
        except ProbeflowError as exc:
            self.log.error("alarm_command_not_marked_done", command_id=command_id, error=str(exc))

    def _apply(self, cmd: AlarmCommand, now: float) -> list[AlertEvent]:
        return self._apply_logged(cmd, now)[0]

    def _apply_logged(self, cmd: AlarmCommand, now: float) -> tuple[list[AlertEvent], str]:
        events, result = apply_command(self.engine, cmd, now)
        ok = result.startswith("ok")
        self.counters["commands_applied" if ok else "commands_refused"] += 1
        (self.log.info if ok else self.log.warning)(
            "alarm_command", command=cmd.command, alarm_id=cmd.alarm_id, who=cmd.who,
            command_id=cmd.id, result=result)
        return events, result

    def _quota_alarms(self, now: float) -> list[AlertEvent]:
        events: list[AlertEvent] = []
        for name, store in self.stores:
            fraction = getattr(store, "quota_fraction", None)
            if fraction is None:
                continue
            try:
                frac = float(fraction)
            except (TypeError, ValueError):
                continue
            warn = float(getattr(getattr(store, "config", None), "quota_warn_fraction", 0.8))
            if frac >= warn:
                active = True
            elif frac < warn * QUOTA_CLEAR_RATIO:
                active = False
            else:
                continue
            ev = self.engine.external(
                "outbox-quota", name, "warn", active, now, value=frac, threshold=warn,
                quantity="quota_fraction", severity="high",
                message=f"the outbox of {name} is {100 * frac:.0f} % full (warning at "
                        f"{100 * warn:.0f} %): the time-series database is unreachable or too slow")
            if ev is not None:
                events.append(ev)
                self.log.warning("outbox_quota", store=name, fraction=round(frac, 3), active=active)
        return events

    def _overdue_alarms(self, now: float) -> list[AlertEvent]:
        feed = self.feed
        if feed is None:
            return []
        with_interval = [p for p in self.config.probes if p.calibration_due_days]
        if not with_interval:
            return []
        overdue = {o.probe: o for o in overdue_probes(feed.store, with_interval, now)}
        events: list[AlertEvent] = []
        for probe in with_interval:
            found = overdue.get(probe.id)
            days = found.days_overdue(now) if found is not None else None
            ev = self.engine.external(
                "calibration-due", probe.id, "overdue", found is not None, now,
                value=float("nan") if days is None else days,
                threshold=float(probe.calibration_due_days or 0), quantity="days", severity="low",
                message=found.message(now) if found is not None else "calibrated")
            if ev is not None:
                events.append(ev)
                if found is not None:
                    self.log.warning("calibration_overdue", probe=probe.id, detail=found.message(now),
                                     checked_at=rfc3339(now))
        return events
