"""Conversion of mV and temperature to pH, neutral pH and deviation."""

from __future__ import annotations

import math

import numpy as np
import pytest

from probeflow.chemistry import (
    ReadingConverter,
    compensate_to_reference,
    convert_readings,
    neutral_ph,
    potential_from_ph,
    temperature_in_range,
)
from probeflow.chemistry.nernst import NERNST_MV_PER_K

R_CODATA_2018 = 8.314462618
F_CODATA_2018 = 96485.33212


def test_ph_from_ideal_electrode_at_25_c() -> None:
    """An ideal electrode (E0 = 0 mV at pH 7, 100 %) reads -k per pH unit above 7;
    k from CODATA 2018 R and F (computed here)."""
    k = 1000.0 * math.log(10.0) * R_CODATA_2018 * 298.15 / F_CODATA_2018
    result = convert_readings(-2.0 * k, 25.0)
    assert result.ph == pytest.approx(9.0, abs=1e-9)
    assert result.neutral_ph == pytest.approx(neutral_ph(25.0), abs=1e-7)
    assert result.neutral_dev == pytest.approx(result.ph - result.neutral_ph, abs=1e-15)


def test_round_trip_through_the_electrode_model() -> None:
    rng = np.random.default_rng(11)
    ph = rng.uniform(-1.0, 15.0, 1000)
    temp = rng.uniform(0.0, 120.0, 1000)
    offset = rng.normal(0.0, 15.0, 1000)
    slope = rng.uniform(88.0, 104.0, 1000)
    zero = rng.uniform(6.5, 7.5, 1000)
    mv = potential_from_ph(ph, temp, offset, slope, zero)
    result = convert_readings(mv, temp, offset, slope, zero)
    assert np.max(np.abs(result.ph - ph)) < 1e-12


def test_ph_is_never_clipped() -> None:
    mv = potential_from_ph(np.array([-1.5, 15.2]), 25.0)
    assert convert_readings(mv, 25.0).ph == pytest.approx([-1.5, 15.2], abs=1e-12)


def test_out_of_range_temperature_gives_nan_neutral_but_keeps_ph() -> None:
    result = convert_readings(np.array([0.0, 0.0, 0.0]), np.array([25.0, 360.0, -3.0]))
    assert np.isfinite(result.ph).all()
    assert np.isnan(result.neutral_ph).tolist() == [False, True, True]
    assert np.isnan(result.neutral_dev).tolist() == [False, True, True]
    assert temperature_in_range(np.array([25.0, 360.0, -3.0])).tolist() == [True, False, False]


def test_nan_in_gives_nan_out_without_exception() -> None:
    result = convert_readings(np.array([np.nan, 10.0]), np.array([25.0, np.nan]))
    assert math.isnan(result.ph[0]) and math.isfinite(result.neutral_ph[0])
    assert math.isnan(result.ph[1]) and math.isnan(result.neutral_ph[1])
    assert np.isnan(result.neutral_dev).all()
    scalar = convert_readings(math.nan, math.nan)
    assert all(math.isnan(x) for x in scalar)


def test_scalar_gives_floats_equal_to_array_elements() -> None:
    mv = np.array([-120.0, 0.0, 35.5, 250.0])
    temp = np.array([3.0, 25.0, 61.0, 140.0])
    arr = convert_readings(mv, temp, 4.0, 97.0, 7.0)
    for i in range(4):
        one = convert_readings(float(mv[i]), float(temp[i]), 4.0, 97.0, 7.0)
        assert all(isinstance(x, float) for x in one)
        assert one.ph == arr.ph[i]
        assert one.neutral_ph == arr.neutral_ph[i]
        assert one.neutral_dev == arr.neutral_dev[i]


def test_array_pressure_uses_direct_formula_and_agrees_with_table() -> None:
    temp = np.array([10.0, 50.0, 150.0])
    pressures = np.array([101.325, 101.325, 1000.0])
    by_array = convert_readings(0.0, temp, pressure_kpa=pressures)
    assert by_array.neutral_ph[1] == pytest.approx(convert_readings(0.0, 50.0).neutral_ph, abs=1e-7)
    assert by_array.neutral_ph[2] == pytest.approx(
        convert_readings(0.0, 150.0, pressure_kpa=1000.0).neutral_ph, abs=1e-7
    )
    assert by_array.neutral_ph[2] == pytest.approx(neutral_ph(150.0, 1000.0), abs=1e-15)


