"""Fitting a Calibration to buffer points.

Model, each point i at its own temperature T_i (see :mod:`.model`)::

    E_i = E_a - s * k(T_i) * (pH_i - pH_a)

with the anchor (pH_a, E_a) the zero point (zero_ph, offset) or the isothermal
intersection.  The model is linear in the unknowns E_a and s:

* 1 point: offset only; s kept from the previous calibration, else 100 %;
* 2 points: the exact solution of the 2x2 system;
* 3 or more: ordinary least squares (numpy.linalg.lstsq) on the
  temperature-normalised design matrix [1, -k(T_i) (pH_i - pH_a)].

Residuals are reported in pH: the pH the fitted calibration reads in each buffer
minus the buffer's pH.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np

from probeflow.calibration.model import Calibration, CalibrationPoint
from probeflow.chemistry.nernst import nernst_slope_mv
from probeflow.errors import CalibrationError

__all__ = ["MIN_PH_SPAN", "design_matrix", "fit_calibration"]

MIN_PH_SPAN = 0.5
"""Smallest pH spread between buffers that can define a slope (common practice, no source)."""

_PH_PLAUSIBLE = (-2.0, 16.0)
_TEMP_PLAUSIBLE_C = (-10.0, 150.0)


def _checked(points: Iterable[CalibrationPoint | tuple[Any, ...]]) -> tuple[CalibrationPoint, ...]:
    checked = tuple(CalibrationPoint.of(p) for p in points)
    if not checked:
        raise CalibrationError("No calibration points were given: measure at least one buffer.")
    for i, p in enumerate(checked, start=1):
        label = f"Point {i}" + (f" ({p.buffer})" if p.buffer else "")
        for what, value in (("pH", p.ph), ("mV", p.mv), ("temperature", p.temp_c)):
            if not isinstance(value, numbers.Real) or not math.isfinite(float(value)):
                raise CalibrationError(f"{label}: the {what} value {value!r} is not a number.")
        if not _PH_PLAUSIBLE[0] <= p.ph <= _PH_PLAUSIBLE[1]:
            raise CalibrationError(f"{label}: buffer pH {p.ph:g} is not a plausible pH value.")
        if not _TEMP_PLAUSIBLE_C[0] <= p.temp_c <= _TEMP_PLAUSIBLE_C[1]:
            raise CalibrationError(
                f"{label}: temperature {p.temp_c:g} °C is outside "
                f"{_TEMP_PLAUSIBLE_C[0]:g}..{_TEMP_PLAUSIBLE_C[1]:g} °C; check the temperature probe."
            )
    return tuple(
        CalibrationPoint(float(p.ph), float(p.mv), float(p.temp_c), p.buffer) for p in checked
    )


def design_matrix(points: Sequence[CalibrationPoint], anchor_ph: float) -> np.ndarray:
    """Rows [1, -k(T_i) (pH_i - pH_a)]: E = A @ [E_a, s] (s as a fraction)."""
    ph = np.array([p.ph for p in points])
    k = np.asarray(nernst_slope_mv(np.array([p.temp_c for p in points])))
    return np.column_stack([np.ones_like(ph), -k * (ph - anchor_ph)])


def fit_calibration(
    points: Iterable[CalibrationPoint | tuple[Any, ...]],
    previous: Calibration | None = None,
    zero_ph: float = 7.0,
    iso_ph: float | None = None,
    reference_temp_c: float = 25.0,
) -> Calibration:
    """Fit offset and slope to (buffer pH, mV, temp_c) points; see module docstring.

    previous: the electrode's last calibration, whose slope a 1-point calibration keeps.
    iso_ph: pH of the isothermal intersection, when the electrode's is known;
            offset_mv is then stated at reference_temp_c.
    Raises CalibrationError for unusable points (NaN, same pH, too close, slope <= 0).
    """
    pts = _checked(points)
    anchor_ph = zero_ph if iso_ph is None else iso_ph
    a = design_matrix(pts, anchor_ph)
    e = np.array([p.mv for p in pts])
    if len(pts) == 1:
        s = (previous.slope_pct if previous is not None else 100.0) / 100.0
        e_a = float(e[0] - s * a[0, 1])
    else:
        phs = [p.ph for p in pts]
        span = max(phs) - min(phs)
        if span < MIN_PH_SPAN:
            same = " have the same pH" if span == 0 else f" span only {span:.2f} pH"
            raise CalibrationError(
                f"The calibration points{same} ({', '.join(f'{v:g}' for v in phs)}): a slope needs "
                f"buffers at least {MIN_PH_SPAN:g} pH apart. Use two different buffers."
            )
        if len(pts) == 2:
            e_a, s = (float(v) for v in np.linalg.solve(a, e))
        else:
            solution, *_ = np.linalg.lstsq(a, e, rcond=None)
            e_a, s = (float(v) for v in solution)
    if not s > 0.0:
        raise CalibrationError(
            f"The points give a slope of {100 * s:.1f} %: the potential must fall as pH rises. "
            "Check the buffers were not swapped and the readings were stable."
        )
    if iso_ph is None:
        trial = Calibration(e_a, 100.0 * s, zero_ph)
    else:
        trial = Calibration.isothermal(iso_ph, e_a, 100.0 * s, zero_ph, reference_temp_c)
    ph_read = np.asarray(trial.to_ph(e, np.array([p.temp_c for p in pts])))
    residuals = tuple(float(r) for r in ph_read - np.array([p.ph for p in pts]))
    if iso_ph is None:
        return Calibration(e_a, 100.0 * s, zero_ph, residuals, pts)
    return Calibration.isothermal(iso_ph, e_a, 100.0 * s, zero_ph, reference_temp_c, residuals, pts)
