"""Summary figures of a report, as pure functions of the store's rows.

Definitions (the tests recompute them independently from the same rows):

time within band
    Each reading holds its value from its own time until the next reading of
    the probe (the last one until the end of the period), but never longer
    than ``max_hold_s`` (the stale limit of the diagnostics, 300 s by
    default): a longer gap is time without data.  Only readings of quality
    ``good`` with a finite value count.  The share of that held time during
    which ``low <= value <= high`` is the time within band, in percent.  A band
    rule's inner limits are used: ``low`` (or ``low_low`` when there is no
    ``low``) and ``high`` (or ``high_high``).  A value exactly at a limit is
    within band, as a band rule raises only above a high or below a low limit.
alarms by rule
    ``raise`` events with since <= ts <= until, counted per rule id.
chattering
    ``raise`` events in the period that came no more than ``chatter_s`` (60 s:
    common practice, no source) after the previous ``clear`` of the same alarm
    id (that clear may lie before the period).
alarm spans
    From each ``raise`` to the next ``clear`` of the same alarm id, clipped
    to the period; an alarm not cleared by the end of the period runs to its end.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from fnmatch import fnmatchcase
from typing import Any

import numpy as np
import pandas as pd

__all__ = [
    "DEFAULT_CHATTER_S",
    "DEFAULT_MAX_HOLD_S",
    "AlarmSpan",
    "BandLimits",
    "alarm_counts_by_rule",
    "alarm_spans",
    "bands_for_probe",
    "chattering_by_rule",
    "chattering_raises",
    "hold_durations",
    "time_in_band_pct",
]

DEFAULT_CHATTER_S = 60.0
"""An activation this soon after the previous clear is chattering (common practice, no source)."""

DEFAULT_MAX_HOLD_S = 300.0
"""A reading stands for at most this long (the stale limit's default; common practice, no source)."""

QUANTITY_UNITS = {"ph": "pH", "neutral_dev": "pH", "temp_c": "°C", "mv": "mV"}


@dataclass(frozen=True)
class BandLimits:
    """One band rule as it applies to one probe."""

    rule: str
    quantity: str
    low_low: float | None
    low: float | None
    high: float | None
    high_high: float | None
    deadband: float = 0.0

    @property
    def inner_low(self) -> float | None:
        return self.low if self.low is not None else self.low_low

    @property
    def inner_high(self) -> float | None:
        return self.high if self.high is not None else self.high_high

    @property
    def unit(self) -> str:
        return QUANTITY_UNITS.get(self.quantity, "")

    def limits(self) -> list[tuple[str, float]]:
        """(limit name, value) of the limits that are set, lowest first."""
        named = (("low_low", self.low_low), ("low", self.low), ("high", self.high),
                 ("high_high", self.high_high))
        return [(n, v) for n, v in named if v is not None]

    def describe(self) -> str:
        """``pH 6.50 to 8.50`` or ``pH - neutral pH above -1.00``."""
        what = {"ph": "pH", "neutral_dev": "pH - neutral pH", "temp_c": "temperature",
                "mv": "potential"}.get(self.quantity, self.quantity)
        lo, hi = self.inner_low, self.inner_high
        if lo is not None and hi is not None:
            return f"{what} {lo:.2f} to {hi:.2f} {self.unit}"
        if lo is not None:
            return f"{what} at or above {lo:.2f} {self.unit}"
        return f"{what} at or below {hi:.2f} {self.unit}"


def bands_for_probe(rules: Any, probe: str) -> list[BandLimits]:
    """The band rules of a ``RulesConfig`` whose probe globs match ``probe``."""
    if rules is None:
        return []
    out = []
    for band in rules.bands:
        if any(fnmatchcase(probe, g) for g in band.probes):
            out.append(BandLimits(band.id, band.quantity, band.limit_value("low_low"),
                                  band.limit_value("low"), band.limit_value("high"),
                                  band.limit_value("high_high"), float(band.deadband)))
    return out


def hold_durations(ts: np.ndarray, until: float, max_hold_s: float) -> np.ndarray:
    """How long each reading stands [s]: to the next reading (the last: to ``until``), capped."""
    ts = np.asarray(ts, dtype=np.float64)
    if ts.size == 0:
        return np.empty(0, dtype=np.float64)
    nxt = np.append(ts[1:], max(float(until), float(ts[-1])))
    return np.minimum(nxt - ts, max_hold_s)


def time_in_band_pct(ts: np.ndarray, values: np.ndarray, good: np.ndarray, until: float,
                     low: float | None, high: float | None,
                     max_hold_s: float = DEFAULT_MAX_HOLD_S) -> float:
    """Percentage of the held time of good readings with low <= value <= high (NaN: no data)."""
    values = np.asarray(values, dtype=np.float64)
    weights = hold_durations(ts, until, max_hold_s)
    valid = np.asarray(good, dtype=bool) & np.isfinite(values)
    total = float(weights[valid].sum())
    if total <= 0.0:
        return math.nan
    inside = valid.copy()
    if low is not None:
        inside &= values >= low
    if high is not None:
        inside &= values <= high
    return 100.0 * float(weights[inside].sum()) / total


def _in_period(events: pd.DataFrame, since: float, until: float) -> pd.DataFrame:
    return events[(events["ts"] >= since) & (events["ts"] <= until)]


def alarm_counts_by_rule(events: pd.DataFrame, since: float, until: float) -> dict[str, int]:
    """Number of ``raise`` events per rule id within the period."""
    raised = _in_period(events, since, until)
    raised = raised[raised["event"] == "raise"]
    return {str(k): int(v) for k, v in raised.groupby("rule").size().items()}


def chattering_raises(events: pd.DataFrame, since: float, until: float,
                      chatter_s: float = DEFAULT_CHATTER_S) -> list[tuple[str, str, float]]:
    """(alarm id, rule, time) of every raise within ``chatter_s`` of the alarm's previous clear."""
    out: list[tuple[str, str, float]] = []
    last_clear: dict[str, float] = {}
    ordered = events.sort_values(["ts", "id"], kind="stable") if "id" in events else events
    for alarm_id, rule, event, ts in zip(ordered["alarm_id"], ordered["rule"], ordered["event"],
                                         ordered["ts"], strict=True):
        t = float(ts)
        if event == "clear":
            last_clear[alarm_id] = t
        elif event == "raise":
            prev = last_clear.get(alarm_id)
            if since <= t <= until and prev is not None and t - prev <= chatter_s:
                out.append((str(alarm_id), str(rule), t))
    return out


def chattering_by_rule(events: pd.DataFrame, since: float, until: float,
                       chatter_s: float = DEFAULT_CHATTER_S) -> dict[str, int]:
    """Raises within ``chatter_s`` of the previous clear of the same alarm, per rule id."""
    counts: dict[str, int] = {}
    for _, rule, _ in chattering_raises(events, since, until, chatter_s):
        counts[rule] = counts.get(rule, 0) + 1
    return counts


@dataclass(frozen=True)
class AlarmSpan:
    alarm_id: str
    rule: str
    limit: str
    severity: str
    start: float
    end: float
    open_end: bool  # still active at the end of the period


def alarm_spans(events: pd.DataFrame, since: float, until: float) -> list[AlarmSpan]:
    """Raise-to-clear spans of every alarm, clipped to [since, until], in start order."""
    spans: list[AlarmSpan] = []
    open_: dict[str, tuple[float, str, str, str]] = {}
    ordered = events.sort_values(["ts", "id"], kind="stable") if "id" in events else events
    for row in ordered.itertuples(index=False):
        t = float(row.ts)
        if t > until:
            break
        if row.event == "raise" and row.alarm_id not in open_:
            open_[row.alarm_id] = (t, str(row.rule), str(row.limit_name), str(row.severity or ""))
        elif row.event == "clear" and row.alarm_id in open_:
            start, rule, limit, severity = open_.pop(row.alarm_id)
            if t >= since:
                spans.append(AlarmSpan(row.alarm_id, rule, limit, severity, max(start, since), t, False))
    for alarm_id, (start, rule, limit, severity) in open_.items():
        spans.append(AlarmSpan(alarm_id, rule, limit, severity, max(start, since), until, True))
    return sorted(spans, key=lambda s: (s.start, s.alarm_id))


def good_mask(quality: Sequence[str] | np.ndarray) -> np.ndarray:
    """True where the stored quality name is ``good``."""
    return np.asarray(quality, dtype=object) == "good"
