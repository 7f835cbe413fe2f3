"""Davies activity coefficients and [H+], [OH-] concentrations."""

from __future__ import annotations

import math

import numpy as np
import pytest
from iapws._iapws import _Dielectric

from probeflow.chemistry import (
    davies_log_gamma,
    debye_huckel_a,
    ion_concentrations,
    pkw,
    relative_permittivity,
    water_density,
)

NA = 6.02214076e23          # CODATA 2018, exact
E_CHARGE = 1.602176634e-19  # CODATA 2018, exact
K_B = 1.380649e-23          # CODATA 2018, exact
EPS0 = 8.8541878128e-12     # CODATA 2018


@pytest.mark.parametrize("temp_c", [0.0, 10.0, 25.0, 40.0, 60.0, 80.0, 100.0])
def test_permittivity_fit_against_iapws_r8_97(temp_c: float) -> None:
    """Malmberg & Maryott (1956) fit against IAPWS R8-97 (iapws._iapws._Dielectric).

    The two part smoothly, by -0.19 % at 0 °C to +0.35 % at 100 °C; the bound of
    0.4 % is ours (no source)."""
    ref = _Dielectric(water_density(temp_c), temp_c + 273.15)
    assert relative_permittivity(temp_c) == pytest.approx(ref, rel=4e-3)


@pytest.mark.parametrize("temp_c", [0.0, 25.0, 50.0, 90.0])
def test_debye_huckel_a_against_theory_with_iapws_permittivity(temp_c: float) -> None:
    """A(T) agrees within 0.5 % with the same Debye-Hückel expression evaluated with
    the IAPWS R8-97 permittivity (iapws package)."""
    rho = water_density(temp_c)
    eps = _Dielectric(rho, temp_c + 273.15)
    ref = math.sqrt(2 * math.pi * NA * rho) / math.log(10) * (
        E_CHARGE**2 / (4 * math.pi * EPS0 * eps * K_B * (temp_c + 273.15))
    ) ** 1.5
    assert debye_huckel_a(temp_c) == pytest.approx(ref, rel=5e-3)


def test_debye_huckel_a_at_25_c() -> None:
    """A = 0.5108 (mol/kg)^-1/2 at 25 °C (R. G. Bates, Determination of pH, 2nd ed. 1973,
    table of Debye-Hückel constants; from memory)."""
    assert debye_huckel_a(25.0) == pytest.approx(0.5108, abs=0.0005)


def test_davies_values() -> None:
    """Davies (1962) at 25 °C, z = 1: I = 0 gives gamma = 1; I = 0.01 gives about 0.90;
    the hand-evaluated formula with A = 0.5108 agrees."""
    assert davies_log_gamma(0.0) == 0.0
    by_hand = -0.5108 * (math.sqrt(0.01) / (1 + math.sqrt(0.01)) - 0.3 * 0.01)
    assert davies_log_gamma(0.01) == pytest.approx(by_hand, abs=1e-4)
    assert 10 ** davies_log_gamma(0.01) == pytest.approx(0.90, abs=0.01)
    # divalent ions: z^2 = 4 times the log
    assert davies_log_gamma(0.05, 2) == pytest.approx(4 * davies_log_gamma(0.05, 1), rel=1e-12)


def test_davies_nan_and_range() -> None:
    assert math.isnan(davies_log_gamma(-0.1))
    assert math.isnan(davies_log_gamma(0.1, 1, 120.0))
    assert np.isnan(davies_log_gamma(np.array([0.1, np.nan]))).tolist() == [False, True]


def test_pure_water_at_neutral_ph_has_equal_ions() -> None:
    """At pH = pKw/2 and I = 0: [H+] = [OH-] = sqrt(Kw) * rho_w / 1000 (definition of neutrality)."""
    for temp_c in (5.0, 25.0, 60.0, 95.0):
        pn = pkw(temp_c) / 2
        conc = ion_concentrations(pn, temp_c)
        expected = 10 ** -pn * water_density(temp_c) / 1000.0
        assert conc.hydrogen_mol_l == pytest.approx(expected, rel=1e-12)
        assert conc.hydroxide_mol_l == pytest.approx(expected, rel=1e-12)


def test_ionic_strength_raises_concentration_for_same_activity() -> None:
    plain = ion_concentrations(4.0, 25.0, 0.0)
    salty = ion_concentrations(4.0, 25.0, 0.1)
    ratio = salty.hydrogen_mol_l / plain.hydrogen_mol_l
    assert ratio == pytest.approx(10 ** -davies_log_gamma(0.1), rel=1e-12)
    assert ratio > 1.0


def test_ion_concentrations_arrays_match_scalars() -> None:
    ph = np.array([2.0, 7.0, 12.0])
    temp = np.array([10.0, 25.0, 70.0])
    arr = ion_concentrations(ph, temp, 0.02)
    for i in range(3):
        one = ion_concentrations(float(ph[i]), float(temp[i]), 0.02)
        assert isinstance(one.hydrogen_mol_l, float)
        assert one.hydrogen_mol_l == pytest.approx(arr.hydrogen_mol_l[i], rel=1e-14)
        assert one.hydroxide_mol_l == pytest.approx(arr.hydroxide_mol_l[i], rel=1e-14)
