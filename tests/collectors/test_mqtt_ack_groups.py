"""Acknowledgements sent a group at a time, and the collector's fast paths.

References outside probeflow: the PUBACK layout of MQTT 5.0 section 3.4
(fixed header 0x40, Remaining Length 2, packet identifier; Reason Code left out
for Success, 3.4.2.1) and MQTT 3.1.1 section 3.4, checked against the packet
paho-mqtt's own ``client.ack`` builds; the ordering rule of MQTT 5.0 section
4.6 (acknowledge in the order received); redelivery of unacknowledged QoS 1
messages on a resumed session, 4.4, observed on a real mosquitto.  Readings
are invented (site "Larkmoor works", probes tank-3 ... tank-6).
"""

from __future__ import annotations

import threading
from collections.abc import Iterator

import orjson
import paho.mqtt.client as paho
import pytest
from collector_harness import Sink, publish_all, wait_until
from paho.mqtt.enums import CallbackAPIVersion

from probeflow.collectors.mqtt import MqttCollector
from probeflow.collectors.mqtt_acks import AckLedger, GroupAckSender, puback_packets

T0 = 1764633600.0  # 2025-12-02T00:00:00Z, invented stream start


def offline_client() -> paho.Client:
    """A real paho client that is never connected: what it queues stays in its
    outgoing packet queue, where the test can read the bytes."""
    return paho.Client(callback_api_version=CallbackAPIVersion.VERSION2, client_id="larkmoor-bytes",
                       protocol=paho.MQTTv5, manual_ack=True)


def queued_bytes(client: paho.Client) -> list[bytes]:
    return [bytes(p["packet"]) for p in client._out_packet]


@pytest.mark.parametrize("mid", [1, 2, 255, 256, 4660, 65535])
def test_puback_bytes_match_paho_ack(mid: int) -> None:
    """paho's client.ack(mid, 1) is the reference encoder of one PUBACK."""
    client = offline_client()
    client.ack(mid, 1)
    assert queued_bytes(client) == [puback_packets([mid])]
    # MQTT 5.0 3.4.1 / 3.4.2: 0x40, Remaining Length 2, identifier big endian
    assert puback_packets([mid]) == bytes([0x40, 0x02, mid >> 8, mid & 0xFF])


def test_puback_rejects_identifiers_outside_the_protocol_range() -> None:
    for bad in ([0], [65536], [5, -1]):
        with pytest.raises(ValueError, match="between 1 and 65535"):
            puback_packets(bad)


def test_group_is_one_queued_packet_with_the_same_bytes_as_one_ack_each() -> None:
    mids = [7, 8, 9, 300, 65535, 1, 2]
    reference = offline_client()
    for mid in mids:
        reference.ack(mid, 1)
    grouped = offline_client()
    sender = GroupAckSender(grouped)
    assert sender.grouped
    sender(mids)
    assert len(queued_bytes(grouped)) == 1                       # one packet, one wake-up
    assert queued_bytes(grouped)[0] == b"".join(queued_bytes(reference))
    assert (sender.groups, sender.packets) == (1, len(mids))


def test_ledger_sends_groups_in_arrival_order_exactly_once() -> None:
    sent: list[list[int]] = []
    ledger = AckLedger(lambda mid, qos: pytest.fail("per-message send used"),
                       send_group=lambda mids: sent.append(list(mids)))
    ledger.start()
    try:
        gen = ledger.new_generation()
        a = ledger.hold_group(gen, [10, 11, 12])
        b = ledger.hold_group(gen, [13])
        c = ledger.hold_group(gen, [14, 15])
        assert ledger.pending() == 6
        ledger.settle([c])                           # a later batch commits first
        ledger.settle([b])
        assert not wait_until(lambda: sent != [], timeout=0.3)
        ledger.settle([a])
        assert wait_until(lambda: sum(map(len, sent)) == 6)
        assert [m for group in sent for m in group] == [10, 11, 12, 13, 14, 15]
        assert ledger.pending() == 0 and ledger.sent == 6
        ledger.settle([a, b, c])                     # settling again sends nothing more
        assert not wait_until(lambda: sum(map(len, sent)) > 6, timeout=0.3)
    finally:
        ledger.stop()


