"""The Nernst slope of an ideal pH electrode and the electrode model.

Electrode model (common practice for glass electrodes; e.g. IUPAC 2002
recommendations on pH measurement, Buck et al., Pure Appl. Chem. 74 (2002)
2169, eq. for the practical cell slope):

    E = E0 - s * k(T) * (pH - pH0)

E   electrode potential [mV]
E0  offset: the potential at the zero point pH0 [mV]
s   slope as a fraction of the ideal (slope_pct / 100) [-]
k   ideal Nernst slope ln(10) R T / F [mV per pH unit]
pH0 zero point (isopotential pH), 7.00 by default [-]
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from probeflow.chemistry.constants import (
    FARADAY_C_PER_MOL,
    GAS_CONSTANT_J_PER_MOL_K,
    LN10,
    ZERO_CELSIUS_K,
)

__all__ = [
    "NERNST_MV_PER_K",
    "nernst_slope_mv",
    "ph_from_potential",
    "potential_from_ph",
]

NERNST_MV_PER_K = 1000.0 * LN10 * GAS_CONSTANT_J_PER_MOL_K / FARADAY_C_PER_MOL
"""ln(10) R / F in mV per (pH unit * K); R and F from CODATA 2018 (exact)."""


def _out(value: np.ndarray) -> float | np.ndarray:
    return float(value) if np.ndim(value) == 0 else value


def nernst_slope_mv(temp_c: ArrayLike) -> float | np.ndarray:
    """Ideal electrode slope k(T) = ln(10) R T / F [mV per pH unit].

    temp_c  temperature [°C]

    R = N_A k and F = N_A e with N_A, k, e exact in CODATA 2018 (SI 2019).

    >>> round(nernst_slope_mv(25.0), 3)
    59.159
    """
    t = np.asarray(temp_c, dtype=np.float64)
    return _out(NERNST_MV_PER_K * (t + ZERO_CELSIUS_K))


def ph_from_potential(
    mv: ArrayLike,
    temp_c: ArrayLike,
    offset_mv: ArrayLike = 0.0,
    slope_pct: ArrayLike = 100.0,
    zero_ph: ArrayLike = 7.0,
) -> float | np.ndarray:
    """pH from electrode potential: pH = pH0 + (E0 - E) / (s k(T)).

    mv [mV], temp_c [°C], offset_mv E0 [mV], slope_pct s [% of ideal],
    zero_ph pH0 [-].  Not clipped: values beyond 0..14 come out as they are.

    >>> round(ph_from_potential(-59.159, 25.0), 3)
    8.0
    """
    t = np.asarray(temp_c, dtype=np.float64)
    k = NERNST_MV_PER_K * (t + ZERO_CELSIUS_K)
    s = np.asarray(slope_pct, dtype=np.float64) * 0.01
    ph = np.asarray(zero_ph, dtype=np.float64) + (
        np.asarray(offset_mv, dtype=np.float64) - np.asarray(mv, dtype=np.float64)
    ) / (s * k)
    return _out(ph)


def potential_from_ph(
    ph: ArrayLike,
    temp_c: ArrayLike,
    offset_mv: ArrayLike = 0.0,
    slope_pct: ArrayLike = 100.0,
    zero_ph: ArrayLike = 7.0,
) -> float | np.ndarray:
    """Electrode potential from pH: E = E0 - s k(T) (pH - pH0) [mV]; exact inverse of
    :func:`ph_from_potential`.

    >>> round(potential_from_ph(4.0, 25.0), 3)
    177.478
    """
    t = np.asarray(temp_c, dtype=np.float64)
    k = NERNST_MV_PER_K * (t + ZERO_CELSIUS_K)
    s = np.asarray(slope_pct, dtype=np.float64) * 0.01
    e = np.asarray(offset_mv, dtype=np.float64) - s * k * (
        np.asarray(ph, dtype=np.float64) - np.asarray(zero_ph, dtype=np.float64)
    )
    return _out(e)
