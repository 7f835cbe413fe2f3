"""The SQL the operator views run against the store, one function per question.

Tables and columns are those of ``probeflow.stores.sqlite`` (readings, alerts)
and of the calibration store (calibration_log, grab_samples).  The
calibration tables exist only once a calibration or grab sample has been
recorded; until then the functions return nothing for them.
"""

from __future__ import annotations

import sqlite3
from typing import Any

import numpy as np
import pandas as pd

from probeflow.views.source import existing_tables

__all__ = [
    "ALERT_COLUMNS",
    "alarm_latest_states",
    "alert_events",
    "calibration_history",
    "grab_samples",
    "latest_reading",
    "quarantine_count",
    "readings_frame",
    "store_probes",
]

ALERT_COLUMNS = ("id", "alarm_id", "rule", "probe", "quantity", "limit_name", "event", "state",
                 "ts", "value", "threshold", "severity", "message")
READING_COLUMNS = ("probe", "ts", "mv", "temp_c", "ph", "neutral_ph", "neutral_dev", "quality")


def _rows(con: sqlite3.Connection, sql: str, params: tuple[Any, ...] = ()) -> list[dict[str, Any]]:
    cur = con.execute(sql, params)
    names = [d[0] for d in cur.description]
    return [dict(zip(names, row, strict=True)) for row in cur.fetchall()]


def quarantine_count(con: sqlite3.Connection) -> int:
    """How many rejected inputs the store keeps aside (0 when it has no quarantine table)."""
    if "quarantine" not in existing_tables(con):
        return 0
    return int(con.execute("SELECT COUNT(*) FROM quarantine").fetchone()[0])


def store_probes(con: sqlite3.Connection) -> list[str]:
    """Probe ids that have readings in the store, sorted."""
    return [str(r[0]) for r in con.execute("SELECT DISTINCT probe FROM readings ORDER BY probe")]


def latest_reading(con: sqlite3.Connection, probe: str) -> dict[str, Any] | None:
    """The newest reading of ``probe`` (all columns of the readings table)."""
    rows = _rows(con, f"SELECT {', '.join(READING_COLUMNS)} FROM readings WHERE probe = ? "
                      "ORDER BY ts DESC LIMIT 1", (probe,))
    return rows[0] if rows else None


def alarm_latest_states(con: sqlite3.Connection, until: float | None = None) -> list[dict[str, Any]]:
    """The latest event of every alarm id (by time, then by row id), up to ``until``.

    Each row also carries ``raised_ts``: the time of the alarm's latest ``raise``
    (None when it never was raised, e.g. shelved before any activation).
    """
    where, params = ("WHERE ts <= ?", (until,)) if until is not None else ("", ())
    return _rows(con, f"""
        SELECT {', '.join('l.' + c for c in ALERT_COLUMNS)}, r.raised_ts FROM (
            SELECT *, ROW_NUMBER() OVER (PARTITION BY alarm_id ORDER BY ts DESC, id DESC) AS rn
            FROM alerts {where}) AS l
        LEFT JOIN (SELECT alarm_id, MAX(ts) AS raised_ts FROM alerts {where}
                   {'AND' if where else 'WHERE'} event = 'raise' GROUP BY alarm_id) AS r
            ON r.alarm_id = l.alarm_id
        WHERE l.rn = 1 ORDER BY l.probe, l.alarm_id""", params + params)


def alert_events(con: sqlite3.Connection, probe: str, until: float) -> pd.DataFrame:
    """Every alert event of ``probe`` up to ``until``, in time order.

    Events before the report period are included: an alarm raised before the
    period and cleared inside it still shades the start of the plot, and a
    raise just after a clear before the period still counts as chattering.
    """
    rows = _rows(con, f"SELECT {', '.join(ALERT_COLUMNS)} FROM alerts WHERE probe = ? AND ts <= ? "
                      "ORDER BY ts, id", (probe, until))
    return pd.DataFrame(rows, columns=list(ALERT_COLUMNS))


def readings_frame(con: sqlite3.Connection, probe: str, since: float, until: float) -> pd.DataFrame:
    """Readings of ``probe`` with since <= ts <= until, in time order (NULL -> NaN)."""
    cur = con.execute(f"SELECT {', '.join(READING_COLUMNS[1:])} FROM readings "
                      "WHERE probe = ? AND ts >= ? AND ts <= ? ORDER BY ts", (probe, since, until))
    rows = cur.fetchall()
    frame = pd.DataFrame(rows, columns=list(READING_COLUMNS[1:]))
    for name in ("ts", "mv", "temp_c", "ph", "neutral_ph", "neutral_dev"):
        frame[name] = pd.to_numeric(frame[name], errors="coerce").astype(np.float64)
    frame["quality"] = frame["quality"].astype(object)
    return frame


def calibration_history(con: sqlite3.Connection, probe: str,
                        until: float | None = None) -> list[dict[str, Any]]:
    """Rows of calibration_log for ``probe`` (oldest first), up to ``until``."""
    if "calibration_log" not in existing_tables(con):
        return []
    where, params = ("AND ts <= ?", (probe, until)) if until is not None else ("", (probe,))
    return _rows(con, f"SELECT * FROM calibration_log WHERE probe = ? {where} ORDER BY ts, id", params)


def grab_samples(con: sqlite3.Connection, probe: str, since: float | None = None,
                 until: float | None = None) -> list[dict[str, Any]]:
    """Rows of grab_samples for ``probe`` (oldest first) within the optional bounds."""
    if "grab_samples" not in existing_tables(con):
        return []
    sql = "SELECT * FROM grab_samples WHERE probe = ?"
    params: list[Any] = [probe]
    if since is not None:
        sql += " AND ts >= ?"
        params.append(since)
    if until is not None:
        sql += " AND ts <= ?"
        params.append(until)
    return _rows(con, sql + " ORDER BY ts, id", tuple(params))
