"""Operator alarm commands for the running service, through its SQLite file.

``probeflow ack`` and ``probeflow alarms --shelve/--unshelve`` with ``--config``
write one row into ``alarm_commands``; the service polls the table about once
a second, applies each new command through the rule engine (the resulting
ack/shelve/unshelve events go to every store like any alert event) and marks
the row done with its result.  The MQTT command topic feeds the same path
(:mod:`probeflow.service.mqtt_commands`).

Table ``alarm_commands``::

    id        row id (the command's number)
    ts        when it was queued [epoch s]
    command   ack | shelve | unshelve
    alarm_id  rule/probe/limit, as listed by ``probeflow alarms``
    arg       shelve: minutes
    who       who asked (user name, or "mqtt")
    done_ts   when the service handled it [epoch s]; NULL while pending
    result    "ok: <state after>", "refused: <why>" or "expired: ..."

A command older than :data:`COMMAND_EXPIRY_S` when the service first sees it
(queued while the service was stopped) is marked expired, not applied: an
acknowledgement meant for an old alarm must not silence a new one.
"""

from __future__ import annotations

import json
import math
import os
import sqlite3
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from probeflow.errors import ProbeflowError, StoreError
from probeflow.events import AlertEvent

__all__ = [
    "COMMANDS",
    "COMMAND_EXPIRY_S",
    "AlarmCommand",
    "CommandInbox",
    "alarms_from_store",
    "apply_command",
    "command_from_json",
    "create_command_table",
    "queue_command",
    "wait_for_result",
]

COMMANDS = ("ack", "shelve", "unshelve")
COMMAND_EXPIRY_S = 60.0
MAX_SHELVE_MINUTES = 7 * 24 * 60.0
"""Longest shelving accepted [min] (one week; common practice, no source): a shelved
alarm is silent, so shelving is meant for hours, not for ever."""

COMMAND_SCHEMA = """
CREATE TABLE IF NOT EXISTS alarm_commands (
    id INTEGER PRIMARY KEY, ts REAL NOT NULL,
    command TEXT NOT NULL CHECK (command IN ('ack', 'shelve', 'unshelve')),
    alarm_id TEXT NOT NULL, arg TEXT, who TEXT, done_ts REAL, result TEXT
);
CREATE INDEX IF NOT EXISTS alarm_commands_pending ON alarm_commands (done_ts, id);
"""

_BUSY_TIMEOUT_S = 10.0


def create_command_table(db: sqlite3.Connection) -> None:
    """Create ``alarm_commands`` in ``db`` if missing."""
    db.executescript(COMMAND_SCHEMA)


@dataclass(frozen=True)
class AlarmCommand:
    """One operator command: ``minutes`` only for shelve; ``id`` None when it came over MQTT."""

    command: str
    alarm_id: str
    ts: float
    minutes: float | None = None
    who: str = ""
    id: int | None = None

    def __post_init__(self) -> None:
        if self.command not in COMMANDS:
            raise ProbeflowError(f"unknown alarm command {self.command!r}; use one of {', '.join(COMMANDS)}")
        if not self.alarm_id or not isinstance(self.alarm_id, str):
            raise ProbeflowError("an alarm command needs the alarm id (rule/probe/limit)")
        if self.command == "shelve":
            m = self.minutes
            if m is None or not math.isfinite(m) or not 0 < m <= MAX_SHELVE_MINUTES:
                raise ProbeflowError(f"shelving needs minutes between 0 and {MAX_SHELVE_MINUTES:g}, "
                                     f"got {m!r}")


def command_from_json(payload: bytes | str, *, who: str = "mqtt", now: float | None = None) -> AlarmCommand:
    """``{"command": "ack"|"shelve"|"unshelve", "alarm_id": "...", "minutes": N}`` -> command.

    ProbeflowError says what is wrong (the caller quarantines the payload).
    """
    try:
        data = json.loads(payload)
    except (ValueError, UnicodeDecodeError) as exc:
        raise ProbeflowError(f"alarm command is not JSON: {exc}") from None
    if not isinstance(data, dict):
        raise ProbeflowError("alarm command must be a JSON object with command and alarm_id")
    minutes = data.get("minutes")
    if minutes is not None and (isinstance(minutes, bool) or not isinstance(minutes, int | float)):
        raise ProbeflowError(f"alarm command: minutes must be a number, got {minutes!r}")
    unknown = sorted(set(data) - {"command", "alarm_id", "minutes", "who"})
    if unknown:
        raise ProbeflowError(f"alarm command: unknown key(s) {unknown}")
    given_who = data.get("who")
    return AlarmCommand(
        command=str(data.get("command")), alarm_id=data.get("alarm_id") or "",
        ts=time.time() if now is None else now,
        minutes=None if minutes is None else float(minutes),
        who=f"{who}:{given_who}" if isinstance(given_who, str) and given_who else who)


def apply_command(engine: Any, cmd: AlarmCommand, now: float) -> tuple[list[AlertEvent], str]:
    """Apply ``cmd`` through the rule engine at service time ``now``: (events, result text)."""
    try:
        if cmd.command == "ack":
            event = engine.ack(cmd.alarm_id, now)
        elif cmd.command == "shelve":
            event = engine.shelve(cmd.alarm_id, now + 60.0 * float(cmd.minutes or 0.0), now)
        else:
            event = engine.unshelve(cmd.alarm_id, now)
    except ProbeflowError as exc:
        return [], f"refused: {exc}"
    return [event], f"ok: {event.state}"


