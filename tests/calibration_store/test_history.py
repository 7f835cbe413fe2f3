"""Calibration history trend, slope-limit forecast, and calibration due."""

from __future__ import annotations

import json

import numpy as np
import pytest

from probeflow.calibration.acceptance import Verdict
from probeflow.calibration.due import overdue_probes
from probeflow.calibration.history import (
    SECONDS_PER_MONTH,
    calibration_trend,
    forecast_slope_limit_date,
)
from probeflow.calibration.model import Calibration
from probeflow.calibration.store import CalibrationStore
from probeflow.config import load_config

T0 = 1_750_000_000.0
DAY = 86400.0


def synthetic_history(n: int = 8, slope0: float = 99.0, per_month: float = -0.5,
                      offset0: float = 1.0, offset_per_month: float = 0.8):
    """One calibration every 30 days, slope and offset moving linearly (invented electrode)."""
    t = T0 + np.arange(n) * 30 * DAY
    months = (t - T0) / SECONDS_PER_MONTH
    return [(float(a), float(offset0 + offset_per_month * m), float(slope0 + per_month * m))
            for a, m in zip(t, months, strict=True)]


def test_trend_recovers_the_linear_rates():
    trend = calibration_trend(synthetic_history())
    assert trend.slope_pct_per_month == pytest.approx(-0.5, abs=1e-9)
    assert trend.offset_mv_per_month == pytest.approx(0.8, abs=1e-9)
    steps = trend.steps
    assert np.isnan(steps[0].slope_change_pct)
    assert steps[1].days_since_previous == pytest.approx(30.0)
    assert steps[1].slope_change_pct == pytest.approx(-0.5 * 30 * DAY / SECONDS_PER_MONTH)


def test_forecast_of_a_falling_slope():
    """99 % falling 0.5 %/month reaches 90 % after 18 months."""
    when = forecast_slope_limit_date(synthetic_history(), 90.0)
    assert when == pytest.approx(T0 + 18.0 * SECONDS_PER_MONTH, rel=0, abs=1.0)


def test_forecast_with_noise_is_close_and_order_free():
    rng = np.random.default_rng(6)
    hist = [(t, o, s + rng.normal(0, 0.05)) for t, o, s in synthetic_history(24)]
    rng.shuffle(hist)
    when = forecast_slope_limit_date(hist, 90.0)
    assert abs(when - (T0 + 18.0 * SECONDS_PER_MONTH)) < 10 * DAY


def test_no_forecast_when_moving_away_or_too_short():
    assert forecast_slope_limit_date(synthetic_history(per_month=+0.2), 90.0) is None
    assert forecast_slope_limit_date(synthetic_history(n=2), 90.0) is None
    # an upper limit approached from below
    rising = synthetic_history(slope0=100.0, per_month=0.5)
    assert forecast_slope_limit_date(rising, 105.0) == pytest.approx(
        T0 + 10.0 * SECONDS_PER_MONTH, abs=1.0)


def test_calibrations_cli_exports_history_and_trend(site):
    with CalibrationStore(site.db) as store:
        for t, off, slope in synthetic_history(6):
            store.record_calibration("basin-ph-1", Calibration(off, slope), Verdict(True), ts=t)
        store.record_calibration("basin-ph-1", Calibration(40.0, 80.0), Verdict(False, ("x",)),
                                 ts=T0 + 200 * DAY)
    res = site.cli("calibrations", "--config", str(site.config), "--probe", "basin-ph-1", "--json")
    assert res.returncode == 0, res.stderr
    doc = json.loads(res.stdout)
    assert len(doc["calibrations"]) == 7
    assert doc["calibrations"][-1]["verdict"] == "rejected"
    assert doc["trend"]["slope_pct_per_month"] == pytest.approx(-0.5, abs=1e-9)
    assert doc["slope_limit_forecast"] == pytest.approx(T0 + 18.0 * SECONDS_PER_MONTH, abs=1.0)
    text = site.cli("calibrations", "--config", str(site.config), "--probe", "basin-ph-1")
    assert "-0.50 %/month" in text.stdout and "rejected" in text.stdout


def test_overdue_probes(site):
    config = load_config(site.config, sections=("stores",))
    probes = config.probes   # basin-ph-1 every 30 days; basin-ph-2 no interval
    with CalibrationStore(site.db) as store:
        assert [o.probe for o in overdue_probes(store, probes, T0)] == ["basin-ph-1"]
        assert overdue_probes(store, probes, T0)[0].due_at is None
        store.record_calibration("basin-ph-1", Calibration(0.0, 99.0), Verdict(True), ts=T0)
        assert overdue_probes(store, probes, T0 + 29 * DAY) == []
        # a grab-sample offset correction does not reset the interval
        store.record_calibration("basin-ph-1", Calibration(1.0, 99.0), Verdict(True),
                                 ts=T0 + 20 * DAY, kind="grab_offset")
        (late,) = overdue_probes(store, probes, T0 + 31 * DAY)
        assert late.days_overdue(T0 + 31 * DAY) == pytest.approx(1.0)
        assert "overdue" in late.message(T0 + 31 * DAY)
