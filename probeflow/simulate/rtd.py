"""Platinum resistance thermometer (Pt100) resistance from temperature.

Callendar-Van Dusen equation with the coefficients of IEC 60751:2008
(Industrial platinum resistance thermometers and platinum temperature sensors), §4.2:

    R(t) = R0 [1 + A t + B t^2]                     0 °C <= t <= 850 °C
    R(t) = R0 [1 + A t + B t^2 + C (t - 100) t^3]   -200 °C <= t < 0 °C

    A = 3.9083e-3 /°C, B = -5.775e-7 /°C^2, C = -4.183e-12 /°C^4, R0 = 100 Ω (Pt100).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["CVD_A", "CVD_B", "CVD_C", "PT100_R0_OHM", "pt100_linear_celsius", "pt100_ohms"]

PT100_R0_OHM = 100.0   # R0 [Ω], IEC 60751:2008
CVD_A = 3.9083e-3      # [1/°C], IEC 60751:2008
CVD_B = -5.775e-7      # [1/°C^2], IEC 60751:2008
CVD_C = -4.183e-12     # [1/°C^4], IEC 60751:2008 (below 0 °C only)


def pt100_ohms(temp_c: ArrayLike) -> float | np.ndarray:
    """Pt100 resistance [Ω] at ``temp_c`` [°C] (Callendar-Van Dusen, IEC 60751:2008).

    Not limited to -200..850 °C: outside that range the polynomial is extrapolated.

    >>> round(pt100_ohms(100.0), 2)   # IEC 60751 table: 138.51 Ω at 100 °C
    138.51
    """
    t = np.asarray(temp_c, dtype=np.float64)
    r = 1.0 + CVD_A * t + CVD_B * t * t
    r = np.where(t < 0.0, r + CVD_C * (t - 100.0) * t**3, r)
    out = PT100_R0_OHM * r
    return float(out) if np.ndim(out) == 0 else out


def pt100_linear_celsius(ohms: ArrayLike) -> float | np.ndarray:
    """The temperature a simple transmitter shows with the linear read-out t = (R/R0 - 1)/A
    (used for what a shorted element looks like: about -255 °C at 0.2 Ω)."""
    r = np.asarray(ohms, dtype=np.float64)
    out = (r / PT100_R0_OHM - 1.0) / CVD_A
    return float(out) if np.ndim(out) == 0 else out
