"""Conversion of electrode readings to pH, neutral pH and deviation from neutral.

pH from the electrode model of :mod:`probeflow.chemistry.nernst`
(E = E0 - s k(T) (pH - pH0), k(T) = ln(10) R T / F, CODATA 2018), neutral pH
pN = pKw / 2 from :mod:`probeflow.chemistry.neutral` (IAPWS R11-24 or R11-07
with IAPWS-IF97 density), deviation = pH - pN.

pH is never clipped.  pN is NaN for temperatures outside 0-350 °C (and for NaN
temperatures); :func:`probeflow.chemistry.temperature_in_range` gives the mask
for the quality flag.  The deviation is then NaN too.

Two entry points:

* :func:`convert_readings`: functional, arrays of calibration values that
  broadcast against the readings.
* :class:`ReadingConverter`: the hot path of the service; holds per-probe
  calibration arrays and converts a batch given each reading's probe index.
"""

from __future__ import annotations

from functools import lru_cache
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike

from probeflow.chemistry.constants import STANDARD_PRESSURE_KPA, ZERO_CELSIUS_K
from probeflow.chemistry.ionisation import DEFAULT_RELEASE
from probeflow.chemistry.nernst import NERNST_MV_PER_K, ph_from_potential
from probeflow.chemistry.neutral import NeutralPhTable, neutral_ph

__all__ = [
    "ConvertedReadings",
    "ReadingConverter",
    "compensate_to_reference",
    "convert_readings",
    "neutral_ph_table",
]


class ConvertedReadings(NamedTuple):
    """pH, neutral pH pN and deviation pH - pN (floats or float64 arrays)."""

    ph: float | np.ndarray
    neutral_ph: float | np.ndarray
    neutral_dev: float | np.ndarray


@lru_cache(maxsize=16)
def neutral_ph_table(
    pressure_kpa: float = STANDARD_PRESSURE_KPA, release: str = DEFAULT_RELEASE
) -> NeutralPhTable:
    """The shared :class:`NeutralPhTable` for one pressure [kPa] and release (built once)."""
    return NeutralPhTable(float(pressure_kpa), release)


def _out(value: np.ndarray) -> float | np.ndarray:
    return float(value) if np.ndim(value) == 0 else value


def convert_readings(
    mv: ArrayLike,
    temp_c: ArrayLike,
    offset_mv: ArrayLike = 0.0,
    slope_pct: ArrayLike = 100.0,
    zero_ph: ArrayLike = 7.0,
    pressure_kpa: ArrayLike = STANDARD_PRESSURE_KPA,
    release: str = DEFAULT_RELEASE,
) -> ConvertedReadings:
    """Convert potentials and temperatures to (ph, neutral_ph, neutral_dev).

    mv            electrode potential [mV]
    temp_c        solution temperature at the electrode [°C]
    offset_mv     calibration offset E0 at the zero point [mV]
    slope_pct     calibration slope [% of the ideal Nernst slope]
    zero_ph       zero point pH0 [-]
    pressure_kpa  absolute pressure of the process water [kPa] (for pN)
    release       IAPWS ionisation-constant release for pN, "2024" or "2007"

    pH = pH0 + (E0 - E) / (s k(T)) (electrode model, see
    :mod:`probeflow.chemistry.nernst`); pN = pKw(T, p) / 2 (IAPWS R11-24/R11-07
    with IAPWS-IF97 density), from a precomputed 0.01 K table when the pressure
    is a single value (interpolation error below 1e-7 pH), from the direct
    formula otherwise; neutral_dev = pH - pN.

    All arguments broadcast; scalar input gives Python floats.

    >>> r = convert_readings(-59.159, 25.0)
    >>> round(r.ph, 3), round(r.neutral_ph, 3), round(r.neutral_dev, 3)
    (8.0, 6.997, 1.003)
    >>> convert_readings(0.0, 400.0).neutral_ph
    nan
    """
    ph = np.asarray(ph_from_potential(mv, temp_c, offset_mv, slope_pct, zero_ph))
    t = np.asarray(temp_c, dtype=np.float64)
    if np.ndim(pressure_kpa) == 0:
        pn = np.asarray(neutral_ph_table(float(pressure_kpa), release)(t))
    else:
        pn = np.asarray(neutral_ph(t, pressure_kpa, release))
    if ph.ndim == 0 and pn.ndim == 0:
        return ConvertedReadings(float(ph), float(pn), float(ph - pn))
    if ph.shape != pn.shape:  # e.g. one temperature for many potentials
        ph, pn = (np.array(a) for a in np.broadcast_arrays(ph, pn))
    return ConvertedReadings(ph, pn, ph - pn)


