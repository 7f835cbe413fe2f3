"""Fuzz the MQTT collector's payload handling through a real mosquitto.

Each example publishes good and bad reading payloads (one JSON record each)
on a topic whose probe level names no configured probe, so only the payload's
own probe id counts.  Properties: every good payload arrives with its values,
every bad one is quarantined with a reason naming the topic; nothing else.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from reading_strategies import MAX_BYTES, Item, items
from reliability_harness import Recorder, wait_until

pytestmark = pytest.mark.services
mqtt = pytest.importorskip("probeflow.collectors.mqtt",
                           reason="probeflow/collectors/mqtt.py is not importable yet")
paho = pytest.importorskip("paho.mqtt.client")

TOPIC_PROBE = "ghost-0"
"""The topic's probe level: not a configured probe, so a payload without its own id is rejected."""
_client_ids = itertools.count()


@pytest.fixture(scope="module")
def broker(tmp_path_factory: pytest.TempPathFactory) -> Iterator[object]:
    from servers import Mosquitto

    server = Mosquitto(tmp_path_factory.mktemp("mqtt-fuzz"))
    server.start()
    yield server
    server.kill()


@pytest.fixture(scope="module")
def publisher(broker: object) -> Iterator[object]:
    client = paho.Client(paho.CallbackAPIVersion.VERSION2, client_id="fuzz-publisher")
    client.connect("127.0.0.1", broker.port)  # type: ignore[attr-defined]
    client.loop_start()
    yield client
    client.loop_stop()
    client.disconnect()


single_records = items().filter(lambda i: not (i.kind == "not_object" and i.raw.startswith(b"[")))


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(batch=st.lists(single_records, min_size=1, max_size=25))
def test_payloads_are_received_or_quarantined(broker: object, publisher: object,
                                              batch: list[Item]) -> None:
    recorder = Recorder()
    config = mqtt.MqttCollectorConfig(url=broker.url, topic="works/+/reading",  # type: ignore[attr-defined]
                                      client_id=f"fuzz-collector-{next(_client_ids)}",
                                      max_payload_bytes=MAX_BYTES)
    collector = mqtt.MqttCollector(config, recorder.context("mqtt:fuzz"))
    collector.start()
    try:
        wait_until(collector.subscribed.is_set, "the subscription", poll_s=0.005)
        for item in batch:
            publisher.publish(f"works/{TOPIC_PROBE}/reading", item.raw, qos=1).wait_for_publish(10)  # type: ignore[attr-defined]
        wait_until(lambda: recorder.readings + len(recorder.quarantined) >= len(batch),
                   "every payload to be received or quarantined", poll_s=0.005)
    finally:
        collector.stop(timeout=5.0)
    good = [i for i in batch if i.good]
    assert recorder.rows() == [(i.probe, pytest.approx(i.ts, abs=1e-6), i.mv) for i in good]
    bad = [i for i in batch if not i.good]
    assert [q.raw for q in recorder.quarantined] == [i.raw.decode("utf-8", "backslashreplace")
                                                     for i in bad]
    assert all(f"works/{TOPIC_PROBE}/reading" in q.reason for q in recorder.quarantined)
