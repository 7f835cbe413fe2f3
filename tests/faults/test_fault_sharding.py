"""Scaling out: two service instances on one broker, sharded by topic (per area).

Each instance subscribes to its own area's topic filter under its own client
id and keeps its own SQLite file and outbox; both write to one time-series
database.  (A shared subscription would spread one probe's readings over both
instances and split its alarm state, so the collector refuses ``$share/``.)
Expected: the two SQLite files hold N distinct readings together and none in
common, each only its own area's probes; victoria-metrics holds N, none twice.
"""

from __future__ import annotations

import pytest
from fault_harness import (
    PROBES,
    AtLeastOncePublisher,
    ServiceProcess,
    Stream,
    expected_ms_keys,
    handshake,
    mqtt_collector,
    paced,
    sqlite_counts,
    sqlite_keys,
    victoria_counts,
    wait_for_count,
    write_config,
)

pytestmark = [pytest.mark.slow, pytest.mark.services]

N = 3000
RATE = 600.0
AREAS = {"north": PROBES[:2], "south": PROBES[2:]}   # invented plant areas
AREA_OF = {probe: area for area, probes in AREAS.items() for probe in probes}


def test_two_instances_with_disjoint_topic_filters_store_every_reading_once(
        tmp_path, mosquitto, victoria, services):
    instances: dict[str, tuple[ServiceProcess, object]] = {}
    for area in AREAS:
        db = tmp_path / f"{area}.sqlite"
        config = write_config(
            tmp_path / f"{area}.yaml",
            collectors=[mqtt_collector(mosquitto.port, client_id=f"kestrel-logger-{area}",
                                       topic=f"kestrel/{area}/+/reading")],
            sqlite_path=db,
            influx={"url": victoria.url, "outbox_path": str(tmp_path / f"{area}-outbox.sqlite")},
        )
        proc = ServiceProcess(config, tmp_path / f"{area}.log")
        services.append(proc)
        proc.start()
        instances[area] = (proc, db)

    publisher = AtLeastOncePublisher(mosquitto.port, "kestrel-gateway")
    publisher.start()
    for area, (_proc, db) in instances.items():
        handshake(publisher, db, prefix=f"kestrel/{area}")

    stream = Stream(N)
    for i in paced(range(N), RATE):
        probe = stream.probe(i)
        publisher.publish(i, f"kestrel/{AREA_OF[probe]}/{probe}/reading", stream.payload(i))
    publisher.settle()
    publisher.stop()

    def stored_total() -> int:
        return sum(sqlite_counts(db)[1] for _p, db in instances.values())

    wait_for_count(stored_total, N, 60, "readings in the two SQLite files")
    wait_for_count(lambda: victoria_counts(victoria).distinct, N, 60, "readings in victoria-metrics")

    keys = {area: sqlite_keys(db) for area, (_p, db) in instances.items()}
    for area, rows in keys.items():
        assert len(rows) == len(set(rows)), f"{area}: a reading stored twice"
        assert {p for p, _t in rows} == set(AREAS[area]), f"{area} stored another area's probes"
    north, south = (set(keys[a]) for a in AREAS)
    assert north.isdisjoint(south)
    assert north | south == {(stream.probe(i), stream.ts(i)) for i in range(N)}
    counts = victoria_counts(victoria)
    assert counts.duplicated_series == {}
    assert (counts.samples, counts.distinct) == (N, N)
    assert counts.keys == expected_ms_keys(stream, range(N))
    for proc, _db in instances.values():
        assert proc.stop() == 0, proc.log_tail()