class ReadingConverter:
    """Batch conversion with per-probe calibration gathered by probe index.

    offset_mv, slope_pct, zero_ph  1-D arrays, one entry per probe
    pressure_kpa, release          fixed for the converter (one pN table)

    Per probe it precomputes 1 / (s ln(10) R / F) so that each reading costs a
    few array passes: pH = pH0 + (E0 - E) / (s k'(T + 273.15)).

    >>> conv = ReadingConverter([0.0, 5.0], [100.0, 98.0], [7.0, 7.0])
    >>> ph, pn, dev = conv.convert([0, 1], [-59.159, 0.0], [25.0, 25.0])
    >>> ph.round(3).tolist()
    [8.0, 7.086]
    """

    def __init__(
        self,
        offset_mv: ArrayLike,
        slope_pct: ArrayLike,
        zero_ph: ArrayLike,
        pressure_kpa: float = STANDARD_PRESSURE_KPA,
        release: str = DEFAULT_RELEASE,
    ) -> None:
        self.offset_mv = np.array(offset_mv, dtype=np.float64, ndmin=1)
        self.slope_pct = np.array(slope_pct, dtype=np.float64, ndmin=1)
        self.zero_ph = np.array(zero_ph, dtype=np.float64, ndmin=1)
        self.offset_mv, self.slope_pct, self.zero_ph = (
            np.array(a) for a in np.broadcast_arrays(self.offset_mv, self.slope_pct, self.zero_ph)
        )
        self.table = neutral_ph_table(float(pressure_kpa), release)
        with np.errstate(divide="ignore"):
            self._inv_slope = 1.0 / (self.slope_pct * (0.01 * NERNST_MV_PER_K))

    def convert(
        self, probe_index: ArrayLike, mv: ArrayLike, temp_c: ArrayLike
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(ph, neutral_ph, neutral_dev) arrays for readings of the given probes.

        probe_index  position of each reading's probe in the calibration arrays
        mv, temp_c   potentials [mV] and temperatures [°C], same shape as probe_index
        """
        idx = np.asarray(probe_index, dtype=np.intp)
        e = np.asarray(mv, dtype=np.float64)
        t = np.asarray(temp_c, dtype=np.float64)
        ph = np.add(t, ZERO_CELSIUS_K)                # T [K]
        np.divide(self._inv_slope.take(idx), ph, out=ph)  # 1 / (s k(T))
        ph *= self.offset_mv.take(idx) - e             # (E0 - E) / (s k)
        ph += self.zero_ph.take(idx)
        pn = self.table.lookup(np.atleast_1d(t)).reshape(t.shape)
        dev = np.subtract(ph, pn)
        return ph, pn, dev


def compensate_to_reference(
    ph: ArrayLike,
    temp_c: ArrayLike,
    coefficient_ph_per_c: ArrayLike,
    reference_c: ArrayLike = 25.0,
) -> float | np.ndarray:
    """Process (solution) temperature compensation: pH referred to a reference temperature.

    ph                    pH measured at temp_c (already Nernst-compensated) [-]
    temp_c                solution temperature [°C]
    coefficient_ph_per_c  the solution's own pH change per kelvin, d(pH)/dT [pH/°C]
                          (a per-probe setting, e.g. about -0.03 pH/°C for high-purity
                          water near neutrality; determine it for the actual liquor)
    reference_c           reference temperature [°C], 25 °C by default

    pH_ref = pH - coefficient * (t - t_ref).  A linear model over a limited
    span; common practice, no source.  It corrects the chemistry of the
    sample, which the Nernst compensation of the electrode does not.

    >>> round(compensate_to_reference(8.00, 45.0, -0.03), 3)
    8.6
    """
    value = np.asarray(ph, dtype=np.float64) - np.asarray(
        coefficient_ph_per_c, dtype=np.float64
    ) * (np.asarray(temp_c, dtype=np.float64) - np.asarray(reference_c, dtype=np.float64))
    return _out(value)
