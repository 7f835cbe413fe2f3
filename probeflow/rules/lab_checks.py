"""Checks against outside evidence: grab samples and calibration history.

Pure functions over plain rows, so the stores that hold the rows (grab
samples, calibrations) can call them when they are wired in.

* Grab samples are rows ``(ts, lab_ph, online_ph)``: the online reading at
  the sample time next to the laboratory value.
* Calibration history rows are ``(ts, offset_mv, slope_pct)``, one per
  accepted calibration, in any order.

Trends use the Theil–Sen slope (:mod:`probeflow.rules.theil_sen`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from itertools import pairwise

import numpy as np

from probeflow.errors import ProbeflowError
from probeflow.rules.theil_sen import theil_sen_slope

__all__ = [
    "CalibrationJump",
    "GrabSampleFinding",
    "calibration_jumps",
    "grab_sample_findings",
    "grab_sample_trend_per_day",
    "slope_limit_forecast",
]

SECONDS_PER_DAY = 86400.0


@dataclass(frozen=True, slots=True)
class GrabSampleFinding:
    ts: float
    lab_ph: float
    online_ph: float
    difference: float       # online - lab [pH]
    exceeds: bool


def _rows(rows: Sequence[Sequence[float]], width: int, what: str) -> np.ndarray:
    arr = np.asarray(rows, dtype=np.float64).reshape(-1, width) if len(rows) else np.empty((0, width))
    if not np.all(np.isfinite(arr)):
        raise ProbeflowError(f"{what}: every value must be a finite number")
    return arr[np.argsort(arr[:, 0], kind="stable")]


def grab_sample_findings(samples: Sequence[Sequence[float]], limit_ph: float) -> list[GrabSampleFinding]:
    """Each sample's online-minus-lab difference and whether |difference| > ``limit_ph``."""
    if not limit_ph > 0:
        raise ProbeflowError("grab sample limit must be a positive pH difference")
    arr = _rows(samples, 3, "grab samples (ts, lab_ph, online_ph)")
    diff = arr[:, 2] - arr[:, 1]
    return [GrabSampleFinding(float(t), float(lab), float(on), float(d), bool(abs(d) > limit_ph))
            for (t, lab, on), d in zip(arr, diff, strict=True)]


def grab_sample_trend_per_day(samples: Sequence[Sequence[float]]) -> float:
    """Theil–Sen trend of (online - lab) [pH per day]; NaN with fewer than 2 samples."""
    arr = _rows(samples, 3, "grab samples (ts, lab_ph, online_ph)")
    return theil_sen_slope(arr[:, 0], arr[:, 2] - arr[:, 1]) * SECONDS_PER_DAY


@dataclass(frozen=True, slots=True)
class CalibrationJump:
    ts_before: float
    ts_after: float
    offset_change_mv: float
    slope_change_pct: float
    offset_exceeds: bool
    slope_exceeds: bool


def calibration_jumps(history: Sequence[Sequence[float]], offset_limit_mv: float,
                      slope_limit_pct: float) -> list[CalibrationJump]:
    """Changes between consecutive calibrations that move offset or slope by more than a limit."""
    arr = _rows(history, 3, "calibration history (ts, offset_mv, slope_pct)")
    out = []
    for a, b in pairwise(arr):
        d_off = float(b[1] - a[1])
        d_slope = float(b[2] - a[2])
        over_off = abs(d_off) > offset_limit_mv
        over_slope = abs(d_slope) > slope_limit_pct
        if over_off or over_slope:
            out.append(CalibrationJump(float(a[0]), float(b[0]), d_off, d_slope, over_off, over_slope))
    return out


def slope_limit_forecast(history: Sequence[Sequence[float]], acceptance_pct: float,
                         min_points: int = 3) -> float | None:
    """When the electrode slope will fall to ``acceptance_pct``, from the history's trend [epoch s].

    Theil–Sen slope of slope_pct against time, anchored at the median point
    (Sen 1968: intercept = median(y - b*x)).  None when there are fewer than
    ``min_points`` calibrations or the slope is not falling.  A time in the
    past means the trend line is already below the limit.
    """
    arr = _rows(history, 3, "calibration history (ts, offset_mv, slope_pct)")
    if arr.shape[0] < min_points:
        return None
    x, y = arr[:, 0], arr[:, 2]
    b = theil_sen_slope(x, y)
    if not math.isfinite(b) or b >= 0:
        return None
    x0 = float(np.median(x))
    a = float(np.median(y - b * (x - x0)))
    return x0 + (acceptance_pct - a) / b
