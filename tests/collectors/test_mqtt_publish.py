"""The lean PUBLISH path decodes what paho-mqtt decodes, and hands the rest to paho.

Reference: paho-mqtt's own decoder (``paho.mqtt._packet.decode_publish``, the
library the collector runs on) and the PUBLISH layout of MQTT 5.0 section 3.3
and MQTT 3.1.1 section 3.3, from which the packets here are built by hand.
The real-broker checks use mosquitto (tests/conftest.py).
"""

from __future__ import annotations

import struct
import time

import orjson
import paho.mqtt.client as paho
import pytest
from collector_harness import Sink, wait_until
from hypothesis import given, settings
from hypothesis import strategies as st
from paho.mqtt._packet import decode_publish
from paho.mqtt.enums import MQTTProtocolVersion
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from probeflow.collectors.mqtt import MqttCollector
from probeflow.collectors.mqtt_publish import LeanMessage, decode_lean, lean_publishes

T0 = 1764633600.0  # 2025-12-02T00:00:00Z, invented stream start


def varint(n: int) -> bytes:
    """MQTT variable byte integer (MQTT 5.0 1.5.5)."""
    out = bytearray()
    while True:
        byte, n = n % 128, n // 128
        out.append(byte | (0x80 if n else 0))
        if not n:
            return bytes(out)


def publish_packet(topic: bytes, payload: bytes, qos: int, mid: int, mqtt5: bool,
                   props: bytes = b"") -> bytes:
    """Variable header + payload of a PUBLISH (MQTT 5.0 3.3.2, MQTT 3.1.1 3.3.2)."""
    body = struct.pack("!H", len(topic)) + topic
    if qos:
        body += struct.pack("!H", mid)
    if mqtt5:
        body += varint(len(props)) + props
    return body + payload


def header(qos: int, dup: bool, retain: bool) -> int:
    return 0x30 | (0x08 if dup else 0) | (qos << 1) | (0x01 if retain else 0)


@settings(max_examples=400, deadline=None)
@given(topic=st.binary(min_size=1, max_size=80), payload=st.binary(max_size=300),
       qos=st.sampled_from([0, 1]), mid=st.integers(1, 65535), dup=st.booleans(),
       retain=st.booleans(), mqtt5=st.booleans(), as_bytearray=st.booleans())
def test_same_fields_as_paho_for_packets_without_properties(topic: bytes, payload: bytes, qos: int,
                                                           mid: int, dup: bool, retain: bool,
                                                           mqtt5: bool, as_bytearray: bool) -> None:
    packet = publish_packet(topic, payload, qos, mid, mqtt5)
    if as_bytearray:
        packet = bytearray(packet)   # paho may hand either type
    head = header(qos, dup, retain)
    ref = decode_publish(head, packet, MQTTProtocolVersion.MQTTv5 if mqtt5 else MQTTProtocolVersion.MQTTv311)
    ours = decode_lean(head, packet, mqtt5)
    assert ours is not None
    assert ours._topic == ref.topic and type(ours._topic) is bytes
    assert ours.payload == ref.payload and type(ours.payload) is bytes
    assert (ours.qos, ours.mid, ours.dup, ours.retain) == (ref.qos, ref.mid, ref.dup, ref.retain)
    try:
        expected_topic = ref.topic.decode("utf-8")
    except UnicodeDecodeError:
        with pytest.raises(UnicodeDecodeError):
            _ = ours.topic   # as paho's MQTTMessage.topic does
    else:
        assert ours.topic == expected_topic


def test_packets_it_does_not_take_are_left_to_paho() -> None:
    user = Properties(PacketTypes.PUBLISH)
    user.UserProperty = ("line", "east")
    props = user.pack()[1:]   # pack() puts the property length first
    with_props = publish_packet(b"hollin/ph-2/reading", b"{}", 1, 7, True, props)
    assert decode_lean(header(1, False, False), with_props, True) is None       # properties present
    ref = decode_publish(header(1, False, False), with_props, MQTTProtocolVersion.MQTTv5)
    assert ref.payload == b"{}"      # paho reads them (and the collector gets paho's message)
    plain = publish_packet(b"hollin/ph-2/reading", b"{}", 2, 7, True)
    assert decode_lean(header(2, False, False), plain, True) is None            # QoS 2
    assert decode_lean(header(0, False, False), publish_packet(b"", b"{}", 0, 0, True), True) is None
    assert decode_lean(header(1, False, False), b"\x00\x05ab", False) is None   # truncated
    assert decode_lean(header(1, False, False), b"\x00", True) is None


def test_hook_needs_manual_acks_and_a_handler_to_replace() -> None:
    auto = paho.Client(paho.CallbackAPIVersion.VERSION2, client_id="hollin-auto")
    assert not lean_publishes(auto, lambda c, u, m: None)                       # paho must ack itself
    manual = paho.Client(paho.CallbackAPIVersion.VERSION2, client_id="hollin-manual", manual_ack=True)
    assert lean_publishes(manual, lambda c, u, m: None)
    assert not lean_publishes(object(), lambda c, u, m: None)


