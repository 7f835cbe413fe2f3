"""Alarm commands over MQTT: ``service.command_topic``.

A JSON message ``{"command": "ack"|"shelve"|"unshelve", "alarm_id": "...",
"minutes": N}`` on the topic is handed to the service's command path (the same
one ``probeflow ack`` uses), applied on the pipeline thread; the result is
logged and the resulting alert event goes to every store (and so to the MQTT
republish store's retained per-alarm state topic, when configured).

paho-mqtt 2.x with VERSION2 callbacks; callbacks only parse and hand over,
never raise (an exception would end paho's network thread), and subscribe in
``on_connect`` so a reconnect subscribes again.  Commands are QoS 1 with a
clean session: a command sent while the service is down is not applied later
(an old acknowledgement must not silence a new alarm).  Anyone who can
publish on the topic can acknowledge and shelve alarms: restrict it with the
broker's access control.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from probeflow.errors import ProbeflowError
from probeflow.service.alarm_commands import AlarmCommand, command_from_json
from probeflow.service.log import Log

__all__ = ["MAX_COMMAND_BYTES", "MqttCommandListener"]

MAX_COMMAND_BYTES = 4096


class MqttCommandListener:
    """Subscribes to the command topic and hands parsed commands to ``submit``."""

    def __init__(self, connection: Any, topic: str, submit: Callable[[AlarmCommand], None],
                 log: Log) -> None:
        from probeflow.mqtt_common import build_client

        self.connection = connection
        self.topic = topic
        self.submit = submit
        self.log = log.bind(listener="mqtt-commands")
        self.counters = {"received": 0, "rejected": 0}
        self._client = build_client(connection)
        self._client.on_connect = self._on_connect
        self._client.on_message = self._on_message

    def start(self) -> None:
        address = self.connection.address
        self._client.connect_async(address.host, address.port, keepalive=self.connection.keepalive)
        self._client.loop_start()
        self.log.info("command_topic_listening", topic=self.topic, broker=str(address))

    def stop(self) -> None:
        try:
            self._client.disconnect()
        finally:
            self._client.loop_stop()

    # -- paho callbacks: short, never raise ------------------------------------------------
    def _on_connect(self, client: Any, userdata: Any, flags: Any, reason_code: Any,
                    properties: Any) -> None:
        try:
            if reason_code.is_failure:
                self.log.error("command_topic_refused", reason=str(reason_code))
                return
            client.subscribe(self.topic, qos=1)
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self.log.error("command_topic_callback_failed", error=f"{type(exc).__name__}: {exc}")

    def _on_message(self, client: Any, userdata: Any, message: Any) -> None:
        try:
            payload = bytes(message.payload)
            if len(payload) > MAX_COMMAND_BYTES:
                raise ProbeflowError(f"alarm command of {len(payload)} bytes is larger than "
                                     f"{MAX_COMMAND_BYTES}")
            cmd = command_from_json(payload, who="mqtt")
            self.counters["received"] += 1
            self.submit(cmd)
        except ProbeflowError as exc:
            self.counters["rejected"] += 1
            self.log.warning("command_rejected", topic=message.topic, reason=str(exc),
                             payload=bytes(message.payload[:200]).decode("utf-8", "backslashreplace"))
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self.log.error("command_topic_callback_failed", error=f"{type(exc).__name__}: {exc}")
