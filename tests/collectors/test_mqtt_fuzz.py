"""Fuzz: whatever the payloads, every MQTT message is either turned into readings
or quarantined with a reason, and every message is acknowledged exactly once, in
arrival order, after its group was handed over (MQTT 5.0 4.6 ordering).

The collector's batching step is driven directly with generated messages; a
recording function stands in for the network client's ack, so no broker is
needed (the broker path is covered in test_mqtt_collector.py).
"""

from __future__ import annotations

import orjson
import paho.mqtt.client as paho
from collector_harness import Sink, wait_until
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from probeflow.collectors.mqtt import MqttCollector
from probeflow.collectors.mqtt_acks import AckLedger

_reading = st.fixed_dictionaries(
    {"ts": st.one_of(st.floats(1.6e9, 1.8e9), st.text(max_size=30), st.none()),
     "mv": st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=5))},
    optional={"probe": st.sampled_from(["tank-3", "tank-4", "tank-9", ""]),
              "temp_c": st.one_of(st.floats(-10, 120), st.none(), st.booleans())},
)
_payload = st.one_of(
    st.binary(max_size=60),
    _reading.map(lambda r: orjson.dumps(r, option=orjson.OPT_NON_STR_KEYS)),
    st.lists(_reading, max_size=4).map(orjson.dumps),
)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(["tank-3", "tank-4", "tank-5"]), _payload), min_size=1,
                max_size=25))
def test_every_message_settled_once_in_order(messages: list[tuple[str, bytes]]) -> None:
    sink = Sink()
    cfg = MqttCollector.Config(type="mqtt", url="mqtt://127.0.0.1:1", topic="larkmoor/+/reading",
                               client_id="fuzz", max_payload_bytes=200)
    collector = MqttCollector(cfg, sink.context("mqtt:fuzz", frozenset({"tank-3", "tank-4"})))
    sent: list[int] = []
    ledger = AckLedger(lambda mid, qos: sent.append(mid))
    collector._acks = ledger
    ledger.start()
    try:
        gen = ledger.new_generation()
        items = []
        for mid, (probe, payload) in enumerate(messages, start=1):
            msg = paho.MQTTMessage(mid=mid, topic=f"larkmoor/{probe}/reading".encode())
            msg.payload = payload
            msg.qos = 1
            items.append((gen, msg))
        half = len(items) // 2
        collector._process(items[:half])
        collector._process(items[half:])
        assert wait_until(lambda: len(sent) == len(messages), timeout=30)
    finally:
        ledger.stop()
    assert sent == list(range(1, len(messages) + 1))
    assert all(q.reason and q.source == "mqtt:fuzz" for q in sink.quarantined)
    for probe, ts, mv, temp_c, _ in sink.rows():
        assert probe in ("tank-3", "tank-4")
        assert abs(mv) < float("inf") and 1.6e9 <= ts <= 1.8e9
    # every message produced a reading or a reject (an empty array produces neither)
    empties = sum(1 for _, p in messages if p.strip() == b"[]")
    assert sink.count() + len(sink.quarantined) >= len(messages) - empties
