"""The calibration store: calibrations, grab samples and maintenance periods in SQLite.

It lives in the same SQLite file as the readings (the ``sqlite`` store's
``path`` in the config), in its own tables, so the running service, the
operator commands and the reports see one record::

    calibration_log     one row per calibration attempt, accepted or rejected
                        (kind 'buffer' | 'grab_offset' | 'manual'); applies_from is
                        the time [epoch s] from which an accepted one converts readings
    calibration_points  the points of a calibration (buffer, its pH at the measured
                        temperature, mV, temperature, stability)
    grab_samples        lab measurements next to the online value at that time;
                        difference = online - lab [pH]
    maintenance         maintenance periods: start, optional until (expiry), ended

Times are epoch seconds (UTC).  The file is created with mode 0600 and used in
WAL mode, so the service can keep writing readings while a technician records a
calibration.  sqlite3 errors become :class:`StoreError` here, at this one boundary.
"""

from __future__ import annotations

import json
import math
import os
import sqlite3
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal, Self

from probeflow.calibration.acceptance import Verdict
from probeflow.calibration.model import Calibration, CalibrationPoint
from probeflow.errors import CalibrationError, StoreError

__all__ = [
    "CALIBRATION_KINDS",
    "SCHEMA",
    "CalibrationRecord",
    "CalibrationStore",
    "GrabSample",
    "MaintenancePeriod",
    "PointDetail",
    "create_calibration_tables",
]

CALIBRATION_KINDS = ("buffer", "grab_offset", "manual")

SCHEMA = """
CREATE TABLE IF NOT EXISTS calibration_log (
    id INTEGER PRIMARY KEY, probe TEXT NOT NULL, ts REAL NOT NULL, applies_from REAL NOT NULL,
    offset_mv REAL, slope_pct REAL, zero_ph REAL, iso_ph REAL, iso_mv REAL,
    verdict TEXT NOT NULL CHECK (verdict IN ('accepted', 'rejected')),
    reasons TEXT, residuals TEXT, who TEXT, electrode_serial TEXT, note TEXT,
    kind TEXT NOT NULL CHECK (kind IN ('buffer', 'grab_offset', 'manual'))
);
CREATE INDEX IF NOT EXISTS calibration_log_probe ON calibration_log (probe, applies_from);
CREATE TABLE IF NOT EXISTS calibration_points (
    cal_id INTEGER NOT NULL, idx INTEGER NOT NULL, buffer TEXT, ph REAL NOT NULL,
    mv REAL NOT NULL, temp_c REAL NOT NULL, stable INTEGER, drift_mv_per_min REAL,
    PRIMARY KEY (cal_id, idx)
);
CREATE TABLE IF NOT EXISTS grab_samples (
    id INTEGER PRIMARY KEY, probe TEXT NOT NULL, ts REAL NOT NULL, lab_ph REAL NOT NULL,
    lab_temp_c REAL, online_ph REAL, difference REAL, applied INTEGER NOT NULL DEFAULT 0,
    note TEXT
);
CREATE INDEX IF NOT EXISTS grab_samples_probe ON grab_samples (probe, ts);
CREATE TABLE IF NOT EXISTS maintenance (
    id INTEGER PRIMARY KEY, probe TEXT NOT NULL, start REAL NOT NULL, until REAL, ended REAL,
    reason TEXT
);
CREATE INDEX IF NOT EXISTS maintenance_open ON maintenance (ended, probe);
"""

_BUSY_TIMEOUT_S = 10.0


def create_calibration_tables(db: sqlite3.Connection) -> None:
    """Create this store's tables in ``db`` if missing (the sqlite store calls it too,
    so the service's file holds readings and calibrations alike)."""
    db.executescript(SCHEMA)


@dataclass(frozen=True)
class PointDetail:
    """A calibration point as stored: the point plus how stable the reading was."""

    point: CalibrationPoint
    stable: bool | None = None
    drift_mv_per_min: float | None = None

    def to_record(self, residual_ph: float | None = None) -> dict[str, Any]:
        record: dict[str, Any] = {"buffer": self.point.buffer, "ph": self.point.ph,
                                  "mv": self.point.mv, "temp_c": self.point.temp_c,
                                  "stable": self.stable, "drift_mv_per_min": self.drift_mv_per_min}
        if residual_ph is not None:
            record["residual_ph"] = residual_ph
        return record