def _connect(path: Path) -> sqlite3.Connection:
    try:
        if not path.exists():
            raise StoreError(f"the service's SQLite file {path} does not exist; is this the "
                             "config the service runs with?")
        db = sqlite3.connect(path, timeout=_BUSY_TIMEOUT_S, isolation_level=None)
        create_command_table(db)
        return db
    except sqlite3.Error as exc:
        raise StoreError(f"cannot open {path} for alarm commands: {exc}") from exc


def queue_command(path: str | Path, command: str, alarm_id: str, *, minutes: float | None = None,
                  who: str | None = None, now: float | None = None) -> int:
    """Queue a command for the running service; returns its id."""
    cmd = AlarmCommand(command, alarm_id, time.time() if now is None else now, minutes,
                       who or os.environ.get("USER", "") or "unknown")
    db = _connect(Path(path))
    try:
        cur = db.execute("INSERT INTO alarm_commands (ts, command, alarm_id, arg, who) VALUES (?,?,?,?,?)",
                         (cmd.ts, cmd.command, cmd.alarm_id,
                          None if cmd.minutes is None else repr(cmd.minutes), cmd.who))
        return int(cur.lastrowid or 0)
    except sqlite3.Error as exc:
        raise StoreError(f"cannot queue the alarm command in {path}: {exc}") from exc
    finally:
        db.close()


def wait_for_result(path: str | Path, command_id: int, timeout_s: float) -> str | None:
    """The service's result for command ``command_id``, or None if not handled within ``timeout_s``."""
    db = _connect(Path(path))
    try:
        deadline = time.monotonic() + timeout_s
        while True:
            row = db.execute("SELECT done_ts, result FROM alarm_commands WHERE id = ?",
                             (command_id,)).fetchone()
            if row is not None and row[0] is not None:
                return str(row[1])
            if time.monotonic() >= deadline:
                return None
            time.sleep(0.1)
    except sqlite3.Error as exc:
        raise StoreError(f"cannot read the alarm command from {path}: {exc}") from exc
    finally:
        db.close()


class CommandInbox:
    """The service's side of the table: pending commands, and marking them done."""

    def __init__(self, path: str | Path, *, expiry_s: float = COMMAND_EXPIRY_S) -> None:
        self.path = Path(path)
        self.expiry_s = expiry_s
        self._lock = threading.Lock()   # taken on the pipeline thread, finished on a store's
        self._taken = 0                 # commands up to this id were taken (maybe not yet done)
        try:
            self._db = sqlite3.connect(self.path, timeout=_BUSY_TIMEOUT_S, isolation_level=None,
                                       check_same_thread=False)
            create_command_table(self._db)
        except sqlite3.Error as exc:
            raise StoreError(f"cannot open {self.path} for alarm commands: {exc}") from exc

    def close(self) -> None:
        try:
            self._db.close()
        except sqlite3.Error as exc:
            raise StoreError(f"closing {self.path} failed: {exc}") from exc

    def take(self, now: float) -> list[AlarmCommand]:
        """Pending commands, oldest first; expired ones are marked so and left out."""
        try:
            with self._lock:
                rows = self._db.execute("SELECT id, ts, command, alarm_id, arg, who FROM alarm_commands "
                                        "WHERE done_ts IS NULL AND id > ? ORDER BY id",
                                        (self._taken,)).fetchall()
        except sqlite3.Error as exc:
            raise StoreError(f"reading alarm commands from {self.path} failed: {exc}") from exc
        out: list[AlarmCommand] = []
        for cid, ts, command, alarm_id, arg, who in rows:
            self._taken = max(self._taken, int(cid))
            if now - float(ts) > self.expiry_s:
                self.finish(cid, f"expired: queued {now - float(ts):.0f} s before the service saw it")
                continue
            try:
                out.append(AlarmCommand(command, alarm_id, float(ts),
                                        None if arg is None else float(arg), who or "", cid))
            except (ProbeflowError, ValueError) as exc:
                self.finish(cid, f"refused: {exc}")
        return out

    def finish(self, command_id: int, result: str) -> None:
        try:
            with self._lock:
                self._db.execute("UPDATE alarm_commands SET done_ts = ?, result = ? WHERE id = ?",
                                 (time.time(), result, command_id))
        except sqlite3.Error as exc:
            raise StoreError(f"marking alarm command {command_id} done in {self.path} failed: {exc}") from exc


def alarms_from_store(path: str | Path, *, include_normal: bool = False) -> list[dict[str, Any]]:
    """Latest state per alarm id from the ``alerts`` table (what the running service last wrote)."""
    p = Path(path)
    if not p.exists():
        raise StoreError(f"the service's SQLite file {p} does not exist (has the service run yet?)")
    try:
        db = sqlite3.connect(f"file:{p}?mode=ro", uri=True, timeout=_BUSY_TIMEOUT_S)
    except sqlite3.Error as exc:
        raise StoreError(f"cannot open {p}: {exc}") from exc
    try:
        rows = db.execute(
            "SELECT a.alarm_id, a.rule, a.probe, a.quantity, a.limit_name, a.event, a.state, a.ts, "
            "a.value, a.threshold, a.severity, a.message FROM alerts a JOIN "
            "(SELECT alarm_id, max(id) AS id FROM alerts GROUP BY alarm_id) latest "
            "ON a.id = latest.id ORDER BY a.ts, a.alarm_id").fetchall()
    except sqlite3.Error as exc:
        if "no such table" in str(exc):
            return []
        raise StoreError(f"reading alarms from {p} failed: {exc}") from exc
    finally:
        db.close()
    keys = ("alarm_id", "rule", "probe", "quantity", "limit", "event", "state", "changed_ts",
            "value", "threshold", "severity", "message")
    out = [dict(zip(keys, r, strict=True)) for r in rows]
    return out if include_normal else [r for r in out if r["state"] != "normal"]

