"""Alarms the running service raises itself, through the rule engine's lifecycle:
calibration overdue, grab-sample deviation, calibration-history jump, outbox quota.

Limits are the documented defaults of rules.lab_checks (common practice, no
source); the electrode mV values come from probeflow.calibration.Calibration.to_mv.
"""

from __future__ import annotations

import json
import socket
import time

from probeflow.calibration import Calibration
from probeflow.rules.config import LabChecksConfig

from .conftest import wait_for

INLINE_A = Calibration(4.0, 97.0, 7.0)   # tank-a's inline calibration in the test config
TEMP_C = 25.0


def calibrate(site, probe: str, electrode: Calibration) -> dict:
    points = [f"--point={ph},{float(electrode.to_mv(ph, TEMP_C)):.4f},{TEMP_C}" for ph in (4.0, 7.0, 10.0)]
    done = site.cli("calibrate", "--config", str(site.config), "--probe", probe, *points, "--yes", "--json")
    assert done.returncode == 0, done.stdout + done.stderr
    return json.loads(done.stdout)


def events(site, alarm_id: str) -> list[tuple[str, str]]:
    return [(a["event"], a["state"]) for a in site.alerts(alarm_id)]


def test_overdue_grab_sample_and_calibration_jump_alarms(make_site, service_of):
    site = make_site()
    site.config.write_text(site.config.read_text().replace(
        "  - id: tank-b\n    calibration: store\n",
        "  - id: tank-b\n    calibration: store\n    calibration_due_days: 30\n"))
    svc = service_of(site)
    overdue = "calibration-due/tank-b/overdue"
    wait_for("the overdue alarm at start", lambda: events(site, overdue) == [("raise", "unack_active")])

    calibrate(site, "tank-b", Calibration(1.0, 98.0, 7.0))
    wait_for("the overdue alarm to return", lambda: ("clear", "unack_returned") in events(site, overdue))

    # grab sample: the online value is pH 7.0 (the inline calibration), the lab says more
    lab = LabChecksConfig()
    now = time.time()
    mv = float(INLINE_A.to_mv(7.0, TEMP_C))
    svc.send([{"probe": "tank-a", "ts": now - 5 + i, "mv": mv, "temp_c": TEMP_C} for i in range(5)])
    wait_for("tank-a readings", lambda: len(site.readings("tank-a")) == 5)
    lab_ph = 7.0 + 2.5 * lab.grab_limit_ph
    grab = site.cli("grab", "--config", str(site.config), "--probe", "tank-a", "--lab-ph", f"{lab_ph}",
                    "--at", f"{now - 3}")
    assert grab.returncode == 0, grab.stdout + grab.stderr
    deviation = wait_for("the grab-sample alarm", lambda: site.alerts("grab-sample/tank-a/deviation"))
    assert deviation[0]["event"] == "raise"
    assert abs(deviation[0]["value"] - (7.0 - lab_ph)) < 1e-6

    # two calibrations whose offsets differ by more than the jump limit
    calibrate(site, "tank-a", Calibration(2.0, 98.0, 7.0))
    calibrate(site, "tank-a", Calibration(2.0 + 1.5 * lab.offset_jump_mv, 98.0, 7.0))
    jump = wait_for("the offset-jump alarm", lambda: site.alerts("calibration-history/tank-a/offset_jump"))
    assert jump[0]["event"] == "raise"
    assert abs(jump[0]["value"] - 1.5 * lab.offset_jump_mv) < 0.01
    assert not site.alerts("calibration-history/tank-a/slope_jump")
    assert svc.stop() == 0


def test_outbox_quota_alarm_when_the_time_series_database_is_unreachable(make_site, service_of):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]   # nothing listens here
    site = make_site()
    site.config.write_text(site.config.read_text().replace("stores:\n", (
        f"stores:\n  - type: influx\n    name: tsdb\n    url: http://127.0.0.1:{port}\n"
        "    org: marrow\n    bucket: ph\n    outbox_quota_mb: 0.004\n    on_quota: drop_oldest\n"
        "    quota_warn_fraction: 0.5\n    retry_max_s: 1\n")))
    svc = service_of(site)
    mv = float(INLINE_A.to_mv(7.0, TEMP_C))
    now = time.time()
    svc.send([{"probe": "tank-a", "ts": now + 0.01 * i, "mv": mv, "temp_c": TEMP_C} for i in range(400)])
    quota = wait_for("the outbox-quota alarm", lambda: site.alerts("outbox-quota/tsdb/warn"))
    assert (quota[0]["event"], quota[0]["state"]) == ("raise", "unack_active")
    assert quota[0]["value"] >= 0.5
    assert len(site.readings("tank-a")) == 400   # the local record is complete
    assert svc.stop() == 0
