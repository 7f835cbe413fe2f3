"""When is a reading in a buffer stable enough to take as a calibration point?

Criterion: over the last ``window_s`` seconds, the least-squares slope of mV
against time (the drift) is below ``max_drift_mv_per_min`` in magnitude, and,
where a temperature is measured, the temperature drift is below
``max_temp_drift_c_per_min``.  Defaults 0.5 mV/min over 30 s and 0.2 °C/min
are common practice, no source; both are configurable.

The least-squares slope over a window (ordinary linear regression, e.g.
Montgomery & Runger, *Applied Statistics and Probability for Engineers*,
ch. 11: b = Σ(t-t̄)(E-Ē) / Σ(t-t̄)²) averages out noise that a two-point
difference would not: with 0.05 mV noise and one reading per second its
standard error over 30 s is about 0.06 mV/min, well below the bound.

The value taken for the point is the regression line at the newest reading
(its fitted value), which is less noisy than the last reading and does not lag
like a window mean.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from probeflow.errors import ConfigError

__all__ = ["StabilityChecker", "StabilityCriterion", "StabilityStatus", "first_stable_time",
           "window_drift_per_min"]

_MIN_SAMPLES = 3
_WINDOW_COVERAGE = 0.9  # the readings must span 90 % of the window before it counts as full


@dataclass(frozen=True)
class StabilityCriterion:
    """Drift bounds over a time window (defaults: common practice, no source)."""

    max_drift_mv_per_min: float = 0.5        # common practice, no source
    window_s: float = 30.0                   # common practice, no source
    max_temp_drift_c_per_min: float = 0.2    # common practice, no source

    def __post_init__(self) -> None:
        problems = [(name, f"must be a positive number, got {value!r}")
                    for name, value in (("max_drift_mv_per_min", self.max_drift_mv_per_min),
                                        ("window_s", self.window_s),
                                        ("max_temp_drift_c_per_min", self.max_temp_drift_c_per_min))
                    if isinstance(value, bool) or not isinstance(value, int | float)
                    or not math.isfinite(value) or value <= 0]
        if problems:
            raise ConfigError("Stability criterion is wrong: "
                              + "; ".join(f"{k}: {m}" for k, m in problems), problems=problems)


@dataclass(frozen=True)
class StabilityStatus:
    """What the checker knows after the newest reading."""

    stable: bool
    drift_mv_per_min: float      # NaN until the window holds enough readings
    temp_drift_c_per_min: float  # NaN without temperature
    mv: float                    # fitted mV at the newest reading [mV]
    temp_c: float                # fitted temperature at the newest reading [°C]
    covered_s: float             # how much of the window the readings span [s]
    reason: str                  # why not stable yet ("" when stable)


def _slope_and_value(t: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Least-squares slope [y per s] and fitted value at t[-1]; NaN where y has NaN."""
    ok = np.isfinite(y)
    if ok.sum() < _MIN_SAMPLES:
        return math.nan, (float(y[ok][-1]) if ok.any() else math.nan)
    t, y = t[ok], y[ok]
    tc = t - t.mean()
    sxx = float(np.dot(tc, tc))
    if sxx <= 0.0:
        return math.nan, float(y.mean())
    b = float(np.dot(tc, y - y.mean())) / sxx
    return b, float(y.mean() + b * (t[-1] - t.mean()))


