"""Neutral pH of water, pN = pKw / 2, directly and through a fast lookup table.

At neutrality the activities of H+ and OH- are equal, so pH = pOH = pKw / 2,
with pKw from the IAPWS ionisation-constant release
(:mod:`probeflow.chemistry.ionisation`) and the density from IAPWS-IF97
(:mod:`probeflow.chemistry.if97`).

Range: 0-350 °C (IF97 region 1).  Outside it, or for NaN input, pN is NaN;
:func:`temperature_in_range` gives the matching boolean mask for the quality
flag.  pH itself is never clipped anywhere in probeflow.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from probeflow.chemistry.constants import STANDARD_PRESSURE_KPA
from probeflow.chemistry.if97 import IF97_MAX_TEMP_C, IF97_MIN_TEMP_C
from probeflow.chemistry.ionisation import DEFAULT_RELEASE, pkw

__all__ = [
    "NEUTRAL_TABLE_STEP_C",
    "NeutralPhTable",
    "neutral_ph",
    "temperature_in_range",
]

NEUTRAL_TABLE_STEP_C = 0.01
"""Grid step of :class:`NeutralPhTable` [K]; linear interpolation error < 1e-8 pH."""


def _out(value: np.ndarray) -> float | np.ndarray:
    return float(value) if np.ndim(value) == 0 else value


def temperature_in_range(temp_c: ArrayLike) -> bool | np.ndarray:
    """True where 0 °C <= temp_c <= 350 °C, the range of the neutral-pH chemistry.

    NaN gives False.  Use it to flag readings whose neutral pH is NaN.

    >>> temperature_in_range([-1.0, 0.0, 25.0, 350.0, 351.0, float("nan")]).tolist()
    [False, True, True, True, False, False]
    """
    t = np.asarray(temp_c, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        mask = (t >= IF97_MIN_TEMP_C) & (t <= IF97_MAX_TEMP_C)
    return bool(mask) if mask.ndim == 0 else mask


def neutral_ph(
    temp_c: ArrayLike,
    pressure_kpa: ArrayLike = STANDARD_PRESSURE_KPA,
    release: str = DEFAULT_RELEASE,
) -> float | np.ndarray:
    """Neutral pH pN = pKw / 2 of liquid water (saturated liquid below p_sat).

    temp_c        temperature [°C], valid 0-350 °C (NaN outside)
    pressure_kpa  absolute pressure [kPa]
    release       IAPWS ionisation-constant release, "2024" (default) or "2007"

    pKw from IAPWS R11-24 / R11-07 (:func:`probeflow.chemistry.pkw`) with the
    IAPWS-IF97 density.

    >>> round(neutral_ph(25.0), 3)
    6.997
    >>> round(neutral_ph(100.0), 2)
    6.13
    """
    return _out(np.asarray(pkw(temp_c, pressure_kpa, release)) * 0.5)


class NeutralPhTable:
    """Precomputed neutral pH over 0-350 °C at one fixed pressure, for the hot path.

    The direct formula (:func:`neutral_ph`) is evaluated once on a grid of
    step ``step_c``; look-ups interpolate linearly between grid points by
    index arithmetic.  The grid carries NaN sentinels on both sides, so
    temperatures below 0 °C, above 350 °C, or NaN give NaN without a
    separate mask pass.

    >>> table = NeutralPhTable()
    >>> abs(table(25.0) - neutral_ph(25.0)) < 1e-8
    True
    """

    def __init__(
        self,
        pressure_kpa: float = STANDARD_PRESSURE_KPA,
        release: str = DEFAULT_RELEASE,
        step_c: float = NEUTRAL_TABLE_STEP_C,
    ) -> None:
        self.pressure_kpa = float(pressure_kpa)
        self.release = release
        self.step_c = float(step_c)
        count = int(round((IF97_MAX_TEMP_C - IF97_MIN_TEMP_C) / self.step_c))
        grid = IF97_MIN_TEMP_C + self.step_c * np.arange(count + 1)
        grid[-1] = IF97_MAX_TEMP_C
        values = np.asarray(neutral_ph(grid, self.pressure_kpa, release), dtype=np.float64)
        self.grid_c = grid
        self.values = values
        # Index space: u = t / h * (1 - 1e-12) + 1; interval k (k = 1..count)
        # runs from grid node k-1 to node k.  Index 0 (below 0 °C; NaN is sent
        # there by fmax) and index count+1 (above 350 °C) hold NaN.  The scale
        # is shrunk by a relative 1e-12 so that t = 350 °C exactly still falls
        # inside the last real interval (the cut sits 3.5e-10 K above 350 °C).
        self._scale = (1.0 / self.step_c) * (1.0 - 1e-12)
        self._top = float(count + 1)
        base = np.full(count + 2, np.nan)
        base[1 : count + 1] = values[:-1]
        diff = np.full(count + 2, np.nan)
        diff[1 : count + 1] = np.diff(values)
        self._base = base
        self._diff = diff

    def __call__(self, temp_c: ArrayLike) -> float | np.ndarray:
        """Neutral pH [-] at temp_c [°C] by table look-up (NaN outside 0-350 °C)."""
        t = np.asarray(temp_c, dtype=np.float64)
        return _out(self.lookup(np.atleast_1d(t)).reshape(t.shape))

    def lookup(self, temp_c: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Array-only fast look-up; ``out`` (float64, same shape) is reused if given."""
        u = np.multiply(temp_c, self._scale)
        u += 1.0
        np.fmax(u, 0.0, out=u)           # NaN and anything below -step go to index 0
        np.fmin(u, self._top, out=u)     # anything far above 350 °C goes to the NaN pad
        index = u.astype(np.intp)
        u -= index                       # fractional position inside the interval
        result = np.take(self._diff, index, out=out)
        result *= u
        result += np.take(self._base, index)
        return result
