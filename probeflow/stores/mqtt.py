"""MQTT republish store: processed readings and alert events as JSON on broker topics.

For dashboards and other plant systems that listen on MQTT.  It is a copy of
what the durable stores keep, so it never holds up the reading path:

* ``write`` only appends to in-memory queues and returns; a publisher thread
  formats and publishes with its own client (QoS 1 by default).
* **Alert events go first.**  They have their own queue, which the publisher
  empties before it takes readings and again between any two reading
  messages, so an alert never waits behind readings queued before it.
  Readings are handed to paho only while fewer than ``readings_in_flight``
  messages wait for the broker's PUBACK, and paho's in-flight limit is set
  above that, so neither paho's own queue nor its in-flight window fills with
  readings ahead of an alert.  The window is small (32 messages) on purpose:
  an alert still queues behind every message in flight on the connection,
  and paho-mqtt 2.x walks its whole table of unconfirmed messages on every
  PUBACK (``_update_inflight``), so a window of 500 cost about a million
  Python steps a second at 2,000 messages/s and, once full, stayed full:
  alerts then took 150-450 ms instead of 10-30 ms (bench/README.md).
* **Readings are published in groups.**  Every pass takes all queued reading
  batches (up to ``readings_per_pass`` readings); with ``group_readings`` each
  probe's readings of the pass go out as one JSON array.
* While the broker is away, readings wait in the bounded queue here
  (``queue_max_readings``); readings that do not fit are dropped, counted in
  ``counters.dropped`` and logged (once a minute), never silently.  Alert
  events are never dropped: they are always queued, and paho keeps them (up
  to ``client_queue_max`` messages) and resends them on reconnect.
* ``flush`` waits at most ``flush_timeout_s`` for the broker to confirm what was
  queued; ``close`` flushes and disconnects.

Topics are templates: ``readings_topic`` and ``alerts_topic`` take ``{site}``
and ``{probe}`` (alerts also ``{rule}``, ``{limit}``, ``{alarm_id}``);
``alarm_state_topic`` gets one *retained* message per alarm with its latest
state, so a dashboard that connects later sees every alarm at once.
``+``, ``#`` and NUL inside a probe id are replaced by ``_`` in topics.

Alerts support operators; they are not a safety system.  Interlocks and trips
belong in the plant's own protection, not in a republished MQTT message.
"""

from __future__ import annotations

import string
import sys
import threading
import time
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any, ClassVar, Literal

import numpy as np
import orjson
import paho.mqtt.client as paho
from pydantic import ConfigDict, Field, field_validator

from probeflow.batch import QUALITY_NAMES, ProcessedBatch, QuarantineItem
from probeflow.collectors.ratelog import RateLimitedLog, default_logger
from probeflow.events import AlertEvent
from probeflow.mqtt_common import MqttConnectionConfig, build_client
from probeflow.stores.base import StoreConfigBase, StoreContext
from probeflow.stores.jsonl import rfc3339_column

__all__ = ["MqttRepublishConfig", "MqttRepublishStore", "RepublishCounters"]

_READING_KEYS = frozenset({"site", "probe"})
_ALERT_KEYS = frozenset({"site", "probe", "rule", "limit", "alarm_id"})
_TOPIC_UNSAFE = str.maketrans({"+": "_", "#": "_", "\0": "_"})
_ALERT_HEADROOM = 100
"""In-flight slots of the publishing client kept free of readings, for alert events."""
_WINDOW_POLL_S = 0.001


def _check_template(template: str, allowed: frozenset[str]) -> str:
    try:
        names = {name for _, name, _, _ in string.Formatter().parse(template) if name is not None}
    except ValueError as exc:
        raise ValueError(f"{template!r} is not a valid topic template ({exc})") from None
    unknown = names - allowed
    if unknown:
        raise ValueError(
            f"{template!r}: unknown placeholder {{{min(unknown)}}}; use {', '.join(sorted(allowed))}"
        )
    literal = string.Formatter().vformat(template, (), {n: "x" for n in names})
    if "+" in literal or "#" in literal or not literal:
        raise ValueError(f"{template!r}: a topic to publish on must not be empty or hold + or #")
    return template