def window_drift_per_min(ts: ArrayLike, values: ArrayLike, window_s: float) -> np.ndarray:
    """Least-squares drift [unit per min] over the trailing ``window_s`` at every reading.

    ts [s] must rise; NaN where the window holds fewer than 3 readings.
    Running sums make it O(n) (cumulative sums of t, y, t², t·y, with t
    shifted to the first reading to keep the sums well conditioned).
    """
    t = np.asarray(ts, dtype=np.float64)
    y = np.asarray(values, dtype=np.float64)
    t0 = t - t[0] if t.size else t
    start = np.searchsorted(t0, t0 - window_s, side="left")
    zero = np.zeros(1)
    c1 = np.concatenate([zero, np.cumsum(np.ones_like(t0))])
    ct = np.concatenate([zero, np.cumsum(t0)])
    cy = np.concatenate([zero, np.cumsum(y)])
    ctt = np.concatenate([zero, np.cumsum(t0 * t0)])
    cty = np.concatenate([zero, np.cumsum(t0 * y)])
    end = np.arange(1, t.size + 1)
    n = c1[end] - c1[start]
    st, sy = ct[end] - ct[start], cy[end] - cy[start]
    stt, sty = ctt[end] - ctt[start], cty[end] - cty[start]
    with np.errstate(invalid="ignore", divide="ignore"):
        b = (n * sty - st * sy) / (n * stt - st * st)
    b = np.where(n >= _MIN_SAMPLES, b, np.nan)
    return 60.0 * b


def first_stable_time(ts: ArrayLike, mv: ArrayLike, criterion: StabilityCriterion | None = None,
                      temp_c: ArrayLike | None = None) -> float | None:
    """Time [s] of the first reading at which ``criterion`` holds, or None (vectorised form)."""
    crit = criterion or StabilityCriterion()
    t = np.asarray(ts, dtype=np.float64)
    if t.size == 0:
        return None
    drift = window_drift_per_min(t, mv, crit.window_s)
    covered = t - t[np.searchsorted(t, t - crit.window_s, side="left")]
    ok = (covered >= _WINDOW_COVERAGE * crit.window_s) & (np.abs(drift) < crit.max_drift_mv_per_min)
    if temp_c is not None:
        temp = np.asarray(temp_c, dtype=np.float64)
        if np.all(np.isfinite(temp)):
            tdrift = window_drift_per_min(t, temp, crit.window_s)
            ok &= np.abs(tdrift) < crit.max_temp_drift_c_per_min
    hits = np.flatnonzero(ok)
    return float(t[hits[0]]) if hits.size else None


class StabilityChecker:
    """Feed readings one by one; each ``add`` says whether the signal has settled."""

    def __init__(self, criterion: StabilityCriterion | None = None) -> None:
        self.criterion = criterion or StabilityCriterion()
        self._buf: deque[tuple[float, float, float]] = deque()

    def reset(self) -> None:
        """Forget the readings (the probe moved to another buffer)."""
        self._buf.clear()

    def add(self, ts: float, mv: float, temp_c: float = math.nan) -> StabilityStatus:
        crit = self.criterion
        if self._buf and ts <= self._buf[-1][0]:
            return self.status()  # repeated or out-of-order reading: ignore it
        self._buf.append((float(ts), float(mv), float(temp_c)))
        while self._buf and self._buf[0][0] < ts - crit.window_s:
            self._buf.popleft()
        return self.status()

    def status(self) -> StabilityStatus:
        crit = self.criterion
        if not self._buf:
            return StabilityStatus(False, math.nan, math.nan, math.nan, math.nan, 0.0, "no readings yet")
        arr = np.array(self._buf)
        t, e, temp = arr[:, 0], arr[:, 1], arr[:, 2]
        covered = float(t[-1] - t[0])
        b_mv, mv = _slope_and_value(t, e)
        b_t, temp_now = _slope_and_value(t, temp)
        drift, tdrift = 60.0 * b_mv, 60.0 * b_t
        if covered < _WINDOW_COVERAGE * crit.window_s or not math.isfinite(drift):
            reason = f"collecting readings ({covered:.0f} of {crit.window_s:g} s)"
        elif not abs(drift) < crit.max_drift_mv_per_min:
            reason = f"mV drifting {drift:+.2f} mV/min (limit ±{crit.max_drift_mv_per_min:g})"
        elif math.isfinite(tdrift) and not abs(tdrift) < crit.max_temp_drift_c_per_min:
            reason = (f"temperature drifting {tdrift:+.2f} °C/min "
                      f"(limit ±{crit.max_temp_drift_c_per_min:g})")
        else:
            reason = ""
        return StabilityStatus(reason == "", drift, tdrift, mv, temp_now, covered, reason)
