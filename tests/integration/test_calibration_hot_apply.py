"""A calibration recorded while ``probeflow run`` is running applies from its applies_from.

Expected pH values come from probeflow.calibration.Calibration.to_ph of the
calibration in force (the config's inline one, or the store's record), not
from numbers typed here; the buffer mV values are made with Calibration.to_mv
of an invented electrode.
"""

from __future__ import annotations

import json
import time

import pytest

from probeflow.calibration import Calibration
from probeflow.calibration.store import CalibrationStore

from .conftest import wait_for

TEMP_C = 25.0
MVS = (-95.0, -20.0, 40.0, 110.0)


def readings(probe: str, start: float, count: int, step: float = 0.25) -> list[dict]:
    return [{"probe": probe, "ts": start + i * step, "mv": MVS[i % len(MVS)], "temp_c": TEMP_C}
            for i in range(count)]


def calibrate(site, probe: str, electrode: Calibration) -> dict:
    points = [f"--point={ph},{float(electrode.to_mv(ph, TEMP_C)):.4f},{TEMP_C}" for ph in (4.0, 7.0, 10.0)]
    done = site.cli("calibrate", "--config", str(site.config), "--probe", probe, *points,
                    "--yes", "--json", "--who", "test-tech")
    assert done.returncode == 0, done.stdout + done.stderr
    return json.loads(done.stdout)


def test_calibration_recorded_mid_stream_applies_from_its_time(site, service_of):
    svc = service_of(site)
    t0 = time.time() - 60.0
    svc.send(readings("tank-a", t0, 8) + readings("tank-b", t0, 8))
    wait_for("the first readings in SQLite", lambda: len(site.readings()) == 16)

    result_a = calibrate(site, "tank-a", Calibration(12.0, 95.0, 7.0))
    result_b = calibrate(site, "tank-b", Calibration(-8.0, 98.5, 7.0))
    assert result_a["verdict"] == result_b["verdict"] == "accepted"
    with CalibrationStore(site.db) as store:
        rec_a = store.latest_accepted("tank-a")
        rec_b = store.latest_accepted("tank-b")
    assert rec_a is not None and rec_b is not None
    new_a, new_b = rec_a.calibration(), rec_b.calibration()
    assert new_a.slope_pct == pytest.approx(result_a["slope_pct"])
    applies_a, applies_b = rec_a.applies_from, rec_b.applies_from

    # late-arriving readings stamped before applies_from, then readings after it
    before = readings("tank-a", applies_a - 4.0, 8) + readings("tank-b", applies_b - 4.0, 8)
    after_start = max(time.time(), applies_a, applies_b) + 0.5
    after = readings("tank-a", after_start, 8) + readings("tank-b", after_start, 8)
    svc.send(before + after)
    wait_for("all readings in SQLite", lambda: len(site.readings()) == 48)
    assert svc.stop() == 0
    assert f"calibration_id={rec_a.id}" in svc.log() and "applies_from=" in svc.log()

    inline_a = Calibration(4.0, 97.0, 7.0)   # the config's inline calibration of tank-a
    checked = 0
    for probe, ts, mv, temp_c, ph, quality in site.readings():
        applies, new = (applies_a, new_a) if probe == "tank-a" else (applies_b, new_b)
        if ts >= applies:
            assert quality == "good"
            assert ph == pytest.approx(float(new.to_ph(mv, temp_c)), abs=1e-9), (probe, ts)
        elif probe == "tank-a":
            assert quality == "good"
            assert ph == pytest.approx(float(inline_a.to_ph(mv, temp_c)), abs=1e-9), (probe, ts)
        else:  # calibration: store with nothing stored before: ideal electrode, flagged
            assert quality == "uncalibrated"
        checked += 1
    assert checked == 48
    after_rows = [r for r in site.readings() if r[1] >= after_start]
    assert len(after_rows) == 16
