"""Liquid water density from IAPWS-IF97 (region 1, with region 4 for saturation).

Source: IAPWS R7-97(2012), "Revised Release on the IAPWS Industrial Formulation
1997 for the Thermodynamic Properties of Water and Steam" (August 2007, editorial
revision 2012).

* Region 1, basic equation: dimensionless Gibbs free energy (Eq. 7),
  gamma(pi, tau) = sum n_i (7.1 - pi)^I_i (tau - 1.222)^J_i,
  pi = p / 16.53 MPa, tau = 1386 K / T, coefficients n_i, I_i, J_i from Table 2
  (34 terms); specific volume v = (R T / p) pi gamma_pi (Table 3),
  R = 0.461526 kJ/(kg K) (Eq. 1).
* Region 4, saturation-pressure equation (Eq. 30) with the coefficients of
  Table 34.

Validity used here: 0 <= t <= 350 °C (273.15 K to 623.15 K, the temperature
range of region 1) and pressure from 0 to 100 MPa absolute.  When the given
pressure lies below the saturation pressure at that temperature (the water
would boil), the density returned is that of the saturated liquid, computed
from region 1 at p = p_sat(T), and :func:`water_state` flags it.

Outside the range the result is NaN (scalar or array alike, no exception) and
``water_state(...).in_range`` is False; NaN in gives NaN out.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike

from probeflow.chemistry.constants import STANDARD_PRESSURE_KPA, ZERO_CELSIUS_K

__all__ = [
    "IF97_MAX_PRESSURE_KPA",
    "IF97_MAX_TEMP_C",
    "IF97_MIN_TEMP_C",
    "WaterState",
    "region1_specific_volume",
    "saturation_pressure_kpa",
    "water_density",
    "water_state",
]

IF97_MIN_TEMP_C = 0.0
"""Lowest temperature of region 1 used here [°C] (273.15 K, IF97 region 1)."""
IF97_MAX_TEMP_C = 350.0
"""Highest temperature of region 1 [°C] (623.15 K, IF97 region 1 boundary)."""
IF97_MAX_PRESSURE_KPA = 100_000.0
"""Highest pressure of region 1 [kPa] (100 MPa)."""

# IAPWS-IF97 Eq. (1): specific gas constant of ordinary water [kJ/(kg K)].
IF97_R_KJ_PER_KG_K = 0.461526

# Region 1 reducing quantities, IF97 Eq. (7).
_P_STAR_KPA = 16_530.0     # p* = 16.53 MPa
_T_STAR_K = 1386.0         # T* = 1386 K

# IAPWS-IF97 Table 2: numerical values of the coefficients and exponents of the
# dimensionless Gibbs free energy for region 1, Eq. (7).  i = 1..34.
_R1_I = np.array(
    [0, 0, 0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 1, 1, 2, 2, 2, 2, 2, 3, 3, 3,
     4, 4, 4, 5, 8, 8, 21, 23, 29, 30, 31, 32], dtype=np.int64)
_R1_J = np.array(
    [-2, -1, 0, 1, 2, 3, 4, 5, -9, -7, -1, 0, 1, 3, -3, 0, 1, 3, 17, -4, 0, 6,
     -5, -2, 10, -8, -11, -6, -29, -31, -38, -39, -40, -41], dtype=np.int64)
_R1_N = np.array([
    0.14632971213167e+00, -0.84548187169114e+00, -0.37563603672040e+01,
    0.33855169168385e+01, -0.95791963387872e+00, 0.15772038513228e+00,
    -0.16616417199501e-01, 0.81214629983568e-03, 0.28319080123804e-03,
    -0.60706301565874e-03, -0.18990068218419e-01, -0.32529748770505e-01,
    -0.21841717175414e-01, -0.52838357969930e-04, -0.47184321073267e-03,
    -0.30001780793026e-03, 0.47661393906987e-04, -0.44141845330846e-05,
    -0.72694996297594e-15, -0.31679644845054e-04, -0.28270797985312e-05,
    -0.85205128120103e-09, -0.22425281908000e-05, -0.65171222895601e-06,
    -0.14341729937924e-12, -0.40516996860117e-06, -0.12734301741641e-08,
    -0.17424871230634e-09, -0.68762131295531e-18, 0.14478307828521e-19,
    0.26335781662795e-22, -0.11947622640071e-22, 0.18228094581404e-23,
    -0.93537087292458e-25,
])

# IAPWS-IF97 Table 34: coefficients n_1..n_10 of the region 4 saturation
# equation, Eq. (29)/(30); reducing quantities p* = 1 MPa, T* = 1 K.
_R4_N = (
    0.11670521452767e+04, -0.72421316703206e+06, -0.17073846940092e+02,
    0.12020824702470e+05, -0.32325550322333e+07, 0.14915108613530e+02,
    -0.48232657361591e+04, 0.40511340542057e+06, -0.23855557567849e+00,
    0.65017534844798e+03,
)


class WaterState(NamedTuple):
    """Density of liquid water and how it was obtained.

    density_kg_m3  density [kg/m3]; NaN outside 0-350 °C, 0-100 MPa or for NaN input
    saturated      True where the given pressure is below the saturation pressure,
                   so the saturated-liquid density is given instead
    in_range       True where temperature and pressure lie inside the validity range
    """

    density_kg_m3: float | np.ndarray
    saturated: bool | np.ndarray
    in_range: bool | np.ndarray


def _out(value: np.ndarray) -> float | np.ndarray:
    return float(value) if np.ndim(value) == 0 else value


def _out_bool(value: np.ndarray) -> bool | np.ndarray:
    return bool(value) if np.ndim(value) == 0 else value


def saturation_pressure_kpa(temp_c: ArrayLike) -> float | np.ndarray:
    """Saturation pressure of water [kPa], IAPWS-IF97 region 4, Eq. (30).

    theta = T + n9 / (T - n10); A = theta^2 + n1 theta + n2;
    B = n3 theta^2 + n4 theta + n5; C = n6 theta^2 + n7 theta + n8;
    p_sat / 1 MPa = (2 C / (-B + sqrt(B^2 - 4 A C)))^4, coefficients IF97 Table 34.
    Computed for any temperature; IF97 defines it from 273.15 K to 647.096 K.

    temp_c  temperature [°C]

    IF97 Table 35 check value: T = 500 K gives 2.63889776 MPa.

    >>> round(saturation_pressure_kpa(500.0 - 273.15), 5)
    2638.89776
    >>> round(saturation_pressure_kpa(100.0), 3)
    101.418
    """
    n1, n2, n3, n4, n5, n6, n7, n8, n9, n10 = _R4_N
    t_in = np.asarray(temp_c, dtype=np.float64)
    t = np.atleast_1d(t_in) + ZERO_CELSIUS_K
    theta = t + n9 / (t - n10)
    a = (theta + n1) * theta + n2
    b = (n3 * theta + n4) * theta + n5
    c = (n6 * theta + n7) * theta + n8
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = 2.0 * c / (-b + np.sqrt(b * b - 4.0 * a * c))
    ratio *= ratio
    p_mpa = ratio * ratio
    return _out((p_mpa * 1000.0).reshape(t_in.shape))


def _integer_powers(x: np.ndarray, highest: int) -> list[np.ndarray]:
    """[x^0, x^1, ..., x^highest] by repeated multiplication (same rounding for any shape)."""
    powers = [np.ones_like(x), x]
    for _ in range(highest - 1):
        powers.append(powers[-1] * x)
    return powers


_CHUNK = 4096
"""Elements per block in :func:`_gamma_pi`, bounding its scratch memory to a few MB."""


def _gamma_pi_block(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    a_pow = _integer_powers(a, int(_R1_I.max()) - 1)
    b_pos = _integer_powers(b, int(_R1_J.max()))
    b_neg = _integer_powers(1.0 / b, -int(_R1_J.min()))
    total = np.zeros(a.shape)
    for n, i, j in zip(_R1_N.tolist(), _R1_I.tolist(), _R1_J.tolist()):
        if i == 0:
            continue
        total -= (n * i) * a_pow[i - 1] * (b_pos[j] if j >= 0 else b_neg[-j])
    return total


def _gamma_pi(pi: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """d gamma / d pi of IF97 region 1 (Table 4): -sum n_i I_i (7.1 - pi)^(I_i - 1) (tau - 1.222)^J_i.

    Returns a flat array over the broadcast shape of pi and tau; evaluated in
    blocks of ``_CHUNK`` elements with integer powers by multiplication.
    """
    a, b = np.broadcast_arrays(np.atleast_1d(7.1 - pi), np.atleast_1d(tau - 1.222))
    a = a.ravel()
    b = b.ravel()
    total = np.empty(a.size)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for start in range(0, a.size, _CHUNK):
            block = slice(start, start + _CHUNK)
            total[block] = _gamma_pi_block(a[block], b[block])
    return total


def region1_specific_volume(temp_c: ArrayLike, pressure_kpa: ArrayLike) -> float | np.ndarray:
    """Specific volume [m3/kg] from IAPWS-IF97 region 1 (Eq. 7, Table 3: v = R T pi gamma_pi / p).

    No range check and no saturation handling: the bare equation.  Use
    :func:`water_density` for the checked, saturation-aware quantity.

    IF97 Table 5 check value: T = 300 K, p = 3 MPa gives v = 0.100215168e-2 m3/kg.

    >>> f"{region1_specific_volume(300.0 - 273.15, 3000.0):.8e}"
    '1.00215168e-03'
    """
    t_k = np.asarray(temp_c, dtype=np.float64) + ZERO_CELSIUS_K
    p = np.asarray(pressure_kpa, dtype=np.float64)
    pi = p / _P_STAR_KPA
    tau = _T_STAR_K / t_k
    shape = np.broadcast(pi, tau).shape
    # v = R T pi gamma_pi / p = R T gamma_pi / p*
    volume = IF97_R_KJ_PER_KG_K * t_k * _gamma_pi(pi, tau).reshape(shape) / _P_STAR_KPA
    return _out(volume)


def water_state(
    temp_c: ArrayLike, pressure_kpa: ArrayLike = STANDARD_PRESSURE_KPA
) -> WaterState:
    """Liquid water density [kg/m3] with a saturation flag and a range flag.

    temp_c        temperature [°C], valid 0-350 °C
    pressure_kpa  absolute pressure [kPa], valid 0-100 000 kPa

    Region 1 of IAPWS-IF97 (Eq. 7, Table 2) where p >= p_sat(T) (Eq. 30);
    below the saturation pressure the saturated liquid, i.e. region 1 at
    p = p_sat(T), with ``saturated`` True.  Outside the validity range, or for
    NaN input, the density is NaN and ``in_range`` is False.

    >>> s = water_state(25.0)
    >>> round(s.density_kg_m3, 3), s.saturated, s.in_range
    (997.048, False, True)
    >>> s = water_state(150.0, 101.325)
    >>> round(s.density_kg_m3, 2), s.saturated
    (917.01, True)
    """
    t = np.asarray(temp_c, dtype=np.float64)
    p = np.asarray(pressure_kpa, dtype=np.float64)
    t, p = np.broadcast_arrays(t, p)
    with np.errstate(invalid="ignore"):
        in_range = (
            (t >= IF97_MIN_TEMP_C) & (t <= IF97_MAX_TEMP_C)
            & (p >= 0.0) & (p <= IF97_MAX_PRESSURE_KPA)
        )
        p_sat = np.asarray(saturation_pressure_kpa(t))
        saturated = in_range & (p < p_sat)
        p_used = np.where(saturated, p_sat, p)
        p_used = np.where(in_range, p_used, np.nan)
        t_used = np.where(in_range, t, np.nan)
        density = 1.0 / np.asarray(region1_specific_volume(t_used, p_used))
    return WaterState(_out(density), _out_bool(saturated), _out_bool(in_range))


def water_density(
    temp_c: ArrayLike, pressure_kpa: ArrayLike = STANDARD_PRESSURE_KPA
) -> float | np.ndarray:
    """Liquid water density [kg/m3] from IAPWS-IF97 region 1 (saturated liquid below p_sat).

    temp_c        temperature [°C], valid 0-350 °C
    pressure_kpa  absolute pressure [kPa], valid 0-100 000 kPa

    See :func:`water_state` for the formula, the saturation flag and the range
    flag.  Outside the validity range the result is NaN, never a clamped value.

    >>> round(water_density(4.0), 2)
    999.98
    >>> water_density(400.0)
    nan
    """
    return water_state(temp_c, pressure_kpa).density_kg_m3
