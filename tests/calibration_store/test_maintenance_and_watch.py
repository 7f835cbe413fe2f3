"""Maintenance periods (start, stop, expiry) and the watcher the running service polls."""

from __future__ import annotations

import time

import pytest

from probeflow.calibration.acceptance import Verdict
from probeflow.calibration.model import Calibration
from probeflow.calibration.store import CalibrationStore
from probeflow.calibration.watch import CalibrationWatcher
from probeflow.errors import CalibrationError

PROBE = "basin-ph-1"


def test_cli_start_with_expiry_then_stop(site):
    res = site.cli("maintenance", "start", "--config", str(site.config), "--probe", PROBE,
                   "--for", "30m", "--reason", "cleaning", "--json")
    assert res.returncode == 0, res.stderr
    started = res.json()
    assert started["until"] - started["start"] == pytest.approx(1800.0)
    status = site.cli("maintenance", "status", "--config", str(site.config), "--json").json()
    assert status["maintenance"] == {"basin-ph-1": True, "basin-ph-2": False}
    with CalibrationStore(site.db) as store:
        # the period ends by itself at its expiry time
        assert store.maintenance_state(started["until"] - 1.0)[PROBE] is True
        assert store.maintenance_state(started["until"] + 1.0)[PROBE] is False
    stop = site.cli("maintenance", "stop", "--config", str(site.config), "--probe", PROBE, "--json")
    assert stop.json()["ended_periods"] == 1
    status = site.cli("maintenance", "status", "--config", str(site.config), "--json").json()
    assert status["maintenance"][PROBE] is False
    again = site.cli("maintenance", "stop", "--config", str(site.config), "--probe", PROBE)
    assert again.returncode == 0 and "was not in maintenance" in again.stdout


def test_watcher_reports_maintenance_on_then_off_at_expiry(site):
    now = [1_800_000_000.0]
    with CalibrationStore(site.db) as store:
        store.start_maintenance(PROBE, now[0], until=now[0] + 600.0, reason="probe swap")
    watcher = CalibrationWatcher(site.db, clock=lambda: now[0])
    assert watcher.poll()[1] == {PROBE: True}
    now[0] += 599.0
    assert watcher.poll()[1] == {PROBE: True}
    now[0] += 2.0
    assert watcher.poll()[1] == {PROBE: False}
    with CalibrationStore(site.db) as store:
        store.start_maintenance(PROBE, now[0])
        assert watcher.poll()[1] == {PROBE: True}
        store.stop_maintenance(PROBE, now[0] + 1)
    assert watcher.poll()[1] == {PROBE: False}
    watcher.close()


def test_a_second_start_replaces_the_open_period(site):
    with CalibrationStore(site.db) as store:
        store.start_maintenance(PROBE, 100.0, until=200.0)
        store.start_maintenance(PROBE, 150.0)
        periods = store.maintenance_periods(PROBE)
        assert [p.ended for p in periods] == [150.0, None]
        assert store.maintenance_state(1e12)[PROBE] is True
        with pytest.raises(CalibrationError):
            store.start_maintenance(PROBE, 300.0, until=250.0)


def test_watcher_returns_accepted_calibrations_once_with_applies_from(site):
    ok = Verdict(True)
    with CalibrationStore(site.db) as store:
        store.record_calibration(PROBE, Calibration(1.0, 97.0), ok, ts=100.0, applies_from=110.0)
        store.record_calibration(PROBE, Calibration(2.0, 96.0), ok, ts=200.0, applies_from=210.0)
        store.record_calibration("basin-ph-2", Calibration(-4.0, 99.0), Verdict(False, ("bad",)),
                                 ts=220.0)
    watcher = CalibrationWatcher(site.db)
    first, _ = watcher.poll()  # the first poll: the latest accepted one per probe
    assert [(u.probe, u.offset_mv, u.applies_from) for u in first] == [(PROBE, 2.0, 210.0)]
    assert watcher.poll()[0] == []
    with CalibrationStore(site.db) as store:
        store.record_calibration(PROBE, Calibration(3.0, 95.0), Verdict(False, ("no",)), ts=300.0)
        new_id = store.record_calibration(PROBE, Calibration(3.5, 95.5), ok, ts=310.0,
                                          applies_from=315.0, kind="manual")
    updates, _ = watcher.poll()
    assert [(u.id, u.offset_mv, u.slope_pct, u.applies_from, u.kind) for u in updates] == [
        (new_id, 3.5, 95.5, 315.0, "manual")]
    assert watcher.poll()[0] == []
    watcher.close()


def test_watcher_converts_isothermal_calibrations_to_offset_at_reference(site):
    cal = Calibration.isothermal(6.5, 12.0, 98.0)
    with CalibrationStore(site.db) as store:
        store.record_calibration(PROBE, cal, Verdict(True), ts=1.0)
        back = store.latest_accepted(PROBE).calibration()
    assert back.to_ph(-40.0, 37.0) == pytest.approx(cal.to_ph(-40.0, 37.0), abs=1e-12)
    watcher = CalibrationWatcher(site.db)
    (u,), _ = watcher.poll()
    assert u.offset_mv == pytest.approx(cal.offset_mv)
    watcher.close()


def test_interrupted_calibration_leaves_maintenance(site):
    """Typed readings, input ends half-way: the probe must not stay in maintenance."""
    res = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE, "--source", "typed",
                   "--buffer-set", "primary_4_7_9", input_text="171.0,25\n\n")
    assert res.returncode == 1
    assert "input ended" in res.stderr
    with CalibrationStore(site.db) as store:
        periods = store.maintenance_periods(PROBE)
        assert len(periods) == 1 and periods[0].reason == "calibration"
        assert periods[0].ended is not None
        assert store.maintenance_state(time.time(), [PROBE]) == {PROBE: False}
        assert store.history(PROBE) == []


def test_typed_interactive_calibration(site):
    """The interactive form with typed readings through a pipe: recognised buffers, accept."""
    answers = "\n".join([  # noqa: FLY002 - one answer per line, as typed
        "171.2,25", "",   # reading, accept the recognised buffer
        "y",              # another point
        "-126.0,25", "",  # reading, recognised borax
        "n",              # no more points
        "y",              # accept
        "K. Idowu",       # name
    ]) + "\n"
    res = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE, "--source", "typed",
                   "--buffer-set", "primary_4_7_9", "--json", input_text=answers)
    assert res.returncode == 0, res.stdout + res.stderr
    with CalibrationStore(site.db) as store:
        rec = store.latest_accepted(PROBE)
        assert [p.point.buffer for p in rec.points] == ["phthalate_0.05", "borax_0.01"]
        assert rec.who == "K. Idowu"
        (period,) = store.maintenance_periods(PROBE)
        assert period.ended is not None and period.ended <= rec.ts + 5
