"""Scenario 5: the disk outbox of the time-series store reaches its quota.

victoria-metrics is down while N readings arrive over MQTT, and the influx
store's outbox has a tiny quota (``outbox_quota_mb: 0.02``, about 130 points).

* ``on_quota: drop_oldest`` - the user allows loss in the time-series
  database (never in SQLite): N_sqlite == N, and N_victoria + dropped == N,
  where ``dropped`` is what the service reports (metric
  ``probeflow_outbox_dropped_lines_total`` and a log line); the points kept
  are the newest ones; an alert about the outbox is raised (alerts table).
* ``on_quota: block`` - nothing is lost: the pipeline waits (acks are held,
  the broker keeps the rest) until the database takes points again, then N
  readings land in SQLite and in victoria-metrics, none twice.  The store
  queue is kept small (``store_queue_batches: 8``) so a blocked store fills
  it during the outage.
"""

from __future__ import annotations

import sqlite3

import pytest
from fault_harness import (
    SENTINEL_PROBE,
    AtLeastOncePublisher,
    ServiceProcess,
    Stream,
    assert_every_reading_once,
    expected_ms_keys,
    handshake,
    mqtt_collector,
    publish_stream,
    scrape_metrics,
    sqlite_counts,
    sqlite_keys,
    victoria_counts,
    wait_for_count,
    wait_until,
    write_config,
)
from servers import free_port

pytestmark = [pytest.mark.slow, pytest.mark.services]

N = 2000
RATE = 400.0             # readings per second: the stream lasts 5 s
QUOTA_MB = 0.02


def _metric_sum(port: int, name: str) -> float:
    total = 0.0
    for line in scrape_metrics(port).splitlines():
        if line.startswith(name + "{"):
            total += float(line.split()[-1])
    return total


def _alerts(db) -> list[tuple[str, str, str]]:
    con = sqlite3.connect(db)
    try:
        return con.execute("SELECT rule, event, message FROM alerts").fetchall()
    finally:
        con.close()


def _rig(tmp_path, mosquitto, victoria, services, on_quota: str, service: dict | None = None):
    db = tmp_path / "readings.sqlite"
    metrics_port = free_port()
    config = write_config(
        tmp_path / "probeflow.yaml",
        collectors=[mqtt_collector(mosquitto.port)],
        sqlite_path=db,
        influx={"url": victoria.url, "outbox_path": str(tmp_path / "outbox.sqlite"),
                "outbox_quota_mb": QUOTA_MB, "on_quota": on_quota, "batch_lines": 50},
        metrics_port=metrics_port,
        service=service,
    )
    proc = ServiceProcess(config, tmp_path / "service.log")
    services.append(proc)
    proc.start()
    publisher = AtLeastOncePublisher(mosquitto.port, f"kestrel-transmitter-5-{on_quota}")
    publisher.start()
    handshake(publisher, db)
    # every handshake point reached victoria too, so what is dropped below is the stream's
    def handshake_forwarded() -> bool:
        stored = len(sqlite_keys(db, (SENTINEL_PROBE,)))
        return (victoria_counts(victoria, (SENTINEL_PROBE,)).distinct == stored
                and _metric_sum(metrics_port, "probeflow_outbox_lines") == 0)

    wait_until(handshake_forwarded, 30, "the handshake points to reach victoria-metrics")
    return db, metrics_port, proc, publisher


def test_drop_oldest_counts_and_reports_every_lost_point(tmp_path, mosquitto, victoria, services):
    db, metrics_port, service, publisher = _rig(tmp_path, mosquitto, victoria, services, "drop_oldest")
    sentinels_forwarded = victoria_counts(victoria, (SENTINEL_PROBE,)).distinct
    victoria.stop()
    stream = Stream(N)
    publish_stream(publisher, stream, RATE)
    publisher.stop()
    wait_for_count(lambda: sqlite_counts(db)[1], N, 60, "readings in SQLite")
    # points that are not the stream's and joined the outbox while victoria was down: a late
    # handshake reading, and the alert events about the outbox itself (alerts go to both stores)
    late = sqlite_counts(db, (SENTINEL_PROBE,))[1] - sentinels_forwarded

    def queued_or_dropped() -> int:
        return int(_metric_sum(metrics_port, "probeflow_outbox_lines")
                   + _metric_sum(metrics_port, "probeflow_outbox_dropped_lines_total"))

    # every point written is now either in the outbox or counted as dropped, none vanished
    wait_until(lambda: queued_or_dropped() == N + late + len(_alerts(db)), 30,
               "every point to be queued or counted as dropped")
    extra = late + len(_alerts(db))
    dropped = int(_metric_sum(metrics_port, "probeflow_outbox_dropped_lines_total"))
    victoria.start()
    wait_until(lambda: _metric_sum(metrics_port, "probeflow_outbox_lines") == 0, 60,
               "the outbox to drain")
    counts = victoria_counts(victoria)
    lost = N - counts.distinct                     # stream readings missing in victoria

    rows, distinct = sqlite_counts(db)
    assert (rows, distinct) == (N, N)                     # SQLite loses nothing
    assert 0 < lost < N
    assert lost <= dropped <= lost + extra, (lost, dropped, extra)   # every loss is counted
    assert counts.duplicated_series == {}
    assert counts.samples == counts.distinct
    assert counts.keys == expected_ms_keys(stream, range(lost, N))     # the oldest went first
    log = service.log_text()
    assert "reached its quota" in log and "drop_oldest" in log, "the loss was not logged"
    assert "outbox_quota" in log
    assert any(event == "raise" and "outbox" in f"{rule} {message}"
               for rule, event, message in _alerts(db)), "no alert for the full outbox"
    assert service.stop() == 0, service.log_tail()


def test_block_loses_nothing_once_the_database_returns(tmp_path, mosquitto, victoria, services):
    db, metrics_port, service, publisher = _rig(tmp_path, mosquitto, victoria, services, "block",
                                                service={"store_queue_batches": 8})
    victoria.stop()
    stream = Stream(N)
    publish_stream(publisher, stream, RATE)
    publisher.stop()
    # the outbox is full and holds the pipeline; nothing is dropped meanwhile
    wait_until(lambda: _metric_sum(metrics_port, "probeflow_outbox_quota_fraction") > 0.5, 30,
               "the outbox to fill")
    victoria.start()
    wait_for_count(lambda: sqlite_counts(db)[1], N, 90, "readings in SQLite")
    wait_for_count(lambda: victoria_counts(victoria).distinct, N, 90, "readings in victoria-metrics")

    assert_every_reading_once(db, victoria, stream, N)
    assert _metric_sum(metrics_port, "probeflow_outbox_dropped_lines_total") == 0
    assert _metric_sum(metrics_port, "probeflow_store_lost_rows_total") == 0
    assert service.stop() == 0, service.log_tail()