def test_pressure_changes_neutral_ph() -> None:
    """Compressed water ionises more: pN at 25 MPa is below pN at 0.1 MPa
    (CRC Handbook 'Ionization Constant of Water': 13.908 vs 13.995 at 25 °C)."""
    low = convert_readings(0.0, 25.0, pressure_kpa=100.0).neutral_ph
    high = convert_readings(0.0, 25.0, pressure_kpa=25_000.0).neutral_ph
    assert (low - high) == pytest.approx((13.995 - 13.908) / 2, abs=0.002)


def test_release_choice_reaches_neutral_ph() -> None:
    old = convert_readings(0.0, 300.0, pressure_kpa=10_000.0, release="2007").neutral_ph
    new = convert_readings(0.0, 300.0, pressure_kpa=10_000.0, release="2024").neutral_ph
    assert old == pytest.approx(neutral_ph(300.0, 10_000.0, "2007"), abs=1e-6)
    assert new == pytest.approx(neutral_ph(300.0, 10_000.0, "2024"), abs=1e-6)
    assert abs(old - new) > 0.01


def test_reading_converter_matches_functional_form() -> None:
    rng = np.random.default_rng(5)
    n_probes, n = 50, 20_000
    offset = rng.normal(0.0, 12.0, n_probes)
    slope = rng.uniform(90.0, 103.0, n_probes)
    zero = rng.uniform(6.8, 7.2, n_probes)
    index = rng.integers(0, n_probes, n)
    mv = rng.uniform(-450.0, 450.0, n)
    temp = rng.uniform(-5.0, 360.0, n)
    temp[::100] = np.nan
    conv = ReadingConverter(offset, slope, zero)
    ph, pn, dev = conv.convert(index, mv, temp)
    ref = convert_readings(mv, temp, offset[index], slope[index], zero[index])
    np.testing.assert_allclose(ph, ref.ph, rtol=1e-13, atol=1e-12)
    np.testing.assert_array_equal(pn, ref.neutral_ph)
    np.testing.assert_allclose(dev, ref.neutral_dev, rtol=1e-13, atol=1e-12)
    assert np.array_equal(np.isnan(pn), ~temperature_in_range(temp))


def test_reading_converter_zero_slope_gives_inf_not_exception() -> None:
    """A probe with a 0 % slope (a broken calibration record) yields a non-finite pH
    for its readings, never an exception that would stop the batch."""
    conv = ReadingConverter([0.0, 0.0], [100.0, 0.0], [7.0, 7.0])
    with np.errstate(all="raise"):
        ph, _, _ = conv.convert([0, 1], [10.0, 10.0], [25.0, 25.0])
    assert math.isfinite(ph[0]) and not math.isfinite(ph[1])


def test_nernst_factor_matches_codata() -> None:
    assert NERNST_MV_PER_K == pytest.approx(
        1000.0 * math.log(10.0) * R_CODATA_2018 / F_CODATA_2018, rel=1e-9
    )


def test_compensation_to_reference_temperature() -> None:
    """Linear solution temperature coefficient (common practice, no source):
    at the reference temperature nothing changes; elsewhere pH - alpha (t - t_ref)."""
    assert compensate_to_reference(8.2, 25.0, -0.03) == 8.2
    values = compensate_to_reference(np.array([8.0, 8.0]), np.array([45.0, 5.0]), -0.03, 25.0)
    assert values == pytest.approx([8.6, 7.4], abs=1e-12)
    assert math.isnan(compensate_to_reference(7.0, math.nan, -0.03))


def test_one_temperature_for_many_potentials_broadcasts_to_independent_arrays() -> None:
    result = convert_readings(np.array([-59.0, 0.0, 59.0]), 25.0)
    assert result.ph.shape == result.neutral_ph.shape == result.neutral_dev.shape == (3,)
    result.neutral_ph[0] = 0.0  # writable and not shared with the others
    assert result.neutral_ph[1] == pytest.approx(neutral_ph(25.0), abs=1e-7)