class MqttRepublishConfig(StoreConfigBase, MqttConnectionConfig):
    """The ``stores: - type: mqtt`` section."""

    model_config = ConfigDict(extra="forbid")
    type: Literal["mqtt"] = "mqtt"
    readings_topic: str = "probeflow/{site}/{probe}/reading"
    alerts_topic: str = "probeflow/{site}/{probe}/alert"
    alarm_state_topic: str | None = "probeflow/{site}/alarm/{alarm_id}"
    qos: Literal[0, 1] = 1
    group_readings: bool = False        # one JSON array per probe and batch instead of one message per reading
    queue_max_readings: int = Field(default=100_000, gt=0)
    readings_in_flight: int = Field(default=32, gt=0, le=60_000)   # unconfirmed reading messages at most
    readings_per_pass: int = Field(default=20_000, gt=0)
    client_queue_max: int = Field(default=20_000, gt=0)
    flush_timeout_s: float = Field(default=2.0, ge=0, le=60)

    @field_validator("readings_topic")
    @classmethod
    def _readings_template(cls, value: str) -> str:
        return _check_template(value, _READING_KEYS)

    @field_validator("alerts_topic", "alarm_state_topic")
    @classmethod
    def _alert_template(cls, value: str | None) -> str | None:
        return None if value is None else _check_template(value, _ALERT_KEYS)


@dataclass
class RepublishCounters:
    published: int = 0      # messages handed to the client
    confirmed: int = 0      # acknowledged by the broker (QoS 1)
    dropped: int = 0        # readings that did not fit the queue (counted, logged)
    alerts_published: int = 0   # alert messages handed to the client
    alerts_not_sent: int = 0    # alert messages paho refused: QoS 0 while disconnected, or at close
    connected: bool = False
    last_error: str = ""
    lock: threading.Lock = field(default_factory=threading.Lock, repr=False)


def _nulls(values: np.ndarray) -> list[float | None]:
    out: list[float | None] = values.tolist()
    for i in np.flatnonzero(np.isnan(values)).tolist():
        out[i] = None
    return out


