"""Platinum resistance thermometers (Pt100, Pt1000): resistance <-> temperature.

Callendar-Van Dusen equation with the coefficients of IEC 60751:2008
("Industrial platinum resistance thermometers and platinum temperature sensors"),
clause 4.2, valid from -200 °C to 850 °C::

    R(t) = R0 * (1 + A t + B t^2)                      0 °C <= t <= 850 °C
    R(t) = R0 * (1 + A t + B t^2 + C (t - 100) t^3)    -200 °C <= t < 0 °C

    A = 3.9083e-3 /°C,  B = -5.775e-7 /°C^2,  C = -4.183e-12 /°C^4
    R0 = 100 Ω (Pt100) or 1000 Ω (Pt1000); t in °C (ITS-90).

Inverse: at and above 0 °C (R >= R0) the exact root of the quadratic; below 0 °C
Newton's method on the quartic, vectorised, a fixed number of steps, started from
the quadratic root.  Outside -200..850 °C (or the matching resistances) the
result is NaN: the caller flags the reading (quality temp_fault), nothing is
clamped.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "CVD_A",
    "CVD_B",
    "CVD_C",
    "RTD_MAX_C",
    "RTD_MIN_C",
    "resistance_from_temp",
    "temp_from_resistance",
]

CVD_A = 3.9083e-3    # [1/°C], IEC 60751:2008 clause 4.2
CVD_B = -5.775e-7    # [1/°C^2], IEC 60751:2008 clause 4.2
CVD_C = -4.183e-12   # [1/°C^4], IEC 60751:2008 clause 4.2, used below 0 °C only
RTD_MIN_C = -200.0   # lower end of the IEC 60751 range [°C]
RTD_MAX_C = 850.0    # upper end of the IEC 60751 range [°C]

_NEWTON_STEPS = 6    # from the quadratic root, error < 1e-9 °C over -200..0 °C (checked in tests)


def _out(value: np.ndarray) -> float | np.ndarray:
    return float(value) if np.ndim(value) == 0 else value


def _ratio(t: np.ndarray) -> np.ndarray:
    """R/R0 by Callendar-Van Dusen (IEC 60751:2008), no range check."""
    quad = 1.0 + CVD_A * t + CVD_B * t * t
    ratio: np.ndarray = np.where(t < 0.0, quad + CVD_C * (t - 100.0) * t**3, quad)
    return ratio


def resistance_from_temp(temp_c: ArrayLike, r0: ArrayLike = 100.0) -> float | np.ndarray:
    """Resistance [Ω] of a platinum sensor at temp_c [°C]; r0 [Ω] is R at 0 °C.

    IEC 60751:2008 Callendar-Van Dusen; NaN outside -200..850 °C.

    >>> round(resistance_from_temp(100.0), 4)
    138.5055
    >>> round(resistance_from_temp(-100.0, r0=1000.0), 3)
    602.558
    """
    t = np.asarray(temp_c, dtype=np.float64)
    r = np.asarray(r0, dtype=np.float64) * _ratio(t)
    return _out(np.where((t >= RTD_MIN_C) & (t <= RTD_MAX_C), r, np.nan))


def temp_from_resistance(ohms: ArrayLike, r0: ArrayLike = 100.0) -> float | np.ndarray:
    """Temperature [°C] of a platinum sensor from its resistance ohms [Ω]; r0 [Ω] at 0 °C.

    Inverse of IEC 60751:2008 Callendar-Van Dusen: exact quadratic root for
    R >= R0, Newton iteration (fixed steps) below.  NaN outside -200..850 °C.

    >>> round(temp_from_resistance(138.5055), 3)
    100.0
    >>> round(temp_from_resistance(60.2558), 3)
    -100.0
    """
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        ratio = np.asarray(ohms, dtype=np.float64) / np.asarray(r0, dtype=np.float64)
        # exact root of 1 + A t + B t^2 = ratio, the one through t = 0 at ratio = 1, written
        # 2 (ratio - 1) / (A + sqrt(D)) to avoid cancellation near 0 °C
        disc = CVD_A * CVD_A - 4.0 * CVD_B * (1.0 - ratio)
        t = 2.0 * (ratio - 1.0) / (CVD_A + np.sqrt(np.maximum(disc, 0.0)))
        t = np.where(disc < 0.0, np.nan, t)
        below = ratio < 1.0
        if np.any(below):
            tn = np.where(below, t, -100.0)
            for _ in range(_NEWTON_STEPS):
                f = 1.0 + CVD_A * tn + CVD_B * tn * tn + CVD_C * (tn - 100.0) * tn**3 - ratio
                df = CVD_A + 2.0 * CVD_B * tn + CVD_C * (4.0 * tn**3 - 300.0 * tn * tn)
                tn = tn - f / df
            t = np.where(below, tn, t)
        lo, hi = _ratio(np.array(RTD_MIN_C)), _ratio(np.array(RTD_MAX_C))
        inside = (ratio >= lo) & (ratio <= hi)
        return _out(np.where(inside, t + 0.0, np.nan))  # + 0.0 turns -0.0 into 0.0
