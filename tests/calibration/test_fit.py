"""fit_calibration: recovers a known electrode; noise spread matches least-squares theory.

Points are generated from an invented electrode with probeflow.chemistry.potential_from_ph
(E = E0 - s k(T) (pH - pH0)); buffer pH values from the published tables
(probeflow.buffers, see tests/data/buffer_*.csv).  The theoretical standard errors
come from ordinary least-squares theory: Cov(beta) = sigma^2 (A^T A)^-1
(e.g. Draper & Smith, "Applied Regression Analysis", 3rd ed., 1998, ch. 5; from memory),
computed here independently of the code under test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from probeflow.buffers import buffer_ph
from probeflow.calibration import Calibration, CalibrationPoint, fit_calibration
from probeflow.chemistry import nernst_slope_mv, potential_from_ph
from probeflow.errors import CalibrationError

OFFSET, SLOPE = 8.0, 96.0


def _points(specs: list[tuple[str, float]], offset: float = OFFSET, slope: float = SLOPE,
            zero_ph: float = 7.0) -> list[CalibrationPoint]:
    out = []
    for name, t in specs:
        ph = buffer_ph(name, t)
        out.append(CalibrationPoint(ph, potential_from_ph(ph, t, offset, slope, zero_ph), t, name))
    return out


THREE = [("phthalate_0.05", 22.0), ("phosphate_1_1", 24.5), ("borax_0.01", 27.0)]
FIVE = THREE + [("carbonate_0.025", 18.0), ("citrate_0.05", 31.0)]


@pytest.mark.parametrize("specs", [THREE[:2], THREE, FIVE, [("phthalate_0.05", 5.0),
                                                           ("borax_0.01", 45.0)]])
def test_recovers_known_electrode(specs: list[tuple[str, float]]) -> None:
    cal = fit_calibration(_points(specs))
    assert cal.offset_mv == pytest.approx(OFFSET, abs=0.01)
    assert cal.slope_pct == pytest.approx(SLOPE, abs=0.01)
    assert cal.zero_ph == 7.0
    assert len(cal.residuals_ph) == len(specs)
    assert max(abs(r) for r in cal.residuals_ph) < 1e-9


def test_two_points_exact_even_with_odd_values() -> None:
    pts = _points([("tetroxalate_0.05", 12.0), ("calcium_hydroxide_saturated", 33.0)],
                  offset=-23.4, slope=91.3)
    cal = fit_calibration(pts)
    assert cal.offset_mv == pytest.approx(-23.4, abs=1e-9)
    assert cal.slope_pct == pytest.approx(91.3, abs=1e-9)


def test_other_zero_point() -> None:
    pts = _points(THREE, offset=-3.0, slope=98.0, zero_ph=6.5)
    cal = fit_calibration(pts, zero_ph=6.5)
    assert (cal.offset_mv, cal.slope_pct) == (pytest.approx(-3.0, abs=1e-9), pytest.approx(98.0, abs=1e-9))


def test_one_point_keeps_previous_slope_or_100() -> None:
    (pt,) = _points([("phosphate_1_1", 25.0)])
    fresh = fit_calibration([pt])
    assert fresh.slope_pct == 100.0
    # with 100 % assumed, offset absorbs the slope error at pH 6.865: 8 + 0.04*k*(6.865-7)
    k = nernst_slope_mv(25.0)
    assert fresh.offset_mv == pytest.approx(OFFSET - (SLOPE - 100.0) / 100 * k * (6.865 - 7.0), abs=1e-9)
    previous = Calibration(offset_mv=2.0, slope_pct=96.0)
    kept = fit_calibration([pt], previous=previous)
    assert kept.slope_pct == 96.0
    assert kept.offset_mv == pytest.approx(OFFSET, abs=1e-9)


def test_accepts_plain_tuples() -> None:
    pts = [(p.ph, p.mv, p.temp_c) for p in _points(THREE)]
    assert fit_calibration(pts).slope_pct == pytest.approx(SLOPE, abs=1e-9)


def test_noise_spread_matches_least_squares_theory() -> None:
    """0.1 mV Gaussian noise, 3000 seeds: spread of fitted slope and offset = OLS theory."""
    sigma = 0.1
    specs = [("phthalate_0.05", 20.0), ("phosphate_1_1", 25.0), ("borax_0.01", 30.0),
             ("carbonate_0.025", 25.0)]
    clean = _points(specs)
    # theory, written out here: rows [1, -k(T_i)(pH_i - 7)/100] for unknowns (E0 [mV], slope [%])
    a = np.array([[1.0, -nernst_slope_mv(p.temp_c) * (p.ph - 7.0) / 100.0] for p in clean])
    cov = sigma**2 * np.linalg.inv(a.T @ a)
    se_offset, se_slope = math.sqrt(cov[0, 0]), math.sqrt(cov[1, 1])
    n = 3000
    offsets, slopes = np.empty(n), np.empty(n)
    for seed in range(n):
        noise = np.random.default_rng(seed).normal(0.0, sigma, len(clean))
        cal = fit_calibration([CalibrationPoint(p.ph, p.mv + e, p.temp_c) for p, e in zip(clean, noise)])
        offsets[seed], slopes[seed] = cal.offset_mv, cal.slope_pct
    # sample std of n normal draws has relative standard error ~ 1/sqrt(2(n-1)) = 1.3 %
    assert np.std(slopes, ddof=1) == pytest.approx(se_slope, rel=0.06)
    assert np.std(offsets, ddof=1) == pytest.approx(se_offset, rel=0.06)
    # unbiased: mean within 4 standard errors of the mean
    assert abs(np.mean(slopes) - SLOPE) < 4 * se_slope / math.sqrt(n)
    assert abs(np.mean(offsets) - OFFSET) < 4 * se_offset / math.sqrt(n)
    # and the size of the spread is what a technician would expect: ~0.03 % slope
    assert 0.005 < se_slope < 0.1


@pytest.mark.parametrize(
    ("points", "words"),
    [
        ([], "No calibration points"),
        ([(6.865, 10.0, 25.0), (6.865, 12.0, 25.0)], "same pH"),
        ([(6.865, 10.0, 25.0), (7.0, 2.0, 25.0)], "span only"),
        ([(float("nan"), 10.0, 25.0)], "pH value nan is not a number"),
        ([(4.0, float("nan"), 25.0), (7.0, 0.0, 25.0)], "mV value nan"),
        ([(4.0, 170.0, float("inf")), (7.0, 0.0, 25.0)], "temperature value inf"),
        ([(4.0, 170.0, 250.0), (7.0, 0.0, 25.0)], "check the temperature probe"),
        ([(4.0, -170.0, 25.0), (7.0, 0.0, 25.0)], "swapped"),
        ([(4.0, 170.0)], "must be (buffer pH, mV, temperature"),
    ],
)
def test_unusable_points_refused(points: list, words: str) -> None:
    with pytest.raises(CalibrationError) as info:
        fit_calibration(points)
    assert words in str(info.value)


def test_numpy_scalars_accepted() -> None:
    pts = [(np.float64(p.ph), np.float32(p.mv), np.int64(round(p.temp_c))) for p in _points(
        [("phthalate_0.05", 25.0), ("borax_0.01", 25.0)])]
    cal = fit_calibration(pts)
    assert cal.slope_pct == pytest.approx(SLOPE, abs=0.01)