def test_ledger_drops_a_group_of_an_older_connection() -> None:
    sent: list[int] = []
    ledger = AckLedger(lambda mid, qos: None, send_group=sent.extend)
    ledger.start()
    try:
        old = ledger.new_generation()
        held = ledger.hold_group(old, [1, 2, 3])
        new = ledger.new_generation()               # reconnect before the commit
        assert ledger.hold_group(old, [4, 5]) is None
        fresh = ledger.hold_group(new, [1, 2])      # the broker resends 1 and 2
        ledger.settle([held])                       # the old commit arrives late
        ledger.settle([fresh])
        assert wait_until(lambda: sent == [1, 2])
        assert ledger.dropped_stale == 5 and ledger.pending() == 0
    finally:
        ledger.stop()


@pytest.fixture
def collector_factory(mosquitto) -> Iterator:
    made: list[MqttCollector] = []

    def make(sink: Sink) -> MqttCollector:
        cfg = MqttCollector.Config(type="mqtt", url=mosquitto.url, topic="larkmoor/+/reading",
                                   client_id="larkmoor-groups", reconnect_min_s=0.2, reconnect_max_s=1.0)
        collector = MqttCollector(cfg, sink.context("mqtt:test"))
        collector.start()
        assert collector.subscribed.wait(10)
        made.append(collector)
        return collector

    yield make
    for c in made:
        c.stop(timeout=2)


@pytest.mark.services
def test_grouped_acks_reach_the_broker_once_and_only_after_commit(mosquitto, collector_factory) -> None:
    """80 messages held uncommitted: none is acked (all come back on the next
    connection; fewer than the broker's in-flight limit of 100, which held acks
    would otherwise stop at).  Then 600 committed, acked in groups: none comes
    back a second time."""
    probes = ["tank-3", "tank-4", "tank-5", "tank-6"]
    messages = [(f"larkmoor/{probes[i % 4]}/reading",
                 orjson.dumps({"ts": T0 + i * 0.25, "mv": -20.0 + i / 10, "temp_c": 18.5}))
                for i in range(600)]
    held = Sink(commit=False)
    first = collector_factory(held)
    publish_all(mosquitto.port, messages[:80])
    assert held.wait_for(lambda: held.count() == 80)
    assert first.pending_acks == 80 and first._ack_sender.packets == 0
    first.stop(timeout=2)

    committed = Sink(commit=True)
    second = collector_factory(committed)
    publish_all(mosquitto.port, messages[80:])
    assert committed.wait_for(lambda: committed.count() == 600)     # the 80 redelivered, and the rest
    assert wait_until(lambda: second.pending_acks == 0)
    sender = second._ack_sender
    assert sender.packets == 600 and sender.groups < 600           # sent in groups
    second.stop(timeout=2)

    after = Sink(commit=True)
    third = collector_factory(after)
    publish_all(mosquitto.port, [("larkmoor/tank-3/reading",
                                  orjson.dumps({"ts": T0 + 9999.0, "mv": 1.0}))])
    assert after.wait_for(lambda: after.count() >= 1)
    third.stop(timeout=2)
    assert [r[1] for r in after.rows()] == [T0 + 9999.0]           # nothing acked came back
    assert sorted(r[1] for r in committed.rows()) == [T0 + i * 0.25 for i in range(600)]


def message(topic: bytes, payload: bytes, mid: int) -> paho.MQTTMessage:
    msg = paho.MQTTMessage(mid=mid, topic=topic)
    msg.payload = payload
    msg.qos = 1
    return msg


