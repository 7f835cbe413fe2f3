"""Per-probe status from the SQLite store, and its rendering as a plain-text table.

For every probe: the latest reading (pH, temperature, neutral pH at that
temperature and the deviation from it, quality), the alarms that are not in
the normal state (the latest event of each alarm id), the last calibration
(age, slope, offset) and the last grab-sample difference.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

from probeflow.config.models import ProbeConfig
from probeflow.views import queries
from probeflow.views.text import CAUTION, fixed, format_age, signed, state_label, utc_text

__all__ = ["CalibrationShown", "ProbeStatus", "gather_status", "render_status"]


@dataclass(frozen=True)
class CalibrationShown:
    """The calibration a probe's readings are converted with, as far as the store knows."""

    source: str                 # "store" (calibration_log) or "config" (fixed in the config file)
    slope_pct: float
    offset_mv: float
    ts: float | None = None     # when it was made (None for a calibration fixed in the config)
    rejected_since: float | None = None  # a later calibration attempt that was rejected


@dataclass(frozen=True)
class ProbeStatus:
    probe: str
    reading: dict[str, Any] | None
    alarms: list[dict[str, Any]] = field(default_factory=list)
    calibration: CalibrationShown | None = None
    grab: dict[str, Any] | None = None
    configured: bool = True


def _calibration(con: sqlite3.Connection, probe: str,
                 config: ProbeConfig | None) -> CalibrationShown | None:
    history = queries.calibration_history(con, probe)
    accepted = [r for r in history if r.get("verdict") == "accepted"]
    rejected_after = None
    if history and history[-1].get("verdict") == "rejected":
        rejected_after = float(history[-1]["ts"])
    if accepted:
        last = accepted[-1]
        return CalibrationShown("store", float(last["slope_pct"]), float(last["offset_mv"]),
                                float(last["ts"]), rejected_after)
    if config is not None and config.calibration is not None:
        return CalibrationShown("config", float(config.calibration.slope_pct),
                                float(config.calibration.offset_mv), None, rejected_after)
    return None


def gather_status(con: sqlite3.Connection, probes: Sequence[ProbeConfig]) -> list[ProbeStatus]:
    """Status of every configured probe, then of any other probe found in the store."""
    by_id = {p.id: p for p in probes}
    ids = list(by_id) + [p for p in queries.store_probes(con) if p not in by_id]
    alarms: dict[str, list[dict[str, Any]]] = {}
    for row in queries.alarm_latest_states(con):
        if row["state"] != "normal":
            alarms.setdefault(str(row["probe"]), []).append(row)
    out = []
    for probe in ids:
        grabs = queries.grab_samples(con, probe)
        out.append(ProbeStatus(
            probe=probe,
            reading=queries.latest_reading(con, probe),
            alarms=alarms.get(probe, []),
            calibration=_calibration(con, probe, by_id.get(probe)),
            grab=grabs[-1] if grabs else None,
            configured=probe in by_id,
        ))
    return out


HEADERS = ("probe", "pH", "temp °C", "neutral pH", "dev pH", "quality", "reading age",
           "calibration", "slope %", "offset mV", "grab diff pH")


def _row(status: ProbeStatus, now: float) -> list[str]:
    r = status.reading
    probe = status.probe + ("" if status.configured else " (not in config)")
    if r is None:
        cells = [probe, "-", "-", "-", "-", "no readings", "-"]
    else:
        cells = [probe, fixed(r["ph"], 2), fixed(r["temp_c"], 1), fixed(r["neutral_ph"], 2),
                 signed(r["neutral_dev"], 2), str(r["quality"]), format_age(now - float(r["ts"]))]
    cal = status.calibration
    if cal is None:
        cells += ["none", "-", "-"]
    else:
        age = "from config" if cal.ts is None else f"{format_age(now - cal.ts)} ago"
        cells += [age, fixed(cal.slope_pct, 1), signed(cal.offset_mv, 1)]
    g = status.grab
    cells.append("-" if g is None else
                 f"{signed(g.get('difference'), 2)} ({format_age(now - float(g['ts']))} ago)")
    return cells


def _alarm_line(alarm: dict[str, Any], now: float) -> str:
    state = str(alarm["state"])
    text = f"    {state_label(state)}: {alarm['rule']}/{alarm['limit_name']} [{alarm.get('severity') or '-'}]"
    raised = alarm.get("raised_ts")
    if raised is not None:
        text += f" raised {utc_text(float(raised))} ({format_age(now - float(raised))} ago)"
    if state == "unack_returned":
        text += f", returned {utc_text(float(alarm['ts']))}"
    message = str(alarm.get("message") or "").removeprefix(f"{alarm['probe']}: ")
    if message:
        text += f" - {message}"
    elif alarm.get("value") is not None and alarm.get("threshold") is not None:
        unit = {"ph": " pH", "neutral_dev": " pH", "temp_c": " °C", "mv": " mV"}.get(
            str(alarm.get("quantity") or ""), "")
        text += f" - last value {float(alarm['value']):.2f}{unit}, limit {float(alarm['threshold']):.2f}{unit}"
    return text


def render_status(statuses: Sequence[ProbeStatus], now: float, site: str, store: str,
                  quarantined: int = 0) -> str:
    """The status table as plain text (one line per probe, its alarms indented below)."""
    rows = [_row(s, now) for s in statuses]
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(HEADERS)]
    right = {1, 2, 3, 4, 8, 9}

    def line(cells: Sequence[str]) -> str:
        return "  ".join(c.rjust(w) if i in right else c.ljust(w)
                         for i, (c, w) in enumerate(zip(cells, widths, strict=True))).rstrip()

    out = [f"{site}: probe status at {utc_text(now)}   (store {store})", "", line(HEADERS),
           line(["-" * w for w in widths])]
    for status, cells in zip(statuses, rows, strict=True):
        out.append(line(cells))
        for alarm in status.alarms:
            out.append(_alarm_line(alarm, now))
        cal = status.calibration
        if cal is not None and cal.rejected_since is not None:
            out.append(f"    last calibration attempt REJECTED {format_age(now - cal.rejected_since)}"
                       " ago; the calibration shown is still in use")
    active = sum(1 for s in statuses for a in s.alarms if str(a["state"]).endswith("_active"))
    out += ["", (f"{len(statuses)} probes, {active} alarm(s) active. dev pH = pH minus the neutral "
                 "pH at the measured temperature; grab diff = online minus lab pH at the last grab "
                 "sample."),
            CAUTION]
    if quarantined:
        out.insert(-2, f"{quarantined} malformed input(s) kept aside in the store's quarantine table.")
    return "\n".join(out) + "\n"
