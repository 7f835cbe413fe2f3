"""Trends over an electrode's calibration history, and when its slope will hit a limit.

Pure functions over rows ``(ts [epoch s], offset_mv [mV], slope_pct [%])``, one
per accepted calibration, in any order.

Trend rates are ordinary least-squares slopes against time (e.g. Montgomery &
Runger, *Applied Statistics and Probability for Engineers*, ch. 11:
b = Σ(t-t̄)(y-ȳ) / Σ(t-t̄)²), stated per month of 30.436875 days (the mean
Gregorian month, 365.2425 / 12 days).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from probeflow.errors import CalibrationError

__all__ = ["SECONDS_PER_MONTH", "CalibrationTrend", "TrendStep", "calibration_trend",
           "forecast_slope_limit_date", "history_rows"]

SECONDS_PER_MONTH = 365.2425 / 12.0 * 86400.0
"""Mean Gregorian month [s] (365.2425 days / 12)."""


@dataclass(frozen=True)
class TrendStep:
    """One calibration and its change from the one before (NaN for the first)."""

    ts: float
    offset_mv: float
    slope_pct: float
    offset_change_mv: float
    slope_change_pct: float
    days_since_previous: float


@dataclass(frozen=True)
class CalibrationTrend:
    steps: tuple[TrendStep, ...]
    offset_mv_per_month: float   # NaN with fewer than two calibrations
    slope_pct_per_month: float

    def to_record(self) -> dict[str, Any]:
        def num(v: float) -> float | None:
            return v if math.isfinite(v) else None
        return {"offset_mv_per_month": num(self.offset_mv_per_month),
                "slope_pct_per_month": num(self.slope_pct_per_month),
                "steps": [{"ts": s.ts, "offset_mv": s.offset_mv, "slope_pct": s.slope_pct,
                           "offset_change_mv": num(s.offset_change_mv),
                           "slope_change_pct": num(s.slope_change_pct),
                           "days_since_previous": num(s.days_since_previous)} for s in self.steps]}


def history_rows(records: Iterable[Any]) -> list[tuple[float, float, float]]:
    """(ts, offset_mv, slope_pct) of accepted records that carry a result."""
    return [(float(r.applies_from), float(r.offset_mv), float(r.slope_pct)) for r in records
            if getattr(r, "verdict", "accepted") == "accepted"
            and r.offset_mv is not None and r.slope_pct is not None]


def _sorted(history: Sequence[Sequence[float]]) -> np.ndarray:
    arr = np.asarray(history, dtype=np.float64).reshape(-1, 3) if len(history) else np.empty((0, 3))
    if not np.all(np.isfinite(arr)):
        raise CalibrationError("Calibration history: every time, offset and slope must be a number.")
    return arr[np.argsort(arr[:, 0], kind="stable")]


def _ols(t: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Least-squares (intercept at t̄, slope per second); slope NaN if t has no spread."""
    tc = t - t.mean()
    sxx = float(np.dot(tc, tc))
    if t.size < 2 or sxx <= 0.0:
        return float(y.mean()) if y.size else math.nan, math.nan
    return float(y.mean()), float(np.dot(tc, y - y.mean())) / sxx


def calibration_trend(history: Sequence[Sequence[float]]) -> CalibrationTrend:
    """Change per calibration and least-squares change per month of offset and slope."""
    arr = _sorted(history)
    t, off, slope = arr[:, 0], arr[:, 1], arr[:, 2]
    d_off = np.diff(off, prepend=np.nan)
    d_slope = np.diff(slope, prepend=np.nan)
    d_days = np.diff(t, prepend=np.nan) / 86400.0
    steps = tuple(TrendStep(float(a), float(b), float(c), float(d), float(e), float(f))
                  for a, b, c, d, e, f in zip(t, off, slope, d_off, d_slope, d_days, strict=True))
    _, b_off = _ols(t, off) if t.size else (math.nan, math.nan)
    _, b_slope = _ols(t, slope) if t.size else (math.nan, math.nan)
    return CalibrationTrend(steps, b_off * SECONDS_PER_MONTH, b_slope * SECONDS_PER_MONTH)


def forecast_slope_limit_date(history: Sequence[Sequence[float]], limit_pct: float,
                              min_points: int = 3) -> float | None:
    """When the least-squares line of slope_pct against time reaches ``limit_pct`` [epoch s].

    The limit is a lower limit when the history's mean slope lies above it
    (then the line must fall to reach it), an upper limit otherwise.  None with
    fewer than ``min_points`` calibrations or a line moving away from the
    limit.  A time before the newest calibration means the line has already
    crossed.
    """
    if not math.isfinite(limit_pct):
        raise CalibrationError(f"The slope limit {limit_pct!r} is not a number.")
    arr = _sorted(history)
    if arr.shape[0] < max(2, min_points):
        return None
    t, y = arr[:, 0], arr[:, 2]
    mean_y, b = _ols(t, y)
    if not math.isfinite(b) or b == 0.0:
        return None
    lower = mean_y > limit_pct
    if (lower and b > 0) or (not lower and b < 0):
        return None
    return float(t.mean() + (limit_pct - mean_y) / b)
