"""Grab-sample and calibration-history checks (pure functions; worked examples by hand)."""

from __future__ import annotations

import pytest

from probeflow.errors import ProbeflowError
from probeflow.rules.lab_checks import (
    calibration_jumps,
    grab_sample_findings,
    grab_sample_trend_per_day,
    slope_limit_forecast,
)

DAY = 86400.0


def test_grab_sample_differences_against_a_limit():
    samples = [(2 * DAY, 7.10, 7.05), (0.0, 7.00, 7.02), (DAY, 6.90, 7.15)]
    found = grab_sample_findings(samples, limit_ph=0.2)
    assert [f.ts for f in found] == [0.0, DAY, 2 * DAY]        # sorted by time
    assert [round(f.difference, 6) for f in found] == [0.02, 0.25, -0.05]
    assert [f.exceeds for f in found] == [False, True, False]
    with pytest.raises(ProbeflowError):
        grab_sample_findings(samples, limit_ph=0)


def test_grab_sample_trend():
    # online - lab grows 0.01 pH per day, with one wild sample that Theil-Sen ignores
    samples = [(k * DAY, 7.0, 7.0 + 0.01 * k) for k in range(9)] + [(4.5 * DAY, 7.0, 9.0)]
    assert grab_sample_trend_per_day(samples) == pytest.approx(0.01, rel=1e-9)


def test_calibration_jumps():
    hist = [(0, -3.0, 99.0), (30 * DAY, -4.0, 98.5), (60 * DAY, 6.0, 98.0), (90 * DAY, 6.5, 95.0)]
    jumps = calibration_jumps(hist, offset_limit_mv=5.0, slope_limit_pct=2.0)
    assert [(j.ts_before / DAY, j.offset_change_mv, j.slope_change_pct, j.offset_exceeds, j.slope_exceeds)
            for j in jumps] == [(30.0, 10.0, -0.5, True, False), (60.0, 0.5, -3.0, False, True)]


def test_slope_forecast_on_a_straight_decline():
    # 99 -> 98 -> 97 % at 0, 30, 60 days: 1 % per 30 days reaches 90 % at day 270
    hist = [(0.0, 0.0, 99.0), (30 * DAY, 0.0, 98.0), (60 * DAY, 0.0, 97.0)]
    assert slope_limit_forecast(hist, acceptance_pct=90.0) == pytest.approx(270 * DAY)
    assert slope_limit_forecast(hist[:2], acceptance_pct=90.0) is None           # too few
    assert slope_limit_forecast([(0, 0, 95), (DAY, 0, 96), (2 * DAY, 0, 97)], 90.0) is None  # rising