def _publish(port: int, items: list[tuple[str, bytes, int, Properties | None]]) -> None:
    pub = paho.Client(paho.CallbackAPIVersion.VERSION2, client_id="hollin-pub", protocol=paho.MQTTv5)
    pub.connect("127.0.0.1", port)
    pub.loop_start()
    try:
        infos = [pub.publish(t, p, qos=q, properties=props) for t, p, q, props in items]
        for info in infos:
            info.wait_for_publish(10)
    finally:
        pub.disconnect()
        pub.loop_stop()


@pytest.mark.services
@pytest.mark.parametrize("protocol", ["5", "3.1.1"])
def test_both_paths_deliver_once_and_are_acknowledged(mosquitto, protocol: str) -> None:
    """Messages with and without MQTT 5 properties, at QoS 0 and 1, all arrive,
    and none comes back on the next connection: both paths were acknowledged
    (unacknowledged QoS 1 messages are resent, MQTT 5.0 4.4)."""
    def rec(i: int) -> bytes:
        return orjson.dumps({"ts": T0 + i, "mv": -20.0 + i, "temp_c": 14.5})

    tagged = Properties(PacketTypes.PUBLISH)
    tagged.UserProperty = ("shift", "night")
    items = [(f"hollin/ph-{i % 3}/reading", rec(i), 1 if i % 4 else 0, tagged if i % 2 else None)
             for i in range(24)]
    sink = Sink()
    cfg = MqttCollector.Config(type="mqtt", url=mosquitto.url, topic="hollin/+/reading",
                               client_id=f"hollin-logger-{protocol}", protocol=protocol,
                               reconnect_min_s=0.2, reconnect_max_s=1.0)
    collector = MqttCollector(cfg, sink.context("mqtt:hollin"))
    kinds: list[str] = []
    process = collector._process

    def spy(group):   # which decoder produced each message
        kinds.extend(type(msg).__name__ for _generation, msg in group)
        process(group)

    collector._process = spy
    collector.start()
    assert collector.subscribed.wait(10)
    try:
        _publish(mosquitto.port, items)
        assert sink.wait_for(lambda: sink.count() == len(items))
        assert wait_until(lambda: collector.pending_acks == 0)
    finally:
        collector.stop()
    assert sorted(r[1] for r in sink.rows()) == [T0 + i for i in range(24)]
    assert sorted({r[0] for r in sink.rows()}) == ["ph-0", "ph-1", "ph-2"]
    # MQTT 5: the tagged half went through paho; MQTT 3.1.1 carries no properties
    lean = 12 if protocol == "5" else 24
    assert sorted(kinds) == sorted(["LeanMessage"] * lean + ["MQTTMessage"] * (24 - lean))

    again = Sink()
    collector = MqttCollector(cfg, again.context("mqtt:hollin"))
    collector.start()
    assert collector.subscribed.wait(10)
    try:
        assert collector.session_present
        time.sleep(1.0)   # a redelivery would arrive at once after the connect
    finally:
        collector.stop()
    assert again.count() == 0


def test_lean_message_reads_like_paho_message() -> None:
    msg = LeanMessage(b"hollin/ph-1/reading", b"{}", 1, 42, False, True)
    assert (msg.topic, msg.payload, msg.qos, msg.mid, msg.dup, msg.retain) == \
        ("hollin/ph-1/reading", b"{}", 1, 42, False, True)
    assert "mid=42" in repr(msg)


def test_moved_internals_fall_back_to_paho_instead_of_ending_the_network_thread() -> None:
    client = paho.Client(paho.CallbackAPIVersion.VERSION2, client_id="hollin-x", manual_ack=True,
                         protocol=paho.MQTTv5)
    called: list[str] = []
    client._handle_publish = lambda: called.append("paho") or paho.MQTT_ERR_SUCCESS
    delivered: list[LeanMessage] = []
    assert lean_publishes(client, lambda c, u, m: delivered.append(m))
    client._in_packet = {"command": header(1, False, False),
                         "packet": publish_packet(b"hollin/ph-1/reading", b"{}", 1, 5, True)}
    assert client._handle_publish() == paho.MQTT_ERR_SUCCESS
    assert [m.mid for m in delivered] == [5] and called == []
    client._in_packet = {"command": header(1, False, False)}     # a paho that keeps it elsewhere
    client._handle_publish()
    assert called == ["paho"] and len(delivered) == 1


@pytest.mark.services
def test_client_sockets_do_not_hold_small_packets(mosquitto) -> None:
    """Nagle's algorithm off (TCP_NODELAY, RFC 896) on the collector's connection,
    so a PUBACK or an alert is not held back behind unacknowledged bytes."""
    import socket

    sink = Sink()
    cfg = MqttCollector.Config(type="mqtt", url=mosquitto.url, topic="hollin/+/reading",
                               client_id="hollin-nodelay", reconnect_min_s=0.2, reconnect_max_s=1.0)
    collector = MqttCollector(cfg, sink.context("mqtt:hollin"))
    collector.start()
    try:
        assert collector.subscribed.wait(10)
        sock = collector._client.socket()
        assert sock.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) == 1
    finally:
        collector.stop()
