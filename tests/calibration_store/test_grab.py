"""Grab samples: interpolated online value, and the one-point offset correction they can apply."""

from __future__ import annotations

import numpy as np
import pytest

from probeflow.batch import Quality
from probeflow.calibration.acceptance import Verdict
from probeflow.calibration.model import Calibration
from probeflow.calibration.store import CalibrationStore
from probeflow.calibration.watch import CalibrationWatcher

PROBE = "basin-ph-1"
T0 = 1_790_000_000.0
TEMP_C = 18.0
C0 = Calibration(3.0, 97.0, 7.0)  # invented electrode in effect before the sample


def _readings(site) -> tuple[np.ndarray, np.ndarray]:
    """pH rising linearly 7.00 -> 7.60 over 600 s, one reading every 10 s, at 18 °C."""
    with CalibrationStore(site.db) as store:
        store.record_calibration(PROBE, C0, Verdict(True), ts=T0 - 3600, applies_from=T0 - 3600)
    ts = T0 + np.arange(0.0, 601.0, 10.0)
    ph = 7.0 + 0.6 * (ts - T0) / 600.0
    mv = np.asarray(C0.to_mv(ph, TEMP_C))
    site.write_readings(PROBE, ts, mv, np.full(ts.size, TEMP_C), ph)
    return ts, mv


def test_lab_value_higher_moves_later_readings_by_the_difference(site):
    _ts, _mv = _readings(site)
    at = T0 + 305.0                       # between the readings at 300 s and 310 s
    online = 7.0 + 0.6 * 305.0 / 600.0    # linear in time, so interpolation is exact
    lab = online + 0.1
    res = site.cli("grab", "--config", str(site.config), "--probe", PROBE, "--lab-ph", f"{lab:.10f}",
                   "--at", str(at), "--lab-temp-c", "21", "--apply", "--json")
    assert res.returncode == 0, res.stderr
    out = res.json()
    assert out["online_ph"] == pytest.approx(online, abs=1e-9)
    assert out["difference"] == pytest.approx(-0.1, abs=1e-9)   # online - lab
    assert out["interpolated"] is True and out["applied"] is True
    with CalibrationStore(site.db) as store:
        new = store.latest_accepted(PROBE)
        assert new.kind == "grab_offset"
        (grab,) = store.grab_samples(PROBE)
    assert grab.applied and grab.lab_temp_c == 21.0 and grab.difference == pytest.approx(-0.1)
    c1 = new.calibration()
    assert c1.slope_pct == C0.slope_pct
    later_mv = np.asarray(C0.to_mv(np.array([6.2, 7.3, 8.9]), TEMP_C))
    moved = np.asarray(c1.to_ph(later_mv, TEMP_C)) - np.asarray(C0.to_ph(later_mv, TEMP_C))
    assert moved == pytest.approx(np.full(3, 0.1), abs=1e-9)
    watcher = CalibrationWatcher(site.db)
    (update,), _ = watcher.poll()
    assert update.id == new.id and update.offset_mv == pytest.approx(c1.offset_mv)
    watcher.close()


def test_rfc3339_time_and_record_only(site):
    _readings(site)
    res = site.cli("grab", "--config", str(site.config), "--probe", PROBE, "--lab-ph", "7.2",
                   "--at", "2026-09-21T16:13:20+02:00", "--json")  # = T0 (epoch 1790000000)
    assert res.returncode == 0, res.stderr
    out = res.json()
    assert out["ts"] == T0 and out["online_ph"] == pytest.approx(7.0, abs=1e-9)
    assert out["interpolated"] is False and out["applied"] is False
    with CalibrationStore(site.db) as store:
        assert store.latest_accepted(PROBE).kind == "buffer"   # nothing applied
        assert store.grab_samples(PROBE)[0].difference == pytest.approx(-0.2, abs=1e-9)


def test_correction_beyond_the_limits_is_rejected(site):
    _readings(site)
    res = site.cli("grab", "--config", str(site.config), "--probe", PROBE, "--lab-ph", "9.5",
                   "--at", str(T0 + 100.0), "--apply", "--json")
    assert res.returncode == 1
    out = res.json()
    assert out["correction"]["verdict"] == "rejected" and out["applied"] is False
    with CalibrationStore(site.db) as store:
        assert store.latest_accepted(PROBE).kind == "buffer"
        assert [r.verdict for r in store.history(PROBE)] == ["accepted", "rejected"]
        assert store.grab_samples(PROBE)[0].applied is False


def test_no_reading_near_the_time(site):
    _readings(site)
    res = site.cli("grab", "--config", str(site.config), "--probe", PROBE, "--lab-ph", "7.0",
                   "--at", str(T0 + 5000.0), "--apply", "--json")
    assert res.returncode == 1
    assert res.json()["online_ph"] is None
    with CalibrationStore(site.db) as store:
        assert len(store.grab_samples(PROBE)) == 1   # the lab value is kept all the same


def test_maintenance_readings_are_not_used(site):
    """Readings flagged maintenance (probe in a buffer) are no online value."""
    ts = T0 + np.arange(0.0, 100.0, 10.0)
    site.write_readings(PROBE, ts, np.zeros(ts.size), np.full(ts.size, 25.0), np.full(ts.size, 4.0),
                        quality=Quality.MAINTENANCE)
    res = site.cli("grab", "--config", str(site.config), "--probe", PROBE, "--lab-ph", "7.0",
                   "--at", str(T0 + 50.0), "--json")
    assert res.json()["online_ph"] is None
