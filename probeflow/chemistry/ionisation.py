"""The ionisation constant of water, pKw = -log10(Kw), from the IAPWS releases.

Formula (both editions; Bandura and Lvov, J. Phys. Chem. Ref. Data 35 (2006) 15,
adopted by IAPWS):

    pKw = -2 n [log10(1 + Z) - Z / (Z + 1) rho (beta0 + beta1 / T + beta2 rho)]
          + pKw_G + 2 log10(Mw / 1000)
    Z     = rho exp(alpha0 + alpha1 / T + alpha2 / T^2 rho^(2/3))
    pKw_G = gamma0 + gamma1 / T + gamma2 / T^2 + gamma3 / T^3

T temperature [K], rho density [g/cm3], n = 6, Mw = 18.015268 g/mol; Kw is the
molal ion product [(mol/kg)^2].

Editions (``release`` argument):

* ``"2007"``: IAPWS R11-07, "Release on the Ionization Constant of H2O"
  (August 2007); its 2019 edition (R11-07(2019)) keeps the same coefficients.
* ``"2024"``: IAPWS R11-24, "Revised Release on the Ionization Constant of
  H2O" (2024), which replaced the six alpha/beta coefficients; n, Mw and the
  gamma coefficients are unchanged.  This is the default.

Each edition's coefficients are in its coefficient table (see
``PKW_COEFFICIENTS``).  The releases state validity 0-1000 °C, density
0-1.25 g/cm3; probeflow uses the density of :mod:`probeflow.chemistry.if97`,
which limits the public functions to 0-350 °C liquid water.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike

from probeflow.chemistry.constants import STANDARD_PRESSURE_KPA, ZERO_CELSIUS_K
from probeflow.chemistry.if97 import water_density
from probeflow.errors import ChemistryError

__all__ = [
    "DEFAULT_RELEASE",
    "PKW_COEFFICIENTS",
    "PKW_RELEASES",
    "PkwCoefficients",
    "pkw",
    "pkw_from_density",
]


class PkwCoefficients(NamedTuple):
    """Coefficients of the IAPWS ionisation-constant equation (units: T in K, rho in g/cm3)."""

    source: str
    n: float
    molar_mass_g_mol: float
    alpha: tuple[float, float, float]
    beta: tuple[float, float, float]
    gamma: tuple[float, float, float, float]


_GAMMA = (0.61415, 48251.33, -67707.93, 10102100.0)
_N = 6.0
_MW = 18.015268

PKW_COEFFICIENTS: dict[str, PkwCoefficients] = {
    # IAPWS R11-07 (2007), the release's coefficient table (Table 1; the table
    # number is from memory, the values are confirmed by its check table, see
    # tests/data/pkw_iapws_r11_07_check.csv); the same values stand in
    # R11-07(2019) and in Bandura & Lvov (2006).
    "2007": PkwCoefficients(
        source="IAPWS R11-07 (2007; unchanged in 2019), Table 1",
        n=_N,
        molar_mass_g_mol=_MW,
        alpha=(-0.864671, 8659.19, -22786.2),
        beta=(0.642044, -56.8534, -0.375754),
        gamma=_GAMMA,
    ),
    # IAPWS R11-24 (2024), the release's coefficient table (Table 1; table number
    # from memory): revised alpha0..2 and beta0..2; n, Mw and gamma0..3 as in
    # 2007.  Values as carried by iapws 1.5.5 (_iapws._Kw) and confirmed by the
    # R11-24 check table (tests/data/pkw_iapws_r11_24_check.csv).
    "2024": PkwCoefficients(
        source="IAPWS R11-24 (2024), Table 1",
        n=_N,
        molar_mass_g_mol=_MW,
        alpha=(-0.702132, 8681.05, -24145.1),
        beta=(0.813876, -51.4471, -0.469920),
        gamma=_GAMMA,
    ),
}

PKW_RELEASES: tuple[str, ...] = tuple(sorted(PKW_COEFFICIENTS))
DEFAULT_RELEASE = "2024"


def _coefficients(release: str) -> PkwCoefficients:
    try:
        return PKW_COEFFICIENTS[str(release)]
    except KeyError:
        raise ChemistryError(
            f"unknown IAPWS ionisation-constant release {release!r}; "
            f"choose one of {', '.join(PKW_RELEASES)}"
        ) from None


def _out(value: np.ndarray) -> float | np.ndarray:
    return float(value) if np.ndim(value) == 0 else value


def pkw_from_density(
    temp_c: ArrayLike, density_kg_m3: ArrayLike, release: str = DEFAULT_RELEASE
) -> float | np.ndarray:
    """pKw from temperature and density by the IAPWS equation (module docstring).

    temp_c         temperature [°C]
    density_kg_m3  water density [kg/m3]
    release        "2024" (R11-24, default) or "2007" (R11-07)

    No range check: the bare equation, as the releases' check tables use it.
    The releases' validity (0-1000 °C, 0-1250 kg/m3) is the caller's concern.

    Check value of both editions' verification table: T = 300 K, rho = 1 g/cm3.

    >>> round(pkw_from_density(300.0 - 273.15, 1000.0, release="2007"), 6)
    13.906565
    """
    c = _coefficients(release)
    t = np.asarray(temp_c, dtype=np.float64) + ZERO_CELSIUS_K
    rho = np.asarray(density_kg_m3, dtype=np.float64) * 1e-3
    shape = np.broadcast(t, rho).shape
    t, rho = np.broadcast_arrays(np.atleast_1d(t), np.atleast_1d(rho))
    a0, a1, a2 = c.alpha
    b0, b1, b2 = c.beta
    g0, g1, g2, g3 = c.gamma
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        inv_t = 1.0 / t
        z = rho * np.exp(a0 + inv_t * (a1 + inv_t * a2 * np.cbrt(rho * rho)))
        pkw_gas = g0 + inv_t * (g1 + inv_t * (g2 + inv_t * g3))
        value = (
            -2.0 * c.n * (np.log10(1.0 + z) - z / (z + 1.0) * rho * (b0 + b1 * inv_t + b2 * rho))
            + pkw_gas
            + 2.0 * math.log10(c.molar_mass_g_mol / 1000.0)
        )
    return _out(value.reshape(shape))


def pkw(
    temp_c: ArrayLike,
    pressure_kpa: ArrayLike = STANDARD_PRESSURE_KPA,
    release: str = DEFAULT_RELEASE,
) -> float | np.ndarray:
    """pKw = -log10(Kw) of liquid water at temperature and pressure.

    temp_c        temperature [°C], valid 0-350 °C
    pressure_kpa  absolute pressure [kPa]; below the saturation pressure the
                  saturated liquid is taken (see :func:`probeflow.chemistry.water_state`)
    release       "2024" (IAPWS R11-24, default) or "2007" (IAPWS R11-07)

    Density from IAPWS-IF97 region 1 (:func:`probeflow.chemistry.water_density`),
    then the IAPWS ionisation-constant equation (:func:`pkw_from_density`).
    Outside 0-350 °C, or for NaN input, the result is NaN.

    >>> round(pkw(25.0), 4)
    13.9943
    """
    rho = water_density(temp_c, pressure_kpa)
    return pkw_from_density(temp_c, rho, release)
