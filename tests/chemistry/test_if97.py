"""IAPWS-IF97 density: the release's verification tables and the iapws package."""

from __future__ import annotations

import math

import numpy as np
import pytest
from iapws import IAPWS97

from probeflow.chemistry import saturation_pressure_kpa, water_density, water_state
from probeflow.chemistry.if97 import region1_specific_volume

from .conftest import load_table

ZERO_C = 273.15


def half_unit_9_digits(value: float) -> float:
    """Half a unit in the 9th significant digit: the rounding of the printed tables."""
    return 0.5 * 10.0 ** (math.floor(math.log10(abs(value))) - 8)


@pytest.mark.parametrize("row", load_table("if97_region1_verification.csv"))
def test_region1_specific_volume_matches_if97_table5(row: dict[str, float]) -> None:
    """IF97 Table 5 (region 1 verification), 9 significant digits as printed."""
    v = region1_specific_volume(row["temp_k"] - ZERO_C, row["pressure_mpa"] * 1000.0)
    ref = row["specific_volume_m3_per_kg"]
    assert abs(v - ref) <= half_unit_9_digits(ref)


@pytest.mark.parametrize("row", load_table("if97_saturation_pressure_verification.csv"))
def test_saturation_pressure_matches_if97_table35(row: dict[str, float]) -> None:
    """IF97 Table 35 (region 4 verification), 9 significant digits as printed."""
    p = saturation_pressure_kpa(row["temp_k"] - ZERO_C)
    ref = row["pressure_mpa"]
    assert abs(p / 1000.0 - ref) <= half_unit_9_digits(ref)


LIQUID_POINTS = [
    (t, p)
    for t in (0.0, 0.01, 4.0, 25.0, 60.0, 99.0, 150.0, 250.0, 349.0)
    for p in (1000.0, 20_000.0, 50_000.0, 100_000.0)
    if p >= saturation_pressure_kpa(t)
]


@pytest.mark.parametrize(("temp_c", "pressure_kpa"), LIQUID_POINTS)
def test_compressed_liquid_density_matches_iapws_package(temp_c: float, pressure_kpa: float) -> None:
    """Region 1 density against iapws.IAPWS97 (reference library, same formulation)."""
    ref = IAPWS97(T=temp_c + ZERO_C, P=pressure_kpa / 1000.0)
    state = water_state(temp_c, pressure_kpa)
    assert state.saturated is False
    assert state.density_kg_m3 == pytest.approx(ref.rho, rel=1e-9)


@pytest.mark.parametrize("temp_c", [100.5, 120.0, 180.0, 250.0, 300.0, 350.0])
def test_below_saturation_pressure_gives_saturated_liquid(temp_c: float) -> None:
    """At 101.325 kPa above 100 °C: saturated liquid (iapws.IAPWS97 with x=0), flagged."""
    ref = IAPWS97(T=temp_c + ZERO_C, x=0.0)
    state = water_state(temp_c, 101.325)
    assert state.saturated is True
    assert state.in_range is True
    assert state.density_kg_m3 == pytest.approx(ref.rho, rel=1e-8)
    assert water_density(temp_c) == state.density_kg_m3


def test_boiling_point_switches_the_flag() -> None:
    """Saturation temperature at 101.325 kPa is 99.97 °C (IF97 region 4): flag flips there."""
    state = water_state(np.array([99.9, 100.0]), 101.325)
    assert state.saturated.tolist() == [False, True]


def test_known_density_at_4_and_25_celsius() -> None:
    """Maximum density near 4 °C, 999.97 kg/m3 and 997.05 kg/m3 at 25 °C
    (common handbook values, e.g. CRC Handbook 'Properties of water'; from memory)."""
    assert water_density(4.0) == pytest.approx(999.97, abs=0.02)
    assert water_density(25.0) == pytest.approx(997.05, abs=0.02)
    grid = np.linspace(0.0, 10.0, 1001)
    assert abs(grid[np.argmax(water_density(grid))] - 3.98) < 0.05


def test_out_of_range_gives_nan_and_flag() -> None:
    temps = np.array([-0.5, 0.0, 350.0, 350.5, np.nan, np.inf])
    state = water_state(temps, 101.325)
    assert np.isnan(state.density_kg_m3).tolist() == [True, False, False, True, True, True]
    assert state.in_range.tolist() == [False, True, True, False, False, False]
    assert state.saturated.tolist() == [False, False, True, False, False, False]


@pytest.mark.parametrize("pressure_kpa", [-1.0, 100_001.0, math.nan])
def test_pressure_out_of_range_gives_nan(pressure_kpa: float) -> None:
    state = water_state(25.0, pressure_kpa)
    assert math.isnan(state.density_kg_m3)
    assert state.in_range is False


def test_scalar_returns_python_types_and_arrays_match_scalars() -> None:
    temps = np.array([0.0, 12.5, 37.0, 95.0, 180.0, 320.0])
    pressures = np.array([101.325, 500.0, 101.325, 2000.0, 101.325, 15_000.0])
    arr = water_state(temps, pressures)
    for i, (t, p) in enumerate(zip(temps, pressures)):
        one = water_state(float(t), float(p))
        assert isinstance(one.density_kg_m3, float)
        assert isinstance(one.saturated, bool)
        assert one.density_kg_m3 == arr.density_kg_m3[i]
        assert one.saturated == arr.saturated[i]


def test_broadcasting_temperature_against_pressure() -> None:
    temps = np.array([[10.0], [80.0]])
    pressures = np.array([101.325, 10_000.0, 50_000.0])
    rho = water_density(temps, pressures)
    assert rho.shape == (2, 3)
    assert rho[1, 2] == water_density(80.0, 50_000.0)
    # compressing liquid water raises its density
    assert np.all(np.diff(rho, axis=1) > 0)
