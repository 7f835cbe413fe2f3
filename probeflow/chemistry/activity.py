"""Ion activity coefficients (Davies equation) and [H+], [OH-] from pH.

Davies equation (C. W. Davies, "Ion Association", Butterworths, London, 1962,
pp. 39-41):

    log10 gamma = -A z^2 ( sqrt(I) / (1 + sqrt(I)) - 0.3 I )

I ionic strength [mol/kg], z ion charge, A the Debye-Hückel constant.  Intended
for I up to about 0.5 mol/kg; beyond it the equation is an extrapolation (it
is not refused, as real process liquors drift, but treat the result as rough).

A(T) from Debye-Hückel theory on the molal scale,

    A = sqrt(2 pi N_A rho_w) / ln(10) * (e^2 / (4 pi eps0 epsr k T))^(3/2)

with N_A, e, k (CODATA 2018, exact), eps0 (CODATA 2018: 8.8541878128e-12 F/m),
rho_w the IAPWS-IF97 water density [kg/m3], and the relative permittivity of
water by Malmberg and Maryott, J. Res. Natl. Bur. Stand. 56 (1956) 1, Eq. (8):

    epsr = 87.740 - 0.40008 t + 9.398e-4 t^2 - 1.410e-6 t^3     (t in °C, 0-100 °C)

(coefficients from memory; the tests check epsr against the IAPWS R8-97
dielectric formulation as implemented in the iapws package).  Gives
A = 0.5108 (mol/kg)^-1/2 at 25 °C.  Outside 0-100 °C the result is NaN.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike

from probeflow.chemistry.constants import (
    AVOGADRO_PER_MOL,
    BOLTZMANN_J_PER_K,
    ELEMENTARY_CHARGE_C,
    STANDARD_PRESSURE_KPA,
    VACUUM_PERMITTIVITY_F_PER_M,
    ZERO_CELSIUS_K,
)
from probeflow.chemistry.if97 import water_density
from probeflow.chemistry.ionisation import DEFAULT_RELEASE, pkw_from_density

__all__ = [
    "ACTIVITY_MAX_TEMP_C",
    "ACTIVITY_MIN_TEMP_C",
    "IonConcentrations",
    "davies_log_gamma",
    "debye_huckel_a",
    "ion_concentrations",
    "relative_permittivity",
]

ACTIVITY_MIN_TEMP_C = 0.0
"""Lowest temperature of the permittivity fit [°C] (Malmberg and Maryott 1956)."""
ACTIVITY_MAX_TEMP_C = 100.0
"""Highest temperature of the permittivity fit [°C] (Malmberg and Maryott 1956)."""

# Malmberg & Maryott (1956), Eq. (8): epsr(t) coefficients, t in °C.
_EPSR_COEFFICIENTS = (87.740, -0.40008, 9.398e-4, -1.410e-6)

# Davies (1962): the linear term's coefficient.
DAVIES_LINEAR_COEFFICIENT = 0.3


def _out(value: np.ndarray) -> float | np.ndarray:
    return float(value) if np.ndim(value) == 0 else value


def _in_fit_range(t: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return (t >= ACTIVITY_MIN_TEMP_C) & (t <= ACTIVITY_MAX_TEMP_C)


def relative_permittivity(temp_c: ArrayLike) -> float | np.ndarray:
    """Relative permittivity of water at 0.1 MPa, Malmberg & Maryott (1956) Eq. (8); NaN outside 0-100 °C.

    >>> round(relative_permittivity(25.0), 2)
    78.3
    """
    t = np.asarray(temp_c, dtype=np.float64)
    c0, c1, c2, c3 = _EPSR_COEFFICIENTS
    eps = c0 + t * (c1 + t * (c2 + t * c3))
    return _out(np.where(_in_fit_range(t), eps, np.nan))


def debye_huckel_a(temp_c: ArrayLike) -> float | np.ndarray:
    """Debye-Hückel constant A [(mol/kg)^-1/2] for log10 activity coefficients (module docstring).

    >>> round(debye_huckel_a(25.0), 4)
    0.5108
    """
    t = np.asarray(temp_c, dtype=np.float64)
    eps_r = np.asarray(relative_permittivity(t))
    rho = np.asarray(water_density(t, STANDARD_PRESSURE_KPA))
    t_k = t + ZERO_CELSIUS_K
    bjerrum = ELEMENTARY_CHARGE_C**2 / (
        4.0 * math.pi * VACUUM_PERMITTIVITY_F_PER_M * eps_r * BOLTZMANN_J_PER_K * t_k
    )
    a = np.sqrt(2.0 * math.pi * AVOGADRO_PER_MOL * rho) / math.log(10.0) * bjerrum**1.5
    return _out(a)


def davies_log_gamma(
    ionic_strength: ArrayLike, charge: ArrayLike = 1, temp_c: ArrayLike = 25.0
) -> float | np.ndarray:
    """log10 of the activity coefficient by the Davies equation (module docstring).

    ionic_strength  I [mol/kg], >= 0 (negative gives NaN)
    charge          ion charge z [-]
    temp_c          temperature [°C] for A(T), 0-100 °C (NaN outside)

    >>> round(davies_log_gamma(0.1, 1, 25.0), 4)
    -0.1074
    """
    i = np.asarray(ionic_strength, dtype=np.float64)
    z = np.asarray(charge, dtype=np.float64)
    a = np.asarray(debye_huckel_a(temp_c))
    with np.errstate(invalid="ignore"):
        root = np.sqrt(i)
    value = -a * z * z * (root / (1.0 + root) - DAVIES_LINEAR_COEFFICIENT * i)
    return _out(value)


class IonConcentrations(NamedTuple):
    """[H+] and [OH-] [mol/L]."""

    hydrogen_mol_l: float | np.ndarray
    hydroxide_mol_l: float | np.ndarray


def ion_concentrations(
    ph: ArrayLike,
    temp_c: ArrayLike,
    ionic_strength: ArrayLike = 0.0,
    pressure_kpa: ArrayLike = STANDARD_PRESSURE_KPA,
    release: str = DEFAULT_RELEASE,
) -> IonConcentrations:
    """Concentrations of H+ and OH- [mol/L] from pH, Kw and Davies activity coefficients.

    ph              measured pH = -log10 a(H+) [-]
    temp_c          temperature [°C], 0-100 °C (the permittivity fit; NaN outside)
    ionic_strength  I of the solution [mol/kg] (a per-probe setting)
    pressure_kpa    absolute pressure [kPa], for Kw and the water density
    release         IAPWS ionisation-constant release for Kw

    a(H+) = 10^-pH, a(OH-) = Kw / a(H+) (water activity taken as 1, dilute
    solution), m = a / gamma [mol/kg] with gamma from :func:`davies_log_gamma`
    (z = 1), and c = m rho_w / 1000 [mol/L] (solution density taken as that of
    water, IAPWS-IF97): adequate for dilute solutions only.

    >>> c = ion_concentrations(7.0, 25.0)
    >>> f"{c.hydrogen_mol_l:.3e} {c.hydroxide_mol_l:.3e}"
    '9.970e-08 1.010e-07'
    """
    p = np.asarray(ph, dtype=np.float64)
    t = np.asarray(temp_c, dtype=np.float64)
    rho = np.asarray(water_density(t, pressure_kpa))
    log_gamma = np.asarray(davies_log_gamma(ionic_strength, 1, t))
    log_kw = -np.asarray(pkw_from_density(t, rho, release))
    kg_per_l = rho / 1000.0
    hydrogen = 10.0 ** (-p - log_gamma) * kg_per_l
    hydroxide = 10.0 ** (log_kw + p - log_gamma) * kg_per_l
    return IonConcentrations(_out(hydrogen), _out(hydroxide))