@dataclass(frozen=True)
class CalibrationRecord:
    """One row of calibration_log with its points."""

    id: int
    probe: str
    ts: float
    applies_from: float
    offset_mv: float | None
    slope_pct: float | None
    zero_ph: float | None
    iso_ph: float | None
    iso_mv: float | None
    verdict: Literal["accepted", "rejected"]
    reasons: tuple[str, ...]
    residuals: tuple[float, ...]
    who: str | None
    electrode_serial: str | None
    note: str | None
    kind: str
    points: tuple[PointDetail, ...] = field(default=())

    @property
    def accepted(self) -> bool:
        return self.verdict == "accepted"

    def calibration(self) -> Calibration:
        """The stored result as a Calibration (CalibrationError if it has none)."""
        if self.offset_mv is None or self.slope_pct is None:
            raise CalibrationError(f"Calibration #{self.id} of {self.probe} has no fitted result.")
        zero = 7.0 if self.zero_ph is None else self.zero_ph
        pts = tuple(p.point for p in self.points)
        if self.iso_ph is not None and self.iso_mv is not None:
            return Calibration.isothermal(self.iso_ph, self.iso_mv, self.slope_pct, zero,
                                          residuals_ph=self.residuals, points=pts)
        return Calibration(self.offset_mv, self.slope_pct, zero, self.residuals, pts)

    def to_record(self) -> dict[str, Any]:
        residuals = list(self.residuals)
        points = [p.to_record(residuals[i] if i < len(residuals) else None)
                  for i, p in enumerate(self.points)]
        return {"id": self.id, "probe": self.probe, "ts": self.ts, "applies_from": self.applies_from,
                "kind": self.kind, "verdict": self.verdict, "offset_mv": self.offset_mv,
                "slope_pct": self.slope_pct, "zero_ph": self.zero_ph, "iso_ph": self.iso_ph,
                "iso_mv": self.iso_mv, "residuals": residuals, "reasons": list(self.reasons),
                "points": points, "who": self.who, "electrode_serial": self.electrode_serial,
                "note": self.note}


@dataclass(frozen=True)
class GrabSample:
    id: int
    probe: str
    ts: float
    lab_ph: float
    lab_temp_c: float | None
    online_ph: float | None
    difference: float | None   # online - lab [pH]
    applied: bool
    note: str | None

    def to_record(self) -> dict[str, Any]:
        return dict(self.__dict__)


@dataclass(frozen=True)
class MaintenancePeriod:
    id: int
    probe: str
    start: float
    until: float | None
    ended: float | None
    reason: str | None

    def active(self, now: float) -> bool:
        """On at ``now``: started, not ended, not expired."""
        return (self.start <= now and self.ended is None
                and (self.until is None or now < self.until))

    def to_record(self) -> dict[str, Any]:
        return dict(self.__dict__)


def _create_private(path: Path) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    if not path.exists():
        fd = os.open(path, os.O_CREAT | os.O_WRONLY, 0o600)
        os.close(fd)


def _finite_or_none(value: float | None) -> float | None:
    if value is None:
        return None
    v = float(value)
    return v if math.isfinite(v) else None


