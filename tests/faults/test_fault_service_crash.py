"""Scenario 3: the service (``probeflow run``) is killed with SIGKILL three times and restarted.

What a crash may leave behind: messages received but not yet committed (not
acked, so the broker redelivers them to the resumed session), messages
committed but whose ack never left (redelivered; SQLite keeps one row per
(probe, ts)), points committed to the outbox but not yet forwarded (sent by
the next run).  Expected: exactly N distinct readings in SQLite and in
victoria-metrics, none twice.
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

pytestmark = [pytest.mark.slow, pytest.mark.services]

N = 3000
RATE = 200.0            # readings per second: the stream lasts 15 s
KILLS_AT_S = (3.0, 7.0, 11.0)


def test_service_killed_three_times_loses_and_duplicates_nothing(tmp_path, mosquitto, victoria, services):
    db = tmp_path / "readings.sqlite"
    config = write_config(
        tmp_path / "probeflow.yaml",
        collectors=[mqtt_collector(mosquitto.port)],
        sqlite_path=db,
        influx={"url": victoria.url, "outbox_path": str(tmp_path / "outbox.sqlite")},
    )
    service = ServiceProcess(config, tmp_path / "service.log")
    services.append(service)
    service.start()
    publisher = AtLeastOncePublisher(mosquitto.port, "kestrel-transmitter-3")
    publisher.start()
    handshake(publisher, db)

    stream = Stream(N)
    stored_at_crash: list[int] = []

    def crash_service() -> None:
        stored = sqlite_counts(db)[1]   # just before the kill: nothing delays the restart
        service.kill()
        stored_at_crash.append(stored)
        time.sleep(0.3)
        service.start()

    faults = Schedule([(at, crash_service) for at in KILLS_AT_S])
    faults.start()
    publish_stream(publisher, stream, RATE, faults=faults)
    faults.join()
    publisher.stop()

    wait_for_count(lambda: sqlite_counts(db)[1], N, 60, "readings in SQLite")
    wait_for_count(lambda: victoria_counts(victoria).distinct, N, 60, "readings in victoria-metrics")

    assert service.starts == 4
    assert len(stored_at_crash) == 3 and all(0 < c < N for c in stored_at_crash), stored_at_crash
    assert_every_reading_once(db, victoria, stream, N)
    assert "mqtt_session_lost" not in service.log_text()
    assert service.stop() == 0, service.log_tail()
