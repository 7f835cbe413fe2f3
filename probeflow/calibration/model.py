"""The calibrated electrode model: Calibration and CalibrationPoint.

Electrode model (IUPAC 2002 recommendations on pH measurement, Buck et al.,
Pure Appl. Chem. 74 (2002) 2169, section on calibration of the glass electrode
cell; the same model as :mod:`probeflow.chemistry.nernst`)::

    E = E0 - s * k(T) * (pH - pH0)

E0 offset_mv [mV] at the zero point pH0 (zero_ph, 7.00 by default); s slope_pct
[% of the ideal Nernst slope k(T) = ln(10) R T / F, mV per pH].

Isothermal intersection (optional).  With this model, lines of E against pH at
different temperatures all cross at (pH0, E0).  Real electrodes often cross
elsewhere, at the isothermal intersection point (pH_is, E_is) (Galster, "pH
Measurement", VCH 1991, ch. 3, from memory).  When ``iso_ph``/``iso_mv`` are set,
the model is::

    E = E_is - s * k(T) * (pH - pH_is)

and ``offset_mv`` is then the potential at the zero point at
``reference_temp_c`` (25 °C by default): E0 = E_is - s k(T_ref) (pH0 - pH_is).
With pH_is = pH0 both forms are the same.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from probeflow.chemistry.nernst import nernst_slope_mv, ph_from_potential, potential_from_ph
from probeflow.errors import CalibrationError

__all__ = ["Calibration", "CalibrationPoint"]

_CONSISTENCY_MV = 1e-6


@dataclass(frozen=True)
class CalibrationPoint:
    """One calibration point: buffer pH at its temperature, electrode mV, temperature."""

    ph: float
    mv: float
    temp_c: float
    buffer: str | None = None

    @classmethod
    def of(cls, point: CalibrationPoint | tuple[Any, ...]) -> CalibrationPoint:
        if isinstance(point, CalibrationPoint):
            return point
        if isinstance(point, tuple | list) and len(point) in (3, 4):
            return cls(*point)
        raise CalibrationError(
            f"A calibration point must be (buffer pH, mV, temperature °C), got {point!r}."
        )


def _finite(value: float) -> bool:
    return isinstance(value, numbers.Real) and math.isfinite(float(value))


@dataclass(frozen=True)
class Calibration:
    """A fitted (or entered) electrode calibration; see module docstring for the model."""

    offset_mv: float
    slope_pct: float
    zero_ph: float = 7.0
    residuals_ph: tuple[float, ...] = ()
    points: tuple[CalibrationPoint, ...] = ()
    iso_ph: float | None = None
    iso_mv: float | None = None
    reference_temp_c: float = 25.0

    def __post_init__(self) -> None:
        for label, value in (("offset", self.offset_mv), ("slope", self.slope_pct),
                             ("zero point", self.zero_ph)):
            if not _finite(value):
                raise CalibrationError(f"Calibration {label} is not a number ({value!r}).")
        if self.slope_pct <= 0.0:
            raise CalibrationError(
                f"Calibration slope {self.slope_pct:g} % is not positive: an electrode's potential "
                "must fall as pH rises. Check that the buffers were not swapped."
            )
        if (self.iso_ph is None) != (self.iso_mv is None):
            raise CalibrationError("An isothermal intersection needs both its pH and its mV.")
        if self.iso_ph is not None:
            expected = self.offset_at(self.reference_temp_c)
            if not math.isclose(expected, self.offset_mv, rel_tol=0.0, abs_tol=_CONSISTENCY_MV):
                raise CalibrationError(
                    f"Offset {self.offset_mv:g} mV does not agree with the isothermal intersection "
                    f"({self.iso_ph:g}, {self.iso_mv:g} mV) at {self.reference_temp_c:g} °C "
                    f"(expected {expected:.6f} mV). Build it with Calibration.isothermal()."
                )

    @classmethod
    def isothermal(
        cls,
        iso_ph: float,
        iso_mv: float,
        slope_pct: float,
        zero_ph: float = 7.0,
        reference_temp_c: float = 25.0,
        residuals_ph: tuple[float, ...] = (),
        points: tuple[CalibrationPoint, ...] = (),
    ) -> Calibration:
        """Calibration whose lines at all temperatures cross at (iso_ph, iso_mv)."""
        offset = float(potential_from_ph(zero_ph, reference_temp_c, iso_mv, slope_pct, iso_ph))
        return cls(offset, slope_pct, zero_ph, residuals_ph, points, iso_ph, iso_mv, reference_temp_c)

    @property
    def anchor(self) -> tuple[float, float]:
        """(pH, mV) of the point all isotherms pass through."""
        if self.iso_ph is not None and self.iso_mv is not None:
            return (self.iso_ph, self.iso_mv)
        return (self.zero_ph, self.offset_mv)

    def offset_at(self, temp_c: ArrayLike) -> float | np.ndarray:
        """Potential [mV] at the zero point zero_ph at temp_c [°C]."""
        ph_a, mv_a = self.anchor
        return potential_from_ph(self.zero_ph, temp_c, mv_a, self.slope_pct, ph_a)

    def slope_mv(self, temp_c: ArrayLike) -> float | np.ndarray:
        """Practical slope s k(T) [mV per pH] at temp_c [°C]."""
        return self.slope_pct * 0.01 * nernst_slope_mv(temp_c)

    def to_ph(self, mv: ArrayLike, temp_c: ArrayLike) -> float | np.ndarray:
        """pH from potential mv [mV] at temp_c [°C]; never clipped; NaN in, NaN out."""
        ph_a, mv_a = self.anchor
        return ph_from_potential(mv, temp_c, mv_a, self.slope_pct, ph_a)

    def to_mv(self, ph: ArrayLike, temp_c: ArrayLike) -> float | np.ndarray:
        """Potential [mV] the electrode shows in a solution of pH ph at temp_c [°C]."""
        ph_a, mv_a = self.anchor
        return potential_from_ph(ph, temp_c, mv_a, self.slope_pct, ph_a)

    def to_record(self) -> dict[str, Any]:
        """Plain dict for JSON output and storage."""
        record = asdict(self)
        record["residuals_ph"] = list(self.residuals_ph)
        record["points"] = [asdict(p) for p in self.points]
        return record
