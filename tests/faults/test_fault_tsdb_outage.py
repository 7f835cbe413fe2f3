"""Scenario 2: the time-series database is down for 30 s in the middle of the stream.

Readings keep arriving over MQTT and are committed to SQLite (and acknowledged)
while victoria-metrics is down; the influx store keeps them in its durable
outbox and forwards them when the server is back.  Expected: exactly N
distinct readings in SQLite and in victoria-metrics, none twice.

victoria-metrics is taken down with SIGTERM: 1.79 loses its own last second
of accepted points on SIGKILL (even after /internal/force_flush), which
would be the database's loss, not probeflow's.
"""

from __future__ import annotations

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
    scrape_metrics,
    sqlite_counts,
    victoria_counts,
    wait_for_count,
    write_config,
)
from servers import free_port

pytestmark = [pytest.mark.slow, pytest.mark.services]

N = 4000
RATE = 100.0          # readings per second: the stream lasts 40 s
OUTAGE_START_S = 5.0
OUTAGE_S = 30.0       # as the issue asks


def _outbox_lines(port: int) -> float:
    total = 0.0
    for line in scrape_metrics(port).splitlines():
        if line.startswith("probeflow_outbox_lines{"):
            total += float(line.split()[-1])
    return total


def test_tsdb_down_30_s_loses_and_duplicates_nothing(tmp_path, mosquitto, victoria, services):
    db = tmp_path / "readings.sqlite"
    metrics_port = free_port()
    config = write_config(
        tmp_path / "probeflow.yaml",
        collectors=[mqtt_collector(mosquitto.port)],
        sqlite_path=db,
        influx={"url": victoria.url, "outbox_path": str(tmp_path / "outbox.sqlite")},
        metrics_port=metrics_port,
    )
    service = ServiceProcess(config, tmp_path / "service.log")
    services.append(service)
    service.start()
    publisher = AtLeastOncePublisher(mosquitto.port, "kestrel-transmitter-2")
    publisher.start()
    handshake(publisher, db)

    stream = Stream(N)
    seen_in_outbox: list[float] = []

    def tsdb_down() -> None:
        victoria.stop()

    def outbox_fills() -> None:
        # near the end of the outage the outbox must hold what victoria could not take
        seen_in_outbox.append(_outbox_lines(metrics_port))

    def tsdb_back() -> None:
        victoria.start()

    faults = Schedule([(OUTAGE_START_S, tsdb_down), (OUTAGE_START_S + OUTAGE_S - 2.0, outbox_fills),
                       (OUTAGE_START_S + OUTAGE_S, tsdb_back)])
    faults.start()
    publish_stream(publisher, stream, RATE, faults=faults)
    faults.join()
    publisher.stop()

    wait_for_count(lambda: sqlite_counts(db)[1], N, 60, "readings in SQLite")
    wait_for_count(lambda: victoria_counts(victoria).distinct, N, 90, "readings in victoria-metrics")

    assert seen_in_outbox and seen_in_outbox[0] > 1000, (
        f"the outage did not show in the outbox depth: {seen_in_outbox}")
    assert_every_reading_once(db, victoria, stream, N)
    assert "not taking points" in service.log_text()
    assert service.stop() == 0, service.log_tail()
