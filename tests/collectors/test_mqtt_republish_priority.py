"""MqttRepublishStore: alert events overtake queued readings; readings go out in groups.

Against a real mosquitto, read back with a persistent paho subscriber.  The
broker is stopped while readings pile up, so what is queued when it comes back
is known exactly (no timing involved).  Values are invented (site "larkmoor",
probes tank-3, tank-4).  Alerts support operators; they are not a safety system.
"""

from __future__ import annotations

import time

import numpy as np
import orjson
import pytest
from collector_harness import Listener, wait_until

from probeflow.batch import ProcessedBatch, Quality
from probeflow.events import AlertEvent
from probeflow.stores.base import StoreContext
from probeflow.stores.mqtt import MqttRepublishStore

T0 = 1764633600.0  # 2025-12-02T00:00:00Z

pytestmark = pytest.mark.services


def processed(probes: list[str], start: int = 0) -> ProcessedBatch:
    n = len(probes)
    idx = np.arange(start, start + n, dtype=np.float64)
    return ProcessedBatch(
        probe=np.array(probes, dtype=object), ts=T0 + idx * 0.5, mv=-12.5 + idx,
        temp_c=np.full(n, 25.0), ph=7.2 + idx / 100, neutral_ph=np.full(n, 6.998),
        neutral_dev=0.2 + idx / 100, quality=np.full(n, Quality.GOOD, dtype=np.uint8),
    )


HIGH = AlertEvent(rule="high-ph", probe="tank-3", quantity="ph", limit="hi", event="raise",
                  state="unack_active", ts=T0 + 100.0, value=9.1, threshold=9.0, message="pH above 9.0")


def broker_down_with_listener(mosquitto, **cfg: object) -> tuple[MqttRepublishStore, Listener]:
    listener = Listener(mosquitto.port, "probeflow/#", client_id="larkmoor-dashboard", persistent=True)
    config = MqttRepublishStore.Config(type="mqtt", url=mosquitto.url, client_id="larkmoor-republish",
                                       reconnect_min_s=0.1, reconnect_max_s=0.5, **cfg)
    store = MqttRepublishStore(config, StoreContext(site="larkmoor"))
    assert wait_until(lambda: store.counters.connected)
    db = mosquitto.dir / "data" / "mosquitto.db"
    since = time.time()
    assert wait_until(lambda: db.exists() and db.stat().st_mtime > since, timeout=30)  # listener's session saved
    mosquitto.kill()
    assert wait_until(lambda: not store.counters.connected)
    return store, listener


def test_an_alert_overtakes_the_readings_queued_before_it(mosquitto) -> None:
    store, listener = broker_down_with_listener(mosquitto, readings_in_flight=3)
    try:
        store.write(processed(["tank-3", "tank-4"] * 20), [])     # 40 readings, one message each
        assert wait_until(lambda: store.counters.published == 3)   # the window: 3 handed to paho
        store.write(processed([]), [HIGH])                         # the alert comes after them
        assert wait_until(lambda: store.counters.alerts_published == 2)  # event + retained state
        assert store.counters.published == 5                       # no further reading yet
        mosquitto.start()
        assert wait_until(lambda: len(listener.received()) >= 42, timeout=20)
        store.flush()
    finally:
        store.close()
        listener.close()
    kinds = [orjson.loads(p)["kind"] if "/alarm/" not in t else "state"
             for t, p, _ in listener.received()]
    first_alert = kinds.index("alert")
    assert first_alert <= 3, kinds                 # at most the window's readings before it
    readings = sorted(orjson.loads(p)["mv"] for t, p, _ in listener.received()
                      if t.endswith("/reading"))
    assert readings == [-12.5 + i for i in range(40)]              # every reading, once
    assert store.counters.dropped == 0 and store.counters.alerts_not_sent == 0


def test_queued_batches_go_out_as_one_array_per_probe(mosquitto) -> None:
    store, listener = broker_down_with_listener(mosquitto, readings_in_flight=1, group_readings=True)
    try:
        for k in range(10):
            store.write(processed(["tank-3", "tank-4"], 2 * k), [])
        mosquitto.start()
        assert wait_until(lambda: sum(len(orjson.loads(p)) for _, p, _ in listener.received()) >= 20,
                          timeout=20)
        store.flush()
    finally:
        store.close()
        listener.close()
    messages = [(t, orjson.loads(p)) for t, p, _ in listener.received()]
    assert all(isinstance(recs, list) for _, recs in messages)
    assert len(messages) <= 4                      # not 20: batches queued meanwhile are merged
    for probe in ("tank-3", "tank-4"):
        mine = [r for t, recs in messages if t == f"probeflow/larkmoor/{probe}/reading" for r in recs]
        assert all(r["probe"] == probe for r in mine)
        assert [r["ts"] for r in mine] == sorted(r["ts"] for r in mine)   # in time order
        assert len(mine) == 10 and len({r["ts"] for r in mine}) == 10     # each once


def test_a_full_queue_drops_readings_counted_but_never_alerts(mosquitto) -> None:
    store, listener = broker_down_with_listener(mosquitto, readings_in_flight=2, queue_max_readings=4)
    try:
        store.write(processed(["tank-3", "tank-4"] * 2), [])       # 4 readings: fit
        assert wait_until(lambda: store.counters.published == 2)
        store.write(processed(["tank-3"] * 3, 10), [HIGH])          # 3 more: no room, the alert has
        assert store.counters.dropped == 3
        mosquitto.start()
        assert wait_until(lambda: len(listener.received()) >= 6, timeout=20)
        store.flush()
    finally:
        store.close()
        listener.close()
    topics = [t for t, _, _ in listener.received()]
    assert topics.count("probeflow/larkmoor/tank-3/alert") == 1
    assert sum(t.endswith("/reading") for t in topics) == 4
