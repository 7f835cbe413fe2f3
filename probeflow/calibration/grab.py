"""Grab samples: the online value at the sample time, and a one-point offset correction.

Online value: the probe's stored readings (quality good or uncalibrated) are
interpolated linearly in time between the two readings around the sample time,
each within ``max_gap_s`` of it; with a reading on one side only (a sample
taken just now), that reading is used; with none, there is no online value.

Standardisation (one-point offset correction, common practice, no source):
keep the slope, move the potential at the anchor point so that the online pH
at the sample time would have equalled the lab pH.  With the electrode model
E = E_a - s k(T) (pH - pH_a) (see :mod:`probeflow.calibration.model`), a pH
shift ΔpH = lab - online at temperature T needs

    ΔE_a = s k(T) ΔpH        [mV]

which moves every later reading at the same temperature by exactly ΔpH (at
another temperature by ΔpH · k(T)/k(T')).  The lab pH is taken as the
process's pH at process temperature; the lab temperature is recorded only.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from probeflow.calibration.model import Calibration, CalibrationPoint
from probeflow.errors import CalibrationError

__all__ = ["DEFAULT_MAX_GAP_S", "GRAB_POINT_NAME", "OnlineValue", "online_value_at", "standardise"]

DEFAULT_MAX_GAP_S = 120.0
GRAB_POINT_NAME = "grab sample"
USABLE_QUALITIES = ("good", "uncalibrated")


@dataclass(frozen=True)
class OnlineValue:
    ph: float
    mv: float
    temp_c: float
    interpolated: bool


def online_value_at(rows: Sequence[tuple[float, float, float, float, str]], at: float,
                    max_gap_s: float = DEFAULT_MAX_GAP_S) -> OnlineValue | None:
    """Online pH, mV and temperature at ``at`` from rows (ts, mv, temp_c, ph, quality)."""
    usable = [r for r in rows if r[4] in USABLE_QUALITIES and math.isfinite(r[3])]
    if not usable:
        return None
    arr = np.array([r[:4] for r in usable], dtype=np.float64)
    arr = arr[np.argsort(arr[:, 0], kind="stable")]
    ts = arr[:, 0]
    i = int(np.searchsorted(ts, at, side="left"))
    if i < ts.size and ts[i] == at:
        _t, mv, temp, ph = arr[i]
        return OnlineValue(float(ph), float(mv), float(temp), False)
    before = i - 1 if i > 0 and at - ts[i - 1] <= max_gap_s else None
    after = i if i < ts.size and ts[i] - at <= max_gap_s else None
    if before is not None and after is not None:
        w = (at - ts[before]) / (ts[after] - ts[before])
        mixed = arr[before] + w * (arr[after] - arr[before])
        return OnlineValue(float(mixed[3]), float(mixed[1]), float(mixed[2]), True)
    one = before if before is not None else after
    if one is None:
        return None
    return OnlineValue(float(arr[one, 3]), float(arr[one, 1]), float(arr[one, 2]), False)


def standardise(current: Calibration, online: OnlineValue, lab_ph: float) -> Calibration:
    """The calibration that would have read ``lab_ph`` where ``current`` read ``online.ph``."""
    if not (math.isfinite(lab_ph) and math.isfinite(online.ph)):
        raise CalibrationError("The lab pH and the online pH must both be numbers to correct the offset.")
    if not math.isfinite(online.temp_c):
        raise CalibrationError("There is no temperature at the sample time, so the offset cannot be "
                               "corrected; check the probe's temperature input.")
    shift_mv = float(current.slope_mv(online.temp_c)) * (lab_ph - online.ph)
    point = CalibrationPoint(float(lab_ph), online.mv, online.temp_c, GRAB_POINT_NAME)
    if current.iso_ph is not None and current.iso_mv is not None:
        trial = Calibration.isothermal(current.iso_ph, current.iso_mv + shift_mv, current.slope_pct,
                                       current.zero_ph, current.reference_temp_c)
    else:
        trial = Calibration(current.offset_mv + shift_mv, current.slope_pct, current.zero_ph)
    residual = (float(trial.to_ph(online.mv, online.temp_c)) - lab_ph
                if math.isfinite(online.mv) else math.nan)
    residuals = (residual,) if math.isfinite(residual) else ()
    if trial.iso_ph is not None and trial.iso_mv is not None:
        return Calibration.isothermal(trial.iso_ph, trial.iso_mv, trial.slope_pct, trial.zero_ph,
                                      trial.reference_temp_c, residuals, (point,))
    return Calibration(trial.offset_mv, trial.slope_pct, trial.zero_ph, residuals, (point,))
