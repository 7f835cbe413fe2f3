"""The small parts of the wiring, in-process: external alarms through the engine's
lifecycle, alarm command parsing and expiry, per-probe acceptance limits, the
choice of the tick clock.  ISA-18.2 state names as in probeflow.rules.lifecycle."""

from __future__ import annotations

import math
import sqlite3
import time

import numpy as np
import pytest

from probeflow.batch import ProcessedBatch
from probeflow.calibration.acceptance import AcceptanceLimits
from probeflow.calibration.site import load_limits
from probeflow.config import load_config
from probeflow.config.models import ProbeConfig
from probeflow.errors import ConfigError, ProbeflowError
from probeflow.events import AlertEvent
from probeflow.rules.engine import Engine
from probeflow.service.alarm_commands import (
    COMMAND_EXPIRY_S,
    CommandInbox,
    alarms_from_store,
    apply_command,
    command_from_json,
    queue_command,
)
from probeflow.service.pipeline import build_service
from probeflow.stores.sqlite import SqliteStore, SqliteStoreConfig


def test_external_conditions_follow_the_alarm_lifecycle():
    engine = Engine([])
    assert engine.external("outbox-quota", "tsdb", "warn", False, 10.0) is None  # nothing to clear
    raised = engine.external("outbox-quota", "tsdb", "warn", True, 11.0, value=0.9, threshold=0.8)
    assert raised is not None and (raised.event, raised.state) == ("raise", "unack_active")
    assert engine.external("outbox-quota", "tsdb", "warn", True, 12.0) is None   # no change
    assert engine.ack("outbox-quota/tsdb/warn", 13.0).state == "ack_active"
    cleared = engine.external("outbox-quota", "tsdb", "warn", False, 14.0)
    assert cleared is not None and (cleared.event, cleared.state) == ("clear", "normal")
    # survives a restart: an active condition reported again raises nothing new
    engine.external("calibration-due", "tank-b", "overdue", True, 15.0)
    again = Engine([])
    again.restore(engine.state())
    assert again.external("calibration-due", "tank-b", "overdue", True, 16.0) is None


def test_external_alarm_of_a_probe_in_maintenance_is_suppressed():
    engine = Engine([])
    engine.set_maintenance("tank-a", True, 1.0)
    assert engine.external("grab-sample", "tank-a", "deviation", True, 2.0) is None
    back = engine.set_maintenance("tank-a", False, 3.0)
    assert [(e.event, e.state) for e in back] == [("unsuppress", "unack_active")]


@pytest.mark.parametrize("payload, problem", [
    (b"{not json", "not JSON"),
    (b'["ack"]', "JSON object"),
    (b'{"command": "silence", "alarm_id": "a/b/c"}', "unknown alarm command"),
    (b'{"command": "ack"}', "alarm id"),
    (b'{"command": "shelve", "alarm_id": "a/b/c"}', "minutes"),
    (b'{"command": "shelve", "alarm_id": "a/b/c", "minutes": "10"}', "number"),
    (b'{"command": "shelve", "alarm_id": "a/b/c", "minutes": 1e9}', "minutes"),
    (b'{"command": "ack", "alarm_id": "a/b/c", "force": true}', "unknown key"),
])
def test_bad_command_payloads_are_refused_with_the_reason(payload, problem):
    with pytest.raises(ProbeflowError, match=problem):
        command_from_json(payload)


def test_commands_queued_while_the_service_was_down_expire(tmp_path):
    db = tmp_path / "site.sqlite"
    SqliteStore(SqliteStoreConfig(path=str(db))).close()
    now = time.time()
    old = queue_command(db, "ack", "tank-ph/tank-a/high", who="day-shift", now=now - COMMAND_EXPIRY_S - 5)
    fresh = queue_command(db, "shelve", "tank-ph/tank-a/high", minutes=15, who="day-shift", now=now)
    inbox = CommandInbox(db)
    taken = inbox.take(now)
    assert [c.id for c in taken] == [fresh] and taken[0].minutes == 15
    engine = Engine([])
    events, result = apply_command(engine, taken[0], now)
    assert events == [] and result.startswith("refused: no alarm")
    inbox.finish(fresh, result)
    inbox.close()
    rows = dict(sqlite3.connect(db).execute("SELECT id, result FROM alarm_commands").fetchall())
    assert rows[old].startswith("expired") and rows[fresh].startswith("refused")


def test_alarm_list_is_the_latest_event_per_alarm(tmp_path):
    db = tmp_path / "site.sqlite"
    store = SqliteStore(SqliteStoreConfig(path=str(db)))
    engine = Engine([])
    evs = [engine.external("data-gap", "broker", "session", True, 1.0),
           engine.external("data-gap", "broker", "session", False, 1.0),
           engine.external("calibration-due", "tank-b", "overdue", True, 2.0)]
    evs.append(engine.ack("calibration-due/tank-b/overdue", 3.0))
    evs.append(engine.ack("data-gap/broker/session", 4.0))
    f = np.empty(0)
    empty = ProcessedBatch(np.empty(0, dtype=object), f, f, f, f, f, f, np.empty(0, dtype=np.uint8))
    store.write(empty, [e for e in evs if isinstance(e, AlertEvent)])
    store.close()
    listed = alarms_from_store(db)
    assert [(r["alarm_id"], r["state"]) for r in listed] == [("calibration-due/tank-b/overdue", "ack_active")]
    everything = alarms_from_store(db, include_normal=True)
    assert {r["alarm_id"]: r["state"] for r in everything}["data-gap/broker/session"] == "normal"


