"""Everything the report shows about one probe over one period, read from the store."""

from __future__ import annotations

import math
import sqlite3
from dataclasses import dataclass
from typing import Any

import pandas as pd

from probeflow.views import queries
from probeflow.views.calhealth import CalibrationHealth, calibration_health
from probeflow.views.summary import (
    AlarmSpan,
    BandLimits,
    alarm_counts_by_rule,
    alarm_spans,
    bands_for_probe,
    chattering_by_rule,
    chattering_raises,
    good_mask,
    time_in_band_pct,
)

__all__ = ["BandTime", "ProbeData", "load_probe_data"]


@dataclass(frozen=True)
class BandTime:
    band: BandLimits
    pct: float  # time within band [%], NaN without good data


@dataclass(frozen=True)
class ProbeData:
    probe: str
    since: float
    until: float
    readings: pd.DataFrame
    events: pd.DataFrame
    spans: list[AlarmSpan]
    bands: list[BandLimits]
    band_times: list[BandTime]
    alarms_by_rule: dict[str, int]
    chattering_by_rule: dict[str, int]
    chattering_events: list[tuple[str, str, float]]   # (alarm id, rule, time of the raise)
    calibrations: list[dict[str, Any]]     # calibration_log rows inside the period
    grabs: list[dict[str, Any]]            # grab_samples rows inside the period
    health: CalibrationHealth
    max_hold_s: float
    chatter_s: float

    @property
    def chattering(self) -> int:
        return sum(self.chattering_by_rule.values())

    @property
    def good_fraction_pct(self) -> float:
        """Share of readings in the period with quality good [%]."""
        n = len(self.readings)
        return math.nan if n == 0 else 100.0 * float(good_mask(self.readings["quality"]).sum()) / n


def load_probe_data(con: sqlite3.Connection, probe: str, since: float, until: float, rules: Any,
                    max_hold_s: float, slope_limit_pct: float, chatter_s: float) -> ProbeData:
    readings = queries.readings_frame(con, probe, since, until)
    events = queries.alert_events(con, probe, until)
    bands = bands_for_probe(rules, probe)
    good = good_mask(readings["quality"])
    times = [BandTime(b, time_in_band_pct(readings["ts"].to_numpy(), readings[b.quantity].to_numpy(),
                                          good, until, b.inner_low, b.inner_high, max_hold_s))
             for b in bands]
    history = queries.calibration_history(con, probe, until)
    return ProbeData(
        probe=probe, since=since, until=until, readings=readings, events=events,
        spans=alarm_spans(events, since, until), bands=bands, band_times=times,
        alarms_by_rule=alarm_counts_by_rule(events, since, until),
        chattering_by_rule=chattering_by_rule(events, since, until, chatter_s),
        chattering_events=chattering_raises(events, since, until, chatter_s),
        calibrations=[h for h in history if float(h["ts"]) >= since],
        grabs=queries.grab_samples(con, probe, since, until),
        health=calibration_health(history, since, until, slope_limit_pct),
        max_hold_s=max_hold_s, chatter_s=chatter_s,
    )
