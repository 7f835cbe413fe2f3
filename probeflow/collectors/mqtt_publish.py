"""A lean handler for incoming PUBLISH packets without properties.

For every PUBLISH, paho-mqtt 2.x builds an ``MQTTMessage`` (which builds an
``MQTTMessageInfo`` with its own ``threading.Condition``), and under MQTT 5 a
``Properties`` object (a dozen dicts) even when the packet carries no
property at all, then matches the topic against its callback table under two
locks.  A profile of the live service at a few thousand single-reading
messages a second put about a third of paho's network thread there, and that
thread shares one interpreter lock with parsing, conversion and SQLite.

:func:`lean_publishes` hooks the client's ``_handle_publish`` (paho-mqtt 2.x):
a QoS 0 or manually acknowledged QoS 1 packet whose property length is zero
(the common case: MQTT 3.1.1 has none, and publishers rarely set any) is
decoded here, straight from the packet bytes, into a :class:`LeanMessage` and
handed to ``deliver``.  Anything else (QoS 2, properties present, an empty or
malformed packet) goes to paho's own handler unchanged, which keeps its errors
and its callbacks.  The fields are those paho decodes (MQTT 5.0 section 3.3,
MQTT 3.1.1 section 3.3); a test compares both decoders packet by packet.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import paho.mqtt.client as paho

__all__ = ["LeanMessage", "decode_lean", "lean_publishes"]


class LeanMessage:
    """The parts of an incoming PUBLISH the collector reads (same names as
    paho's ``MQTTMessage``)."""

    __slots__ = ("_topic", "dup", "mid", "payload", "qos", "retain")

    def __init__(self, topic: bytes, payload: bytes, qos: int, mid: int, dup: bool,
                 retain: bool) -> None:
        self._topic = topic
        self.payload = payload
        self.qos = qos
        self.mid = mid
        self.dup = dup
        self.retain = retain

    @property
    def topic(self) -> str:
        """The topic name; raises UnicodeDecodeError when it is not UTF-8, as paho does."""
        return self._topic.decode("utf-8")

    def __repr__(self) -> str:
        return f"LeanMessage(topic={self._topic!r}, mid={self.mid}, qos={self.qos}, {len(self.payload)} bytes)"


def decode_lean(header: int, packet: bytes | bytearray, mqtt5: bool) -> LeanMessage | None:
    """The PUBLISH in ``packet`` (everything after the fixed header) as a
    :class:`LeanMessage`, or None when it is not one this path takes: QoS 2,
    MQTT 5 properties present, an empty topic, or too short to be a PUBLISH.

    Layout (MQTT 5.0 3.3.2 / MQTT 3.1.1 3.3.2): topic length (2 bytes, big
    endian), topic, packet identifier (2 bytes, QoS > 0 only), property length
    (variable byte integer, MQTT 5 only; a single 0 byte when there are none),
    payload (the rest).
    """
    qos = (header & 0x06) >> 1
    n = len(packet)
    if qos > 1 or n < 2:
        return None
    end = 2 + ((packet[0] << 8) | packet[1])
    if end == 2:
        return None   # empty topic: paho decides (a protocol error in 3.1.1, a topic alias in 5)
    mid = 0
    pos = end
    if qos:
        if n < pos + 2:
            return None
        mid = (packet[pos] << 8) | packet[pos + 1]
        pos += 2
    if mqtt5:
        if n < pos + 1 or packet[pos] != 0:
            return None
        pos += 1
    if n < pos:
        return None
    topic = packet[2:end]
    payload = packet[pos:]
    if type(packet) is not bytes:
        topic, payload = bytes(topic), bytes(payload)
    return LeanMessage(topic, payload, qos, mid, (header & 0x08) != 0, (header & 0x01) != 0)


def lean_publishes(client: Any, deliver: Callable[[paho.Client, Any, LeanMessage], None]) -> bool:
    """Route the PUBLISH packets :func:`decode_lean` takes straight to
    ``deliver(client, userdata, message)``, with no acknowledgement sent (the
    client must use ``manual_ack=True``).  ``deliver`` must not raise (paho's
    network thread would end).  Returns False, and changes nothing, when this
    paho has no ``_handle_publish`` to hook or does not acknowledge manually."""
    original = getattr(client, "_handle_publish", None)
    in_packet = getattr(client, "_in_packet", None)
    if (not callable(original) or getattr(client, "_manual_ack", False) is not True
            or not isinstance(in_packet, dict) or not {"command", "packet"} <= in_packet.keys()
            or not hasattr(client, "_protocol") or not hasattr(client, "_userdata")):
        return False
    success = paho.MQTT_ERR_SUCCESS
    mqtt5 = paho.MQTTv5

    def handle_publish() -> Any:
        try:
            packet = client._in_packet
            message = decode_lean(packet["command"], packet["packet"], client._protocol == mqtt5)
        except (AttributeError, KeyError, TypeError, IndexError):
            message = None   # a paho whose internals moved: its own handler decides
        if message is None:
            return original()
        deliver(client, client._userdata, message)
        return success

    client._handle_publish = handle_publish
    return True
