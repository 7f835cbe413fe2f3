"""Neutral pH pN = pKw / 2: references, the fast table against the direct formula, range."""

from __future__ import annotations

import math

import numpy as np
import pytest
from iapws import IAPWS97
from iapws._iapws import _Kw as iapws_pkw_2024

from probeflow.chemistry import (
    NeutralPhTable,
    neutral_ph,
    pkw,
    saturation_pressure_kpa,
    temperature_in_range,
)

from .conftest import load_table

ZERO_C = 273.15


@pytest.mark.parametrize(
    "row", [r for r in load_table("pkw_crc_handbook.csv") if r["pressure_mpa"] == 0.1]
)
def test_neutral_ph_is_half_the_crc_handbook_pkw(row: dict[str, float]) -> None:
    """CRC Handbook 'Ionization Constant of Water' at 0.1 MPa, pN = pKw/2 within 0.005
    (R11-07, the equation the handbook used); e.g. 6.9975 at 25 °C, 6.126 at 100 °C."""
    assert abs(neutral_ph(row["temp_c"], 100.0, release="2007") - row["pkw"] / 2) < 0.005


def test_neutral_ph_matches_iapws_package_0_to_300_c() -> None:
    """pN against iapws 1.5.5 (_iapws._Kw / 2 with IAPWS97 liquid or saturated-liquid
    density) at 101.325 kPa over 0-300 °C, within 0.002."""
    temps = np.arange(0.0, 300.01, 2.5)
    ref = []
    for t in temps:
        if 101.325 < saturation_pressure_kpa(t):
            rho = IAPWS97(T=t + ZERO_C, x=0.0).rho
        else:
            rho = IAPWS97(T=t + ZERO_C, P=0.101325).rho
        ref.append(iapws_pkw_2024(rho, t + ZERO_C) / 2)
    assert np.max(np.abs(neutral_ph(temps) - np.array(ref))) < 0.002


def test_neutral_ph_is_exactly_half_pkw() -> None:
    temps = np.linspace(0.0, 350.0, 71)
    for release in ("2007", "2024"):
        assert np.array_equal(neutral_ph(temps, 5000.0, release), pkw(temps, 5000.0, release) * 0.5)


@pytest.mark.parametrize("pressure_kpa", [101.325, 1000.0, 25_000.0])
@pytest.mark.parametrize("release", ["2007", "2024"])
def test_table_agrees_with_direct_formula(pressure_kpa: float, release: str) -> None:
    """The 0.01 K look-up table stays within 1e-6 pH of the direct formula over 0-350 °C,
    at random points, grid nodes, interval midpoints and both ends."""
    table = NeutralPhTable(pressure_kpa, release)
    rng = np.random.default_rng(7)
    temps = np.concatenate([
        rng.uniform(0.0, 350.0, 20_000),
        np.arange(0.0, 350.0, 0.37),          # off-grid sweep
        np.arange(0.005, 350.0, 0.01)[::97],  # interval midpoints
        [0.0, 1e-9, 99.974, 100.0, 349.995, 350.0],
    ])
    error = np.abs(table(temps) - neutral_ph(temps, pressure_kpa, release))
    assert np.max(error) < 1e-6


def test_table_lookup_into_out_array() -> None:
    table = NeutralPhTable()
    temps = np.array([5.0, 25.0, 80.0])
    out = np.empty(3)
    result = table.lookup(temps, out=out)
    assert result is out
    assert np.allclose(out, neutral_ph(temps), atol=1e-8)


OUTSIDE = [-273.15, -5.0, -1e-6, 350.000001, 350.5, 1000.0, math.inf, -math.inf, math.nan]


@pytest.mark.parametrize("temp_c", OUTSIDE)
def test_out_of_range_is_nan_direct_and_table(temp_c: float) -> None:
    assert math.isnan(neutral_ph(temp_c))
    assert math.isnan(NeutralPhTable()(temp_c))
    assert temperature_in_range(temp_c) is False


def test_range_ends_are_included() -> None:
    for temp_c in (0.0, 350.0):
        assert temperature_in_range(temp_c) is True
        assert math.isfinite(neutral_ph(temp_c))
        assert math.isfinite(NeutralPhTable()(temp_c))


def test_mask_matches_nan_pattern() -> None:
    rng = np.random.default_rng(3)
    temps = rng.uniform(-20.0, 380.0, 5000)
    temps[::50] = np.nan
    table = NeutralPhTable()
    mask = temperature_in_range(temps)
    assert np.array_equal(mask, np.isfinite(neutral_ph(temps)))
    assert np.array_equal(mask, np.isfinite(table(temps)))


def test_scalars_and_arrays_give_the_same_numbers() -> None:
    temps = np.array([0.0, 7.5, 25.0, 63.2, 100.0, 200.0, 349.0])
    direct = neutral_ph(temps)
    fast = NeutralPhTable()(temps)
    for i, t in enumerate(temps):
        assert isinstance(neutral_ph(float(t)), float)
        assert neutral_ph(float(t)) == direct[i]
        assert NeutralPhTable()(float(t)) == fast[i]
    grid = temps.reshape(7, 1) + np.zeros((1, 2))
    assert NeutralPhTable()(grid).shape == (7, 2)


def test_neutral_ph_falls_with_temperature() -> None:
    """pN decreases from about 7.47 at 0 °C towards about 5.6 near 300 °C (common practice)."""
    temps = np.linspace(0.0, 250.0, 251)
    assert np.all(np.diff(neutral_ph(temps)) < 0)
