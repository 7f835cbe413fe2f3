"""MqttRepublishStore against a real mosquitto, read back with a paho subscriber.

Values are invented (site "larkmoor", probes tank-3 and tank-4); what is checked
is that the records arrive unchanged on the configured topics, that the alarm
state is retained (MQTT 5.0, 3.3.1.3: a retained message goes to later
subscribers), and that an outage or a full queue never blocks or silently loses.
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
        temp_c=np.where(idx == 1, np.nan, 25.0), ph=7.2 + idx / 100, neutral_ph=np.full(n, 6.998),
        neutral_dev=0.2 + idx / 100, quality=np.full(n, Quality.GOOD, dtype=np.uint8),
    )


def make(broker, **cfg: object) -> MqttRepublishStore:
    config = MqttRepublishStore.Config(type="mqtt", url=broker.url, client_id="larkmoor-republish",
                                       reconnect_min_s=0.1, reconnect_max_s=0.5, **cfg)
    return MqttRepublishStore(config, StoreContext(site="larkmoor"))


def test_readings_and_alerts_on_their_topics(mosquitto) -> None:
    listener = Listener(mosquitto.port, "probeflow/#")
    store = make(mosquitto)
    alert = AlertEvent(rule="high-ph", probe="tank-3", quantity="ph", limit="hi", event="raise",
                       state="unack_active", ts=T0 + 1.0, value=9.1, threshold=9.0,
                       message="pH above 9.0")
    try:
        store.write(processed(["tank-3", "tank-4"]), [alert])
        store.flush()
        assert wait_until(lambda: len(listener.received()) == 4)
    finally:
        store.close()
        listener.close()
    by_topic = {t: (orjson.loads(p), r) for t, p, r in listener.received()}
    rec, _ = by_topic["probeflow/larkmoor/tank-3/reading"]
    assert rec == {"kind": "reading", "probe": "tank-3", "ts": "2025-12-02T00:00:00.000000Z",
                   "mv": -12.5, "temp_c": 25.0, "ph": 7.2, "neutral_ph": 6.998, "neutral_dev": 0.2,
                   "quality": "good"}
    rec, _ = by_topic["probeflow/larkmoor/tank-4/reading"]
    assert rec["ts"] == "2025-12-02T00:00:00.500000Z" and rec["temp_c"] is None  # NaN -> null
    rec, _ = by_topic["probeflow/larkmoor/tank-3/alert"]
    assert rec == alert.to_record()
    assert "probeflow/larkmoor/alarm/high-ph/tank-3/hi" in by_topic
    assert store.counters.published == 4 and store.counters.confirmed == 4
    assert store.counters.dropped == 0

    # a dashboard that subscribes later still sees the alarm's latest state
    late = Listener(mosquitto.port, "probeflow/larkmoor/alarm/#")
    try:
        assert wait_until(lambda: len(late.received()) == 1)
    finally:
        late.close()
    _, payload, retained = late.received()[0]
    assert retained and orjson.loads(payload)["state"] == "unack_active"


def test_grouped_readings_one_array_per_probe(mosquitto) -> None:
    listener = Listener(mosquitto.port, "site/#")
    store = make(mosquitto, readings_topic="site/{site}/ph/{probe}", group_readings=True)
    try:
        store.write(processed(["tank-3", "tank-4", "tank-3"]), [])
        store.flush()
        assert wait_until(lambda: len(listener.received()) == 2)
    finally:
        store.close()
        listener.close()
    by_topic = {t: orjson.loads(p) for t, p, _ in listener.received()}
    assert [r["mv"] for r in by_topic["site/larkmoor/ph/tank-3"]] == [-12.5, -10.5]
    assert [r["mv"] for r in by_topic["site/larkmoor/ph/tank-4"]] == [-11.5]


def test_broker_outage_then_delivery_and_full_queue_counted(mosquitto) -> None:
    listener = Listener(mosquitto.port, "probeflow/#", client_id="larkmoor-dashboard", persistent=True)
    store = make(mosquitto, queue_max_readings=3, client_queue_max=1)
    try:
        assert wait_until(lambda: store.counters.connected)
        db = mosquitto.dir / "data" / "mosquitto.db"
        since = time.time()
        assert wait_until(lambda: db.exists() and db.stat().st_mtime > since, timeout=30)
        mosquitto.kill()
        assert wait_until(lambda: not store.counters.connected)
        store.write(processed(["tank-3", "tank-4"]), [])      # queued (the client holds 1, waits)
        store.write(processed(["tank-3", "tank-4"], 2), [])   # 2 + 2 > 3: dropped and counted
        assert store.counters.dropped == 2
        mosquitto.start()
        assert wait_until(lambda: len(listener.received()) >= 2, timeout=15)
        store.flush()
    finally:
        store.close()
        listener.close()
    mvs = sorted(orjson.loads(p)["mv"] for _, p, _ in listener.received())
    assert mvs == [-12.5, -11.5]


def test_bad_topic_templates_are_config_errors() -> None:
    from pydantic import ValidationError

    for key, value in [("readings_topic", "p/{site}/{tank}"), ("alerts_topic", "p/+/{probe}"),
                       ("readings_topic", "p/{site")]:
        with pytest.raises(ValidationError) as err:
            MqttRepublishStore.Config(type="mqtt", url="mqtt://127.0.0.1:1883", client_id="x",
                                      **{key: value})
        assert key in str(err.value)
