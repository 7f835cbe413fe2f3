"""Calibration health of one probe for the report: last slope and offset, age, verdict, forecast."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from probeflow.views.text import format_age, utc_text

__all__ = ["MIN_FORECAST_POINTS", "CalibrationHealth", "calibration_health", "slope_limit_forecast"]

MIN_FORECAST_POINTS = 3
"""Calibrations needed before a slope trend is extrapolated (common practice, no source)."""


@dataclass(frozen=True)
class CalibrationHealth:
    last_accepted: dict[str, Any] | None
    latest: dict[str, Any] | None          # the latest attempt, accepted or rejected
    count_in_period: int
    age_s: float | None                     # of the last accepted calibration, at the period's end
    forecast: str                           # slope-limit forecast, as text for the table

    def describe(self) -> str:
        if self.last_accepted is None:
            return "no calibration recorded in the store"
        c = self.last_accepted
        text = (f"slope {float(c['slope_pct']):.1f} %, offset {float(c['offset_mv']):+.1f} mV, "
                f"{format_age(self.age_s or 0.0)} old ({c.get('kind', 'buffer')}, "
                f"{utc_text(float(c['ts']), seconds=False)})")
        if self.latest is not None and self.latest.get("verdict") == "rejected":
            text += f"; latest attempt REJECTED on {utc_text(float(self.latest['ts']), seconds=False)}"
        return text


def slope_limit_forecast(history: Sequence[dict[str, Any]], limit_pct: float, until: float) -> str:
    """When the slope is forecast to cross ``limit_pct``, from the trend of the calibration history.

    Uses :func:`probeflow.calibration.history.forecast_slope_limit_date` (a least-squares line of
    slope against time) over the accepted buffer and manual calibrations; grab-sample offset
    corrections carry no new slope and are left out.
    """
    try:
        from probeflow.calibration.history import forecast_slope_limit_date
    except ImportError:
        return "forecast not available in this installation"
    rows = [(float(h.get("applies_from", h["ts"])), float(h["offset_mv"]), float(h["slope_pct"]))
            for h in history if h.get("verdict") == "accepted" and h.get("kind", "buffer") != "grab_offset"
            and h.get("slope_pct") is not None and h.get("offset_mv") is not None]
    if len(rows) < MIN_FORECAST_POINTS:
        return (f"needs {MIN_FORECAST_POINTS} or more accepted calibrations "
                f"({len(rows)} so far)")
    when = forecast_slope_limit_date(rows, limit_pct, min_points=MIN_FORECAST_POINTS)
    if when is None:
        return f"slope not trending towards {limit_pct:g} %"
    note = " (already past)" if when <= until else f" (in {format_age(when - until)})"
    return f"slope reaches {limit_pct:g} % around {utc_text(when, seconds=False)[:10]}{note}"


def calibration_health(history: Sequence[dict[str, Any]], since: float, until: float,
                       slope_limit_pct: float) -> CalibrationHealth:
    """Health from the probe's calibration_log rows (oldest first) up to ``until``."""
    upto = [h for h in history if float(h["ts"]) <= until]
    accepted = [h for h in upto if h.get("verdict") == "accepted" and h.get("slope_pct") is not None]
    last = accepted[-1] if accepted else None
    return CalibrationHealth(
        last_accepted=last,
        latest=upto[-1] if upto else None,
        count_in_period=sum(1 for h in upto if float(h["ts"]) >= since),
        age_s=None if last is None else until - float(last["ts"]),
        forecast=slope_limit_forecast(upto, slope_limit_pct, until),
    )