class CalibrationStore:
    """Calibrations, grab samples and maintenance periods in the service's SQLite file."""

    def __init__(self, path: str | Path, *, any_thread: bool = False) -> None:
        """``any_thread``: the store may be used from another thread than the one that
        opened it (one at a time; the running service opens it at start and polls it
        on its pipeline thread)."""
        self.path = Path(path)
        try:
            _create_private(self.path)
            self._db = sqlite3.connect(self.path, timeout=_BUSY_TIMEOUT_S, isolation_level=None,
                                       check_same_thread=not any_thread)
            self._db.execute("PRAGMA journal_mode=WAL")
            self._db.execute("PRAGMA synchronous=FULL")
            create_calibration_tables(self._db)
        except (OSError, sqlite3.Error) as exc:
            raise StoreError(f"cannot open the calibration store {self.path}: {exc}") from exc

    def close(self) -> None:
        try:
            self._db.close()
        except sqlite3.Error as exc:
            raise StoreError(f"closing the calibration store {self.path} failed: {exc}") from exc

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- the one sqlite3 boundary ------------------------------------------------------
    @contextmanager
    def _write(self) -> Iterator[sqlite3.Connection]:
        try:
            self._db.execute("BEGIN IMMEDIATE")
            try:
                yield self._db
                self._db.execute("COMMIT")
            except BaseException:
                self._db.execute("ROLLBACK")
                raise
        except sqlite3.Error as exc:
            raise StoreError(f"writing to the calibration store {self.path} failed: {exc}") from exc

    def _query(self, sql: str, params: Sequence[Any] = ()) -> list[tuple[Any, ...]]:
        try:
            return self._db.execute(sql, tuple(params)).fetchall()
        except sqlite3.Error as exc:
            raise StoreError(f"reading the calibration store {self.path} failed: {exc}") from exc

    def has_table(self, name: str) -> bool:
        return bool(self._query("SELECT 1 FROM sqlite_master WHERE type='table' AND name=?", (name,)))

    # -- calibrations ---------------------------------------------------------------------
    def record_calibration(
        self,
        probe: str,
        calibration: Calibration | None,
        verdict: Verdict,
        *,
        kind: str = "buffer",
        ts: float,
        applies_from: float | None = None,
        points: Sequence[PointDetail] | None = None,
        who: str | None = None,
        electrode_serial: str | None = None,
        note: str | None = None,
    ) -> int:
        """Store one calibration attempt; returns its id.

        ``points`` default to the calibration's own points (stability unknown).
        ``applies_from`` defaults to ``ts``.
        """
        if kind not in CALIBRATION_KINDS:
            raise CalibrationError(f"Unknown calibration kind {kind!r}; use one of {CALIBRATION_KINDS}.")
        if points is None:
            points = [PointDetail(p) for p in (calibration.points if calibration else ())]
        cal = calibration
        row = (probe, float(ts), float(ts if applies_from is None else applies_from),
               cal.offset_mv if cal else None, cal.slope_pct if cal else None,
               cal.zero_ph if cal else None, cal.iso_ph if cal else None, cal.iso_mv if cal else None,
               verdict.status, json.dumps(list(verdict.reasons)),
               json.dumps(list(cal.residuals_ph) if cal else []),
               who, electrode_serial, note, kind)
        with self._write() as db:
            cur = db.execute(
                "INSERT INTO calibration_log (probe, ts, applies_from, offset_mv, slope_pct, zero_ph, "
                "iso_ph, iso_mv, verdict, reasons, residuals, who, electrode_serial, note, kind) "
                "VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)", row)
            cal_id = int(cur.lastrowid or 0)
            db.executemany(
                "INSERT INTO calibration_points (cal_id, idx, buffer, ph, mv, temp_c, stable, "
                "drift_mv_per_min) VALUES (?,?,?,?,?,?,?,?)",
                [(cal_id, i, d.point.buffer, d.point.ph, d.point.mv, d.point.temp_c,
                  None if d.stable is None else int(d.stable), _finite_or_none(d.drift_mv_per_min))
                 for i, d in enumerate(points)])
        return cal_id

    _LOG_COLUMNS = ("id, probe, ts, applies_from, offset_mv, slope_pct, zero_ph, iso_ph, iso_mv, "
                    "verdict, reasons, residuals, who, electrode_serial, note, kind")

    def _records(self, where: str, params: Sequence[Any], order: str = "id",
                 limit: int | None = None) -> list[CalibrationRecord]:
        tail = "" if limit is None else f" LIMIT {int(limit)}"
        rows = self._query(f"SELECT {self._LOG_COLUMNS} FROM calibration_log WHERE {where} "
                           f"ORDER BY {order}{tail}", params)
        if not rows:
            return []
        ids = [r[0] for r in rows]
        marks = ",".join("?" * len(ids))
        pts: dict[int, list[PointDetail]] = {i: [] for i in ids}
        for cal_id, _idx, buffer, ph, mv, temp_c, stable, drift in self._query(
                f"SELECT cal_id, idx, buffer, ph, mv, temp_c, stable, drift_mv_per_min "
                f"FROM calibration_points WHERE cal_id IN ({marks}) ORDER BY cal_id, idx", ids):
            pts[cal_id].append(PointDetail(CalibrationPoint(ph, mv, temp_c, buffer),
                                           None if stable is None else bool(stable), drift))
        out = []
        for r in rows:
            out.append(CalibrationRecord(
                id=r[0], probe=r[1], ts=r[2], applies_from=r[3], offset_mv=r[4], slope_pct=r[5],
                zero_ph=r[6], iso_ph=r[7], iso_mv=r[8], verdict=r[9],
                reasons=tuple(json.loads(r[10] or "[]")), residuals=tuple(json.loads(r[11] or "[]")),
                who=r[12], electrode_serial=r[13], note=r[14], kind=r[15], points=tuple(pts[r[0]])))
        return out

    def calibration(self, cal_id: int) -> CalibrationRecord | None:
        found = self._records("id = ?", (cal_id,))
        return found[0] if found else None

    def history(self, probe: str, *, accepted_only: bool = False) -> list[CalibrationRecord]:
        """Every calibration of ``probe``, oldest first."""
        where = "probe = ?" + (" AND verdict = 'accepted'" if accepted_only else "")
        return self._records(where, (probe,), order="ts, id")

    def latest_accepted(self, probe: str, at: float | None = None,
                        kinds: Sequence[str] = CALIBRATION_KINDS) -> CalibrationRecord | None:
        """The accepted calibration in effect for ``probe`` at ``at`` (latest if None)."""
        marks = ",".join("?" * len(kinds))
        where = f"probe = ? AND verdict = 'accepted' AND kind IN ({marks})"
        params: list[Any] = [probe, *kinds]
        if at is not None:
            where += " AND applies_from <= ?"
            params.append(float(at))
        found = self._records(where, params, order="applies_from DESC, id DESC", limit=1)
        return found[0] if found else None

    def accepted_after(self, last_id: int) -> list[CalibrationRecord]:
        """Accepted calibrations with id > last_id, in id order (for the watcher)."""
        return self._records("id > ? AND verdict = 'accepted'", (last_id,))

    def max_calibration_id(self) -> int:
        row = self._query("SELECT max(id) FROM calibration_log")
        return int(row[0][0] or 0)

    # -- grab samples ---------------------------------------------------------------------
    def record_grab(self, probe: str, ts: float, lab_ph: float, *, lab_temp_c: float | None = None,
                    online_ph: float | None = None, applied: bool = False,
                    note: str | None = None) -> int:
        online = _finite_or_none(online_ph)
        diff = None if online is None else online - float(lab_ph)
        with self._write() as db:
            cur = db.execute(
                "INSERT INTO grab_samples (probe, ts, lab_ph, lab_temp_c, online_ph, difference, "
                "applied, note) VALUES (?,?,?,?,?,?,?,?)",
                (probe, float(ts), float(lab_ph), _finite_or_none(lab_temp_c), online, diff,
                 int(applied), note))
            return int(cur.lastrowid or 0)

    def grab_samples(self, probe: str) -> list[GrabSample]:
        rows = self._query("SELECT id, probe, ts, lab_ph, lab_temp_c, online_ph, difference, applied, "
                           "note FROM grab_samples WHERE probe = ? ORDER BY ts, id", (probe,))
        return [GrabSample(r[0], r[1], r[2], r[3], r[4], r[5], r[6], bool(r[7]), r[8]) for r in rows]

    def max_grab_id(self) -> int:
        row = self._query("SELECT max(id) FROM grab_samples")
        return int(row[0][0] or 0)

    def probes_with_grab_after(self, last_id: int) -> list[str]:
        """Probes with a grab sample of id > last_id (for the running service's checks)."""
        return [r[0] for r in self._query("SELECT DISTINCT probe FROM grab_samples WHERE id > ? "
                                          "ORDER BY probe", (last_id,))]

    # -- maintenance ----------------------------------------------------------------------
    def _periods(self, where: str, params: Sequence[Any]) -> list[MaintenancePeriod]:
        rows = self._query("SELECT id, probe, start, until, ended, reason FROM maintenance "
                           f"WHERE {where} ORDER BY start, id", params)
        return [MaintenancePeriod(*r) for r in rows]

    def maintenance_periods(self, probe: str | None = None) -> list[MaintenancePeriod]:
        if probe is None:
            return self._periods("1", ())
        return self._periods("probe = ?", (probe,))

    def open_periods(self) -> list[MaintenancePeriod]:
        """Periods not yet ended (some may have expired)."""
        return self._periods("ended IS NULL", ())

    def active_maintenance(self, probe: str, now: float) -> MaintenancePeriod | None:
        active = [p for p in self._periods("probe = ? AND ended IS NULL", (probe,)) if p.active(now)]
        return active[-1] if active else None

    def start_maintenance(self, probe: str, now: float, until: float | None = None,
                          reason: str | None = None) -> int:
        """Put ``probe`` in maintenance from ``now`` (until ``until`` if given).

        An open period of the same probe is ended first, so one probe has at
        most one open period.
        """
        if until is not None and not until > now:
            raise CalibrationError("A maintenance period must end after it starts.")
        with self._write() as db:
            db.execute("UPDATE maintenance SET ended = ? WHERE probe = ? AND ended IS NULL",
                       (float(now), probe))
            cur = db.execute("INSERT INTO maintenance (probe, start, until, reason) VALUES (?,?,?,?)",
                             (probe, float(now), None if until is None else float(until), reason))
            return int(cur.lastrowid or 0)

    def stop_maintenance(self, probe: str, now: float, period_id: int | None = None) -> int:
        """End the probe's open maintenance period(s) (only ``period_id`` if given); returns how many."""
        sql = "UPDATE maintenance SET ended = ? WHERE probe = ? AND ended IS NULL"
        params: list[Any] = [float(now), probe]
        if period_id is not None:
            sql += " AND id = ?"
            params.append(period_id)
        with self._write() as db:
            return int(db.execute(sql, params).rowcount)

    def maintenance_state(self, now: float, probes: Sequence[str] = ()) -> dict[str, bool]:
        """probe -> in maintenance at ``now``, for ``probes`` and every probe with an open period."""
        state = {p: False for p in probes}
        for period in self.open_periods():
            state[period.probe] = state.get(period.probe, False) or period.active(now)
        return state

    # -- readings written by the service (table ``readings`` of the sqlite store) --------
    def readings(self, probe: str, start: float, end: float,
                 qualities: Sequence[str] | None = None) -> list[tuple[float, float, float, float, str]]:
        """(ts, mv, temp_c, ph, quality) of ``probe`` with start <= ts <= end, oldest first.

        NULL values come back as NaN.  Empty when the service never wrote readings here.
        """
        if not self.has_table("readings"):
            return []
        sql = ("SELECT ts, mv, temp_c, ph, quality FROM readings "
               "WHERE probe = ? AND ts >= ? AND ts <= ?")
        params: list[Any] = [probe, float(start), float(end)]
        if qualities is not None:
            sql += f" AND quality IN ({','.join('?' * len(qualities))})"
            params.extend(qualities)
        nan = float("nan")
        return [(r[0], nan if r[1] is None else r[1], nan if r[2] is None else r[2],
                 nan if r[3] is None else r[3], r[4])
                for r in self._query(sql + " ORDER BY ts", params)]

    def newest_reading_ts(self, probe: str) -> float | None:
        if not self.has_table("readings"):
            return None
        row = self._query("SELECT max(ts) FROM readings WHERE probe = ?", (probe,))
        return None if row[0][0] is None else float(row[0][0])
