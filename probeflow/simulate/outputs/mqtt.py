"""MQTT output: readings published to ``<prefix>/<probe>/reading`` with paho-mqtt 2.x.

One reading per message (a JSON object) or, with ``batch > 1``, up to ``batch``
readings of one probe per message (a JSON array).  A garbled reading goes out
alone with its corrupted bytes.  Publishing waits when too many messages are
unacknowledged, so a fast run goes as fast as the broker takes it.
"""

from __future__ import annotations

import threading
import time
from urllib.parse import urlsplit

import numpy as np
import paho.mqtt.client as mqtt

from probeflow.errors import ProbeflowError
from probeflow.simulate.encode import encode_lines
from probeflow.simulate.generator import Readings

__all__ = ["MqttOutput", "parse_broker_url"]

MAX_UNACKED = 5_000


def parse_broker_url(url: str) -> tuple[str, int, bool]:
    """(host, port, tls) from ``mqtt://host:1883`` or ``mqtts://host:8883``."""
    parts = urlsplit(url)
    if parts.scheme not in ("mqtt", "mqtts", "tcp", "ssl") or not parts.hostname:
        raise ProbeflowError(f'broker address "{url}" should look like mqtt://host:1883')
    tls = parts.scheme in ("mqtts", "ssl")
    return parts.hostname, parts.port or (8883 if tls else 1883), tls


class MqttOutput:
    """Publishes readings; ``close`` waits until the broker has every message (QoS >= 1)."""

    def __init__(self, url: str, topic_prefix: str, *, qos: int = 1, batch: int = 1,
                 client_id: str = "probeflow-simulator", connect_timeout: float = 10.0) -> None:
        if qos not in (0, 1, 2):
            raise ProbeflowError(f"MQTT QoS must be 0, 1 or 2, not {qos}")
        if batch < 1:
            raise ProbeflowError(f"MQTT batch must be 1 or more readings, not {batch}")
        host, port, tls = parse_broker_url(url)
        self.prefix = topic_prefix.strip("/")
        self.qos = qos
        self.batch = batch
        self.published = 0
        self._acked = 0
        self._cond = threading.Condition()
        self._connected = threading.Event()
        self._connect_error = ""
        self._client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=client_id)
        self._client.max_queued_messages_set(0)
        self._client.max_inflight_messages_set(100)
        if tls:
            self._client.tls_set()
        self._client.on_connect = self._on_connect
        self._client.on_publish = self._on_publish
        try:
            self._client.connect(host, port, keepalive=30)
        except OSError as exc:
            raise ProbeflowError(f"cannot reach the MQTT broker at {url}: {exc}") from exc
        self._client.loop_start()
        if not self._connected.wait(connect_timeout) or self._connect_error:
            self._client.loop_stop()
            why = self._connect_error or f"no answer within {connect_timeout:g} s"
            raise ProbeflowError(f"the MQTT broker at {url} refused the connection: {why}")

    def _on_connect(self, client: mqtt.Client, userdata: object, flags: object,
                    reason_code: object, properties: object) -> None:
        try:
            if getattr(reason_code, "is_failure", False):
                self._connect_error = str(reason_code)
            self._connected.set()
        except Exception:  # noqa: BLE001, S110 -- never let a callback end paho's network thread
            pass

    def _on_publish(self, client: mqtt.Client, userdata: object, mid: int,
                    reason_code: object, properties: object) -> None:
        try:
            with self._cond:
                self._acked += 1
                self._cond.notify_all()
        except Exception:  # noqa: BLE001, S110 -- same as above
            pass

    def topic(self, probe: str) -> str:
        return f"{self.prefix}/{probe}/reading" if self.prefix else f"{probe}/reading"

    def _publish(self, topic: str, payload: bytes) -> None:
        with self._cond:
            while self.published - self._acked >= MAX_UNACKED:
                self._cond.wait(1.0)
        info = self._client.publish(topic, payload, qos=self.qos)
        if info.rc != mqtt.MQTT_ERR_SUCCESS and info.rc != mqtt.MQTT_ERR_NO_CONN:
            raise ProbeflowError(f"MQTT publish to {topic} failed: {mqtt.error_string(info.rc)}")
        self.published += 1

    def write(self, readings: Readings) -> None:
        if not len(readings):
            return
        lines = encode_lines(readings, "json")
        codes = readings.code
        garbled = np.zeros(len(readings), bool) if readings.garble is None else readings.garble != 0
        if self.batch == 1:
            for c, line in zip(codes.tolist(), lines):
                self._publish(self.topic(readings.probes[c]), line)
            return
        pending: dict[int, list[bytes]] = {}
        for c, line, bad in zip(codes.tolist(), lines, garbled.tolist()):
            if bad:
                self._publish(self.topic(readings.probes[c]), line)
                continue
            group = pending.setdefault(c, [])
            group.append(line)
            if len(group) >= self.batch:
                self._publish(self.topic(readings.probes[c]), b"[" + b",".join(group) + b"]")
                pending[c] = []
        for c, group in pending.items():
            if group:
                self._publish(self.topic(readings.probes[c]), b"[" + b",".join(group) + b"]")

    def close(self, timeout: float = 30.0) -> None:
        deadline = time.monotonic() + timeout
        with self._cond:
            while self._acked < self.published and time.monotonic() < deadline:
                self._cond.wait(0.2)
        self._client.disconnect()
        self._client.loop_stop()