def test_acceptance_limits_from_the_probe_config_and_the_limits_file(tmp_path):
    probe = ProbeConfig.model_validate({"id": "tank-a", "acceptance": {"slope_min_pct": 93,
                                                                       "offset_max_mv": 20}})
    limits = load_limits(None, probe)
    defaults = AcceptanceLimits()
    assert (limits.slope_min_pct, limits.offset_max_abs_mv) == (93.0, 20.0)
    assert limits.slope_max_pct == defaults.slope_max_pct
    override = tmp_path / "limits.yaml"
    override.write_text("offset_max_abs_mv: 35\nprobes:\n  tank-a: {slope_min_pct: 91}\n")
    both = load_limits(override, probe)
    assert (both.slope_min_pct, both.offset_max_abs_mv) == (91.0, 35.0)
    assert load_limits(None, "tank-a") == defaults


def test_bad_acceptance_in_the_config_names_the_key(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text("probes:\n  - id: tank-a\n    acceptance: {slope_min_pct: 101, slope_max_pct: 99}\n")
    with pytest.raises(ConfigError) as err:
        load_config(path)
    assert "probes[0].acceptance" in str(err.value) and "slope_min_pct" in str(err.value)


def test_webhook_url_must_be_http(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text("probes:\n  - id: tank-a\nnotify:\n  webhook: {url: ftp://example.net/x}\n")
    with pytest.raises(ConfigError, match="notify.webhook.url"):
        load_config(path)


def _service(tmp_path, collector: str):
    rec = tmp_path / "rec.jsonl"
    rec.write_text('{"probe": "tank-a", "ts": 1748736000, "mv": 0, "temp_c": 20}\n')
    path = tmp_path / "site.yaml"
    path.write_text(f"probes:\n  - id: tank-a\ncollectors:\n{collector.format(rec=rec)}\n")
    return build_service(load_config(path))


@pytest.mark.parametrize("collector, clock", [
    ("  - type: file\n    path: {rec}\n    speed: 0", "data"),
    ("  - type: stdin", "data"),
    ("  - type: mqtt\n    url: mqtt://127.0.0.1:1\n    client_id: marrow\n    topic: a/+", "wall"),
    (("  - type: file\n    path: {rec}\n  - type: mqtt\n    url: mqtt://127.0.0.1:1\n"
      "    client_id: marrow\n    topic: a/+"), "wall"),
])
def test_tick_clock_is_the_recordings_for_replayed_sources_only(tmp_path, collector, clock):
    service = _service(tmp_path, collector)
    try:
        assert service.tick_clock == clock
        if clock == "data":
            assert math.isnan(service.now())   # no reading yet: no time to tick at
    finally:
        service.shutdown()


def test_slope_forecast_alarm_uses_the_probes_acceptance_minimum(tmp_path):
    """Three buffer calibrations 30 days apart, slope 99, 97, 95 %: on a straight line
    (where the Theil-Sen estimate is exact) the slope reaches 94 % 15 days after the
    last one and 90 % 75 days after it; only the first is inside 30 days."""
    from probeflow.calibration import Calibration, Verdict
    from probeflow.calibration.store import CalibrationStore
    from probeflow.convert import Converter
    from probeflow.service.calibration_feed import CalibrationFeed
    from probeflow.service.log import Log

    db = tmp_path / "site.sqlite"
    SqliteStore(SqliteStoreConfig(path=str(db))).close()
    probes = [ProbeConfig.model_validate({"id": "tank-a", "acceptance": {"slope_min_pct": 94}}),
              ProbeConfig.model_validate({"id": "tank-b"})]
    feed = CalibrationFeed(db, probes, Converter(probes), Log(fmt="kv"))
    feed.load()
    day = 86400.0
    t = 1.79e9
    with CalibrationStore(db) as store:
        for probe in ("tank-a", "tank-b"):
            for k, slope in enumerate((99.0, 97.0, 95.0)):
                store.record_calibration(probe, Calibration(3.0, slope, 7.0), Verdict(True),
                                         ts=t - (2 - k) * 30 * day)
    engine = Engine([])
    events = feed.poll(engine, t + 1.0)
    feed.close()
    forecast = [e for e in events if e.limit == "slope_forecast"]
    assert [(e.probe, e.event) for e in forecast] == [("tank-a", "raise")]
    assert forecast[0].value == pytest.approx(15.0 - 1.0 / day, abs=1e-6)
    assert not [e for e in events if e.limit in ("offset_jump", "slope_jump")]


def test_command_topic_without_a_broker_is_a_config_error(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text(f"probes:\n  - id: tank-a\nstores:\n  - type: sqlite\n    path: {tmp_path}/s.sqlite\n"
                    "service:\n  command_topic: marrow/probeflow/commands\n")
    with pytest.raises(ConfigError, match="service.command_broker"):
        build_service(load_config(path), live=True)
    build_service(load_config(path)).shutdown()   # not live (replay): no commands, no error
