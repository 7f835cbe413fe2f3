"""Scenario 1: the MQTT broker is killed (SIGKILL) and restarted three times during the stream.

The publisher is at least once itself (QoS 1, persistent session, every
message kept until the broker acknowledged it and published again
otherwise); probeflow's collector resumes its persistent session and acks
only after the SQLite commit.  Expected: exactly N distinct readings in SQLite
and in victoria-metrics, none twice.

The broker runs with persistence and ``autosave_interval 1`` (tests/servers.py)
plus ``autosave_on_changes true``, which turns the interval into "save after
every queued message": mosquitto acknowledges a QoS 1 PUBLISH before it has
saved it, so with a time-based autosave a crash loses what it accepted in the
last second and had not yet delivered.  That is the broker's setting to make,
documented in the README's reliability section; probeflow cannot recover a
message the broker acknowledged and then forgot.
"""

from __future__ import annotations

import time

import pytest
from fault_harness import (
    AtLeastOncePublisher,
    Schedule,
    ServiceProcess,
    Stream,
    assert_every_reading_once,
    handshake,
    mqtt_collector,
    publish_stream,
    sqlite_counts,
    victoria_counts,
    wait_for_count,
    write_config,
)
from servers import Mosquitto

pytestmark = [pytest.mark.slow, pytest.mark.services]

N = 3000
RATE = 250.0           # readings per second: the stream lasts 12 s
KILLS_AT_S = (2.5, 5.5, 8.5)


@pytest.fixture
def broker(tmp_path):
    server = Mosquitto(tmp_path / "broker", extra_conf="autosave_on_changes true\n")
    server.start()
    yield server
    server.kill()


def test_broker_killed_three_times_loses_and_duplicates_nothing(tmp_path, broker, victoria, services):
    db = tmp_path / "readings.sqlite"
    config = write_config(
        tmp_path / "probeflow.yaml",
        collectors=[mqtt_collector(broker.port)],
        sqlite_path=db,
        influx={"url": victoria.url, "outbox_path": str(tmp_path / "outbox.sqlite")},
    )
    service = ServiceProcess(config, tmp_path / "service.log")
    services.append(service)
    service.start()
    publisher = AtLeastOncePublisher(broker.port, "kestrel-transmitter-1")
    publisher.start()
    handshake(publisher, db)

    stream = Stream(N)
    crashes: list[int] = []

    def crash_broker() -> None:
        # Counted just before the kill (the crash hits mid-stream), so nothing but
        # the pause stands between the kill and the restart.
        stored = sqlite_counts(db)[1]
        broker.kill()
        crashes.append(stored)
        time.sleep(0.5)
        broker.start()

    faults = Schedule([(at, crash_broker) for at in KILLS_AT_S])
    faults.start()
    try:
        publish_stream(publisher, stream, RATE, faults=faults)
    except AssertionError as exc:
        raise AssertionError(f"{exc}\nbroker: {broker.describe()}\nschedule: {faults.log}") from exc
    faults.join()
    publisher.stop()

    wait_for_count(lambda: sqlite_counts(db)[1], N, 60, "readings in SQLite")
    wait_for_count(lambda: victoria_counts(victoria).distinct, N, 60, "readings in victoria-metrics")

    assert len(crashes) == 3 and all(0 < c < N for c in crashes), crashes
    assert_every_reading_once(db, victoria, stream, N)
    log = service.log_text()
    assert log.count("mqtt_connected") >= 4, "the collector did not reconnect after each crash"
    assert "mqtt_session_lost" not in log, "the broker lost the collector's persistent session"
    assert service.stop() == 0, service.log_tail()