def test_group_fast_path_gives_the_same_columns_as_the_per_message_path() -> None:
    sink = Sink()
    cfg = MqttCollector.Config(type="mqtt", url="mqtt://127.0.0.1:1", topic="larkmoor/+/reading",
                               client_id="larkmoor-columns")
    collector = MqttCollector(cfg, sink.context("mqtt:test", frozenset({"tank-3", "tank-4", "tank-5"})))
    items = [(1, message(b"larkmoor/tank-3/reading", b'{"ts": 1764633600.5, "mv": -12.25, "temp_c": 21.0}', 1)),
             (1, message(b"larkmoor/tank-4/reading", b'{"ts": 1764633601, "mv": 3, "ohms": 108.1}', 2)),
             (1, message(b"larkmoor/other/reading", b'{"probe": "tank-5", "ts": 1764633602.0, "mv": 0.5}', 3))]
    fast = collector._columns(items)
    slow = collector._each(items)
    assert fast is not None and not slow.rejects
    for column in ("probe", "ts", "mv", "temp_c", "ohms"):
        a, b = getattr(fast, column), getattr(slow, column)
        assert orjson.dumps(list(a)) == orjson.dumps(list(b)), column   # NaN, ints and floats alike


@pytest.mark.parametrize("payload", [b'{"ts": 1764633600.5}', b"not json", b'[{"ts": 1764633600.5, "mv": 1}]',
                                     b'{"ts": "2025-12-02T00:00:00Z", "mv": 1}', b'{"ts": 1764633600.5, "mv": NaN}',
                                     b'{"ts": 1764633600.5, "mv": 1, "temp_c": "warm"}'])
def test_fast_path_steps_aside_for_anything_the_per_message_path_must_judge(payload: bytes) -> None:
    sink = Sink()
    cfg = MqttCollector.Config(type="mqtt", url="mqtt://127.0.0.1:1", topic="larkmoor/+/reading",
                               client_id="larkmoor-columns")
    collector = MqttCollector(cfg, sink.context("mqtt:test", frozenset({"tank-3"})))
    good = (1, message(b"larkmoor/tank-3/reading", b'{"ts": 1764633600.0, "mv": -1.0}', 1))
    odd = (1, message(b"larkmoor/tank-3/reading", payload, 2))
    assert collector._columns([good, odd]) is None
    slow = collector._each([good, odd])
    assert len(slow) >= 1 and slow.probe[0] == "tank-3"


def test_a_mixed_group_is_acked_in_arrival_order_after_its_commit(mosquitto) -> None:
    """A group holding a reject and valid readings: the rejects are quarantined,
    and the group's acks go out once, after the commit hook, in arrival order."""
    sink = Sink(commit=False)
    cfg = MqttCollector.Config(type="mqtt", url=mosquitto.url, topic="larkmoor/+/reading",
                               client_id="larkmoor-mixed")
    collector = MqttCollector(cfg, sink.context("mqtt:test"))
    sent: list[int] = []
    lock = threading.Lock()

    def record(mids: list[int]) -> None:
        with lock:
            sent.extend(mids)

    collector._acks._send_group = record
    collector._acks.start()
    gen = collector._acks.new_generation()
    items = [(gen, message(b"larkmoor/tank-3/reading", b'{"ts": 1764633600.0, "mv": -1.0}', 5)),
             (gen, message(b"larkmoor/tank-3/reading", b"{broken", 6)),
             (gen, message(b"larkmoor/tank-4/reading", b'{"ts": 1764633601.0, "mv": 2.0}', 7))]
    try:
        collector._process(items)
        assert len(sink.quarantined) == 1 and "not valid JSON" in sink.quarantined[0].reason
        assert not wait_until(lambda: sent != [], timeout=0.3)      # not before the commit
        (batch,) = sink.batches
        for hook in batch.on_committed:
            hook()
        assert wait_until(lambda: sent == [5, 6, 7])
    finally:
        collector._acks.stop()
