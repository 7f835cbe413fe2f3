"""Calibration.to_ph / to_mv: exact inverses, arrays = scalars, NaN in -> NaN out,
isothermal intersection behaves as its definition says."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from probeflow.calibration import Calibration, CalibrationPoint, fit_calibration
from probeflow.chemistry import nernst_slope_mv, potential_from_ph
from probeflow.errors import CalibrationError

CAL = Calibration(offset_mv=8.0, slope_pct=96.0)
ISO = Calibration.isothermal(iso_ph=6.2, iso_mv=-15.0, slope_pct=97.5)


@pytest.mark.parametrize("cal", [CAL, ISO])
@given(ph=st.floats(-2.0, 16.0), temp_c=st.floats(0.0, 130.0))
def test_round_trip_to_1e_12(cal: Calibration, ph: float, temp_c: float) -> None:
    assert cal.to_ph(cal.to_mv(ph, temp_c), temp_c) == pytest.approx(ph, abs=1e-12)


@pytest.mark.parametrize("cal", [CAL, ISO])
def test_round_trip_arrays_and_scalars_agree(cal: Calibration) -> None:
    ph = np.linspace(-1.5, 15.2, 301)
    temps = np.linspace(0.0, 95.0, 301)
    mv = cal.to_mv(ph, temps)
    back = cal.to_ph(mv, temps)
    assert isinstance(back, np.ndarray) and np.max(np.abs(back - ph)) < 1e-12
    for i in range(0, 301, 37):
        s = cal.to_ph(float(mv[i]), float(temps[i]))
        assert isinstance(s, float) and s == back[i]
    # broadcasting: one temperature for many readings, and a 2-D block
    grid = cal.to_ph(mv.reshape(7, 43), 25.0)
    assert grid.shape == (7, 43)


def test_matches_electrode_model_without_clipping() -> None:
    """E = E0 - s k(T) (pH - pH0): 0 mV at 25 °C reads pH0 + E0/(s k); extremes are not clipped."""
    k25 = nernst_slope_mv(25.0)
    assert CAL.to_ph(8.0, 25.0) == pytest.approx(7.0, abs=1e-12)
    assert CAL.to_ph(0.0, 25.0) == pytest.approx(7.0 + 8.0 / (0.96 * k25), abs=1e-12)
    assert CAL.to_ph(CAL.to_mv(-1.5, 40.0), 40.0) == pytest.approx(-1.5, abs=1e-12)
    assert CAL.to_ph(CAL.to_mv(15.2, 40.0), 40.0) == pytest.approx(15.2, abs=1e-12)


def test_nan_in_nan_out() -> None:
    assert math.isnan(CAL.to_ph(float("nan"), 25.0))
    assert math.isnan(CAL.to_ph(0.0, float("nan")))
    out = CAL.to_ph(np.array([0.0, np.nan, 10.0]), np.array([25.0, 25.0, np.nan]))
    assert np.isfinite(out[0]) and np.isnan(out[1]) and np.isnan(out[2])


def test_isothermal_lines_cross_at_iso_point() -> None:
    """Definition of the isothermal intersection: same potential at pH_is at every temperature."""
    for t in (0.0, 25.0, 60.0, 90.0):
        assert ISO.to_mv(6.2, t) == pytest.approx(-15.0, abs=1e-12)
    # offset_mv is the potential at the zero point at the reference temperature (25 °C)
    assert ISO.offset_mv == pytest.approx(-15.0 - 0.975 * nernst_slope_mv(25.0) * (7.0 - 6.2), abs=1e-12)
    assert ISO.offset_at(25.0) == pytest.approx(ISO.offset_mv, abs=1e-12)
    # and the zero-point potential moves with temperature
    assert ISO.offset_at(60.0) < ISO.offset_at(25.0)
    # with pH_is = pH0 the two forms are the same model
    same = Calibration.isothermal(7.0, 8.0, 96.0)
    for t in (5.0, 50.0):
        assert same.to_ph(33.3, t) == pytest.approx(CAL.to_ph(33.3, t), abs=1e-12)


def test_fit_with_isothermal_point_recovers_electrode() -> None:
    pts = [CalibrationPoint(ph, potential_from_ph(ph, t, -15.0, 97.5, 6.2), t)
           for ph, t in [(4.005, 25.0), (6.833, 50.0), (9.068, 40.0), (10.179, 10.0)]]
    cal = fit_calibration(pts, iso_ph=6.2)
    assert cal.iso_ph == 6.2
    assert cal.iso_mv == pytest.approx(-15.0, abs=0.01)
    assert cal.slope_pct == pytest.approx(97.5, abs=0.01)
    assert cal.offset_mv == pytest.approx(ISO.offset_mv, abs=0.01)
    # the plain model cannot describe this electrode over 10-50 °C: residuals show it
    plain = fit_calibration(pts)
    assert max(abs(r) for r in plain.residuals_ph) > 1e-3
    assert max(abs(r) for r in cal.residuals_ph) < 1e-9


@pytest.mark.parametrize(
    ("kwargs", "words"),
    [
        ({"offset_mv": 0.0, "slope_pct": 0.0}, "not positive"),
        ({"offset_mv": 0.0, "slope_pct": -95.0}, "swapped"),
        ({"offset_mv": float("nan"), "slope_pct": 95.0}, "offset is not a number"),
        ({"offset_mv": 0.0, "slope_pct": 95.0, "iso_ph": 6.0}, "both its pH and its mV"),
        ({"offset_mv": 0.0, "slope_pct": 95.0, "iso_ph": 6.0, "iso_mv": 0.0}, "does not agree"),
    ],
)
def test_bad_calibration_refused(kwargs: dict, words: str) -> None:
    with pytest.raises(CalibrationError, match=words):
        Calibration(**kwargs)


def test_record_is_json_ready() -> None:
    pts = [(4.005, 178.1, 25.0), (9.18, -120.0, 25.0)]
    rec = fit_calibration(pts).to_record()
    text = json.dumps(rec)
    back = json.loads(text)
    assert set(back) >= {"offset_mv", "slope_pct", "zero_ph", "residuals_ph", "points"}
    assert back["points"][1]["mv"] == -120.0
