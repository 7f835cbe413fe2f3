"""Operator commands while ``probeflow run`` is running: maintenance, ack, shelve, unshelve.

The mV of a pH above the band limit comes from the config's inline calibration of
tank-a through probeflow.calibration.Calibration.to_mv (no numbers typed here).
"""

from __future__ import annotations

import json
import time

from probeflow.calibration import Calibration

from .conftest import wait_for

INLINE_A = Calibration(4.0, 97.0, 7.0)   # tank-a's inline calibration in the test config
ALARM = "tank-ph/tank-a/high"


def tank_a(ph: float, count: int, start: float | None = None) -> list[dict]:
    t = time.time() if start is None else start
    mv = float(INLINE_A.to_mv(ph, 25.0))
    return [{"probe": "tank-a", "ts": t + 0.01 * i, "mv": mv, "temp_c": 25.0} for i in range(count)]


def events_of(site, alarm_id: str = ALARM) -> list[str]:
    return [a["event"] for a in site.alerts(alarm_id)]


def test_maintenance_started_while_running_tags_readings_and_suppresses_alarms(site, service_of):
    svc = service_of(site)
    svc.send(tank_a(7.0, 5))
    wait_for("normal readings", lambda: len(site.readings("tank-a")) == 5)
    started = site.cli("maintenance", "start", "--config", str(site.config), "--probe", "tank-a")
    assert started.returncode == 0, started.stderr
    wait_for("the service to see the maintenance", lambda: "maintenance_started" in svc.log())

    svc.send(tank_a(9.0, 5))
    wait_for("readings in maintenance", lambda: len(site.readings("tank-a")) == 10)
    qualities = [r[5] for r in site.readings("tank-a")]
    assert qualities == ["good"] * 5 + ["maintenance"] * 5
    assert "raise" not in events_of(site)

    stopped = site.cli("maintenance", "stop", "--config", str(site.config), "--probe", "tank-a")
    assert stopped.returncode == 0, stopped.stderr
    wait_for("the service to see the end of maintenance", lambda: "maintenance_ended" in svc.log())
    svc.send(tank_a(9.0, 3))
    wait_for("the alarm once back in service", lambda: "raise" in events_of(site))
    assert [r[5] for r in site.readings("tank-a")][-3:] == ["good"] * 3
    assert svc.stop() == 0


def test_ack_shelve_unshelve_while_running_go_through_the_service(site, service_of):
    svc = service_of(site)
    svc.send(tank_a(9.0, 3))
    wait_for("the raised alarm", lambda: "raise" in events_of(site))

    listed = site.cli("alarms", "--config", str(site.config), "--json")
    assert listed.returncode == 0, listed.stderr
    assert {r["alarm_id"]: r["state"] for r in json.loads(listed.stdout)}[ALARM] == "unack_active"

    ack = site.cli("ack", ALARM, "--config", str(site.config), "--who", "night-shift")
    assert ack.returncode == 0, ack.stdout + ack.stderr
    assert "ok: ack_active" in ack.stdout
    last = site.alerts(ALARM)[-1]
    assert (last["event"], last["state"]) == ("ack", "ack_active")
    again = site.cli("ack", ALARM, "--config", str(site.config))
    assert again.returncode == 1 and "refused" in again.stdout   # already acknowledged

    shelve = site.cli("alarms", "--config", str(site.config), "--shelve", ALARM, "--minutes", "30")
    assert shelve.returncode == 0, shelve.stdout + shelve.stderr
    assert (site.alerts(ALARM)[-1]["event"], site.alerts(ALARM)[-1]["state"]) == ("shelve", "shelved")
    listed = json.loads(site.cli("alarms", "--config", str(site.config), "--json").stdout)
    assert {r["alarm_id"]: r["state"] for r in listed}[ALARM] == "shelved"

    unshelve = site.cli("alarms", "--config", str(site.config), "--unshelve", ALARM)
    assert unshelve.returncode == 0, unshelve.stdout + unshelve.stderr
    last = site.alerts(ALARM)[-1]
    assert (last["event"], last["state"]) == ("unshelve", "unack_active")  # still above the limit

    unknown = site.cli("ack", "tank-ph/tank-zz/high", "--config", str(site.config))
    assert unknown.returncode == 1 and "refused" in unknown.stdout
    done = site.query("SELECT command, who, result FROM alarm_commands ORDER BY id")
    assert [d[0] for d in done] == ["ack", "ack", "shelve", "unshelve", "ack"]
    assert done[0][1] == "night-shift"
    assert all(d[2] is not None for d in done)
    assert svc.stop() == 0
    state = json.loads((site.dir / "state.json").read_text())
    saved = {r["rule"] + "/" + r["probe"] + "/" + r["limit"]: r for r in state["alarms"]["records"]}
    assert saved[ALARM]["active"] is True and saved[ALARM]["unacked"] is True
