"""The conversion stage against the chemistry core, quality flags and calibration swaps."""

from __future__ import annotations

import numpy as np
import pytest

from probeflow.batch import Quality, ReadingBatch
from probeflow.chemistry import convert_readings
from probeflow.config import ProbeConfig
from probeflow.convert import MV_LIMIT, Converter
from probeflow.rtd import temp_from_resistance

PROBES = [
    ProbeConfig(id="a", calibration={"offset_mv": -3.1, "slope_pct": 98.2, "zero_ph": 7.0}),
    ProbeConfig(id="b", calibration={"offset_mv": 12.5, "slope_pct": 94.0, "zero_ph": 6.9},
                fixed_temp_c=18.0, rtd={"r0": 1000}),
    ProbeConfig(id="c"),
    ProbeConfig(id="d", calibration={"offset_mv": 0.0, "slope_pct": 100.0, "zero_ph": 7.0},
                maintenance=True),
]


def test_matches_chemistry_per_probe_calibration():
    """pH, pN and deviation equal probeflow.chemistry.convert_readings with each probe's values."""
    rng = np.random.default_rng(1)
    n = 2000
    probe = rng.choice(["a", "b"], n).astype(object)
    mv = rng.uniform(-400, 400, n)
    temp = rng.uniform(5, 80, n)
    conv = Converter(PROBES).convert(ReadingBatch.from_columns(probe, np.arange(n) + 1.7e9, mv, temp))
    off = np.where(probe == "a", -3.1, 12.5)
    slope = np.where(probe == "a", 98.2, 94.0)
    zero = np.where(probe == "a", 7.0, 6.9)
    ref = convert_readings(mv, temp, off, slope, zero, 101.325)
    np.testing.assert_array_equal(conv.ph, ref.ph)
    np.testing.assert_array_equal(conv.neutral_ph, ref.neutral_ph)
    np.testing.assert_array_equal(conv.neutral_dev, ref.neutral_dev)
    assert (conv.quality == Quality.GOOD).all()


def test_temperature_sources_and_quality_flags():
    batch = ReadingBatch.from_columns(
        ["a", "b", "b", "c", "a", "a", "d", "a"],
        np.full(8, 1.7e9),
        [10.0, 10.0, 10.0, 10.0, MV_LIMIT + 1, 10.0, 10.0, 10.0],
        [25.0, np.nan, np.nan, 25.0, 25.0, np.nan, 25.0, 400.0],
        [np.nan, 1097.35, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan],
    )
    out = Converter(PROBES).convert(batch)
    assert out.temp_c[1] == pytest.approx(temp_from_resistance(1097.35, 1000))  # Pt1000 RTD
    assert out.temp_c[2] == 18.0            # fixed temperature
    assert np.isnan(out.temp_c[5]) and np.isnan(out.ph[5])
    assert out.quality_names() == ["good", "good", "good", "uncalibrated", "mv_out_of_range",
                                   "temp_fault", "maintenance", "temp_fault"]
    # uncalibrated: ideal electrode, still computed
    assert out.ph[3] == convert_readings(10.0, 25.0, 0.0, 100.0, 7.0).ph


def test_calibration_applies_from_its_timestamp():
    conv = Converter(PROBES)
    t = 1.7e9
    conv.set_calibration("c", offset_mv=5.0, slope_pct=97.0, zero_ph=7.0, valid_from=t + 10)
    batch = ReadingBatch.from_columns(["c", "c", "c"], [t, t + 10, t + 20], [30.0] * 3, [25.0] * 3)
    out = conv.convert(batch)
    assert out.quality_names() == ["uncalibrated", "good", "good"]
    assert out.ph[0] == convert_readings(30.0, 25.0, 0.0, 100.0, 7.0).ph
    assert out.ph[2] == convert_readings(30.0, 25.0, 5.0, 97.0, 7.0).ph
    conv.set_maintenance("c", True)
    assert conv.convert(batch).quality_names() == ["maintenance"] * 3


def test_distinct_pressures_use_each_probes_pressure():
    probes = [ProbeConfig(id="lo", calibration={"offset_mv": 0, "slope_pct": 100}),
              ProbeConfig(id="hi", calibration={"offset_mv": 0, "slope_pct": 100}, pressure_kpa=5000.0)]
    out = Converter(probes).convert(ReadingBatch.from_columns(["lo", "hi"], [1.7e9] * 2, [0.0, 0.0],
                                                               [150.0, 150.0]))
    assert out.neutral_ph[0] == convert_readings(0.0, 150.0, pressure_kpa=101.325).neutral_ph
    assert out.neutral_ph[1] == convert_readings(0.0, 150.0, pressure_kpa=5000.0).neutral_ph


def test_process_temperature_compensation_refers_ph_to_reference():
    """pH_ref = pH - coefficient * (t - t_ref) (linear solution coefficient; common practice,
    no source).  neutral_dev stays the liquid's own deviation at its temperature."""
    probes = [
        ProbeConfig(id="hot", calibration={"offset_mv": 0.0, "slope_pct": 100.0, "zero_ph": 7.0},
                    temp_comp={"reference_c": 25.0, "coefficient_ph_per_c": -0.03}),
        ProbeConfig(id="plain", calibration={"offset_mv": 0.0, "slope_pct": 100.0, "zero_ph": 7.0}),
    ]
    batch = ReadingBatch.from_columns(["hot", "plain"], [1.7e9, 1.7e9], [-50.0, -50.0], [45.0, 45.0])
    out = Converter(probes).convert(batch)
    raw = convert_readings(-50.0, 45.0, 0.0, 100.0, 7.0)
    assert out.ph[1] == raw.ph
    assert out.ph[0] == pytest.approx(raw.ph + 0.03 * 20.0, abs=1e-12)
    assert out.neutral_dev[0] == pytest.approx(raw.neutral_dev, abs=1e-12)