class MqttRepublishStore:
    """Publishes processed readings and alert events (see the module docstring)."""

    Config: ClassVar[type[MqttRepublishConfig]] = MqttRepublishConfig

    def __init__(self, config: MqttRepublishConfig, context: StoreContext) -> None:
        self.config = config
        self.site = context.site
        self.counters = RepublishCounters()
        self._log = RateLimitedLog(default_logger(context.log, "probeflow.stores.mqtt"))
        self._alerts: deque[AlertEvent] = deque()
        self._readings: deque[ProcessedBatch] = deque()
        self._queued_readings = 0
        self._cond = threading.Condition()
        self._busy = False
        self._closing = threading.Event()
        self._topics: dict[str, str] = {}

        self._client = build_client(config)
        self._client.max_queued_messages_set(config.client_queue_max)
        # Room in paho's in-flight window beyond the readings' share, for alerts.
        self._client.max_inflight_messages_set(config.readings_in_flight + _ALERT_HEADROOM)
        self._client.on_connect = self._on_connect
        self._client.on_disconnect = self._on_disconnect
        self._client.on_connect_fail = self._on_connect_fail
        self._client.on_publish = self._on_publish
        address = config.address
        self._client.connect_async(address.host, address.port, keepalive=config.keepalive)
        self._client.loop_start()
        self._thread = threading.Thread(target=self._run, name="mqtt-republish", daemon=True)
        self._thread.start()

    # -- Store interface ------------------------------------------------------------
    def write(self, batch: ProcessedBatch, alerts: Sequence[AlertEvent]) -> None:
        n = len(batch)
        with self._cond:
            keep = n > 0 and self._queued_readings + n <= self.config.queue_max_readings
            if keep:
                self._readings.append(batch)
                self._queued_readings += n
            if alerts:
                self._alerts.extend(alerts)
            if keep or alerts:
                self._cond.notify()
        if n and not keep:
            with self.counters.lock:
                self.counters.dropped += n
                dropped = self.counters.dropped
            self._log.warning(
                "mqtt_republish_dropped",
                f"MQTT republish to {self.config.address}: queue full, {n} reading(s) not republished "
                f"({dropped} so far; the durable stores still have them)",
            )

    def write_quarantine(self, items: Sequence[QuarantineItem]) -> None:
        """Rejected input is not republished."""

    def flush(self) -> None:
        """Wait (at most ``flush_timeout_s``) until the broker confirmed everything queued."""
        deadline = time.monotonic() + self.config.flush_timeout_s
        while time.monotonic() < deadline:
            with self._cond:
                idle = not self._readings and not self._alerts and not self._busy
            with self.counters.lock:
                confirmed = self.counters.confirmed >= self.counters.published or self.config.qos == 0
            if idle and confirmed:
                return
            time.sleep(0.01)

    def close(self) -> None:
        self.flush()
        self._closing.set()
        with self._cond:
            self._cond.notify_all()
        self._thread.join(2.0)
        try:
            self._client.disconnect()
        finally:
            self._client.loop_stop()
        self.counters.connected = False

    # -- paho callbacks (network thread: short, never raise) --------------------------
    def _on_connect(self, client: paho.Client, userdata: Any, flags: Any, reason_code: Any,
                    properties: Any) -> None:
        try:
            if reason_code.is_failure:
                self._log.error("mqtt_republish_refused", f"broker refused the connection: {reason_code}")
                return
            self.counters.connected = True
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self._callback_failed(exc)

    def _on_connect_fail(self, client: paho.Client, userdata: Any) -> None:
        try:
            cause = sys.exc_info()[1]   # paho calls this inside its `except OSError`
            self.counters.last_error = f"cannot connect to {self.config.address}: {cause}"
            self._log.warning("mqtt_republish_connect_failed", f"{self.counters.last_error}; retrying")
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self._callback_failed(exc)

    def _on_disconnect(self, client: paho.Client, userdata: Any, flags: Any, reason_code: Any,
                       properties: Any) -> None:
        try:
            self.counters.connected = False
            if not self._closing.is_set():
                self._log.warning(
                    "mqtt_republish_disconnected", f"lost {self.config.address} ({reason_code}); reconnecting"
                )
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self._callback_failed(exc)

    def _on_publish(self, client: paho.Client, userdata: Any, mid: int, reason_code: Any,
                    properties: Any) -> None:
        try:
            with self.counters.lock:
                self.counters.confirmed += 1
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self._callback_failed(exc)

    def _callback_failed(self, exc: BaseException) -> None:
        self.counters.last_error = f"callback error: {exc!r}"

    # -- publisher thread ---------------------------------------------------------------
    def _run(self) -> None:
        per_pass = self.config.readings_per_pass
        while True:
            with self._cond:
                while not self._readings and not self._alerts and not self._closing.is_set():
                    self._cond.wait(0.5)
                if not self._readings and not self._alerts:
                    return
                batches: list[ProcessedBatch] = []
                rows = 0
                while self._readings and (not batches or rows + len(self._readings[0]) <= per_pass):
                    batch = self._readings.popleft()
                    batches.append(batch)
                    rows += len(batch)
                self._busy = True
            try:
                self._publish_waiting_alerts()
                if batches:
                    self._publish_readings(batches)
            except Exception as exc:  # noqa: BLE001 - never let the publisher thread die
                self._log.error("mqtt_republish_failed", repr(exc))
            finally:
                with self._cond:
                    self._queued_readings -= rows
                    self._busy = False

    def _publish_waiting_alerts(self) -> None:
        """Publish every queued alert event now (called between reading messages)."""
        while self._alerts:   # a plain read; popping takes the lock
            with self._cond:
                alerts = list(self._alerts)
                self._alerts.clear()
            self._publish_alerts(alerts)

    def _wait_for_window(self) -> None:
        """Hold further readings while ``readings_in_flight`` messages await
        their PUBACK (QoS 1), publishing any alert that comes in meanwhile."""
        if self.config.qos == 0:
            return
        window = self.config.readings_in_flight
        counters = self.counters
        while counters.published - counters.confirmed >= window and not self._closing.is_set():
            if self._alerts:
                self._publish_waiting_alerts()
            time.sleep(_WINDOW_POLL_S)

    def _publish(self, topic: str, payload: bytes, retain: bool = False, alert: bool = False) -> None:
        qos = self.config.qos
        while True:
            info = self._client.publish(topic, payload, qos=qos, retain=retain)
            if info.rc != paho.MQTT_ERR_QUEUE_SIZE:
                break
            # the client's own queue is full (broker away for long): wait, unless closing
            if self._closing.is_set():
                self._not_sent(alert)
                return
            time.sleep(0.05)
        if qos == 0 and info.rc == paho.MQTT_ERR_NO_CONN:
            self._not_sent(alert)       # QoS 0 is not kept while disconnected
            return
        with self.counters.lock:
            self.counters.published += 1
            if alert:
                self.counters.alerts_published += 1
            if qos == 0:
                self.counters.confirmed += 1

    def _not_sent(self, alert: bool) -> None:
        with self.counters.lock:
            if alert:
                self.counters.alerts_not_sent += 1
            else:
                self.counters.dropped += 1

    def _reading_topic(self, probe: str) -> str:
        topic = self._topics.get(probe)
        if topic is None:
            topic = self.config.readings_topic.format(
                site=self.site.translate(_TOPIC_UNSAFE), probe=probe.translate(_TOPIC_UNSAFE))
            self._topics[probe] = topic
        return topic

    def _records(self, batch: ProcessedBatch) -> list[dict[str, Any]]:
        names = QUALITY_NAMES
        rows = zip(
            batch.probe.tolist(), rfc3339_column(batch.ts), _nulls(batch.mv), _nulls(batch.temp_c),
            _nulls(batch.ph), _nulls(batch.neutral_ph), _nulls(batch.neutral_dev), batch.quality.tolist(),
        )
        return [
            {"kind": "reading", "probe": p, "ts": t, "mv": m, "temp_c": c, "ph": h,
             "neutral_ph": n, "neutral_dev": d, "quality": names[q]}
            for p, t, m, c, h, n, d, q in rows
        ]

    def _publish_readings(self, batches: Sequence[ProcessedBatch]) -> None:
        """Readings of one pass, in queue order; waiting alerts go out between messages."""
        dumps = orjson.dumps
        if not self.config.group_readings:
            for batch in batches:
                for rec in self._records(batch):
                    self._wait_for_window()
                    if self._alerts:
                        self._publish_waiting_alerts()
                    self._publish(self._reading_topic(rec["probe"]), dumps(rec))
            return
        groups: dict[str, list[dict[str, Any]]] = {}
        for batch in batches:
            for rec in self._records(batch):
                group = groups.get(rec["probe"])
                if group is None:
                    groups[rec["probe"]] = [rec]
                else:
                    group.append(rec)
        for probe, recs in groups.items():
            self._wait_for_window()
            if self._alerts:
                self._publish_waiting_alerts()
            self._publish(self._reading_topic(probe), dumps(recs))

    def _publish_alerts(self, alerts: Sequence[AlertEvent]) -> None:
        cfg = self.config
        site = self.site.translate(_TOPIC_UNSAFE)
        for alert in alerts:
            record = alert.to_record()
            payload = orjson.dumps(record)
            keys = {
                "site": site, "probe": alert.probe.translate(_TOPIC_UNSAFE),
                "rule": alert.rule.translate(_TOPIC_UNSAFE), "limit": alert.limit.translate(_TOPIC_UNSAFE),
                "alarm_id": alert.alarm_id.translate(_TOPIC_UNSAFE),
            }
            self._publish(cfg.alerts_topic.format(**keys), payload, alert=True)
            if cfg.alarm_state_topic is not None:
                self._publish(cfg.alarm_state_topic.format(**keys), payload, retain=True, alert=True)
