"""Helpers for driving collectors directly: a context that records what they emit.

``Sink.commit`` decides whether the batches' ``on_committed`` hooks run, i.e.
whether the simulated pipeline "commits" the readings (and so lets the MQTT
collector acknowledge them).
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from probeflow.batch import QuarantineItem, ReadingBatch
from probeflow.collectors.base import CollectorContext


@dataclass
class Sink:
    """Collects emitted batches and quarantined items from one collector."""

    commit: bool = True
    batches: list[ReadingBatch] = field(default_factory=list)
    quarantined: list[QuarantineItem] = field(default_factory=list)
    gaps: list[tuple[str, str]] = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)
    changed: threading.Condition = field(init=False)

    def __post_init__(self) -> None:
        self.changed = threading.Condition(self.lock)

    def emit(self, batch: ReadingBatch) -> None:
        with self.changed:
            self.batches.append(batch)
            self.changed.notify_all()
        if self.commit:
            for hook in batch.on_committed:
                hook()

    def keep(self, item: QuarantineItem) -> None:
        with self.changed:
            self.quarantined.append(item)
            self.changed.notify_all()

    def session_lost(self, name: str, detail: str) -> None:
        with self.changed:
            self.gaps.append((name, detail))
            self.changed.notify_all()

    def context(self, name: str = "test", known: frozenset[str] | None = None,
                log: object = None) -> CollectorContext:
        return CollectorContext(
            name=name, emit_batch=self.emit, quarantine_item=self.keep, known_probes=known,
            on_session_lost=self.session_lost, log=log,
        )

    # -- reading back -------------------------------------------------------------
    def rows(self) -> list[tuple[str, float, float, float, float]]:
        """Every emitted reading as (probe, ts, mv, temp_c, ohms), in emission order."""
        with self.lock:
            batches = list(self.batches)
        out = []
        for b in batches:
            for i in range(len(b)):
                out.append((str(b.probe[i]), float(b.ts[i]), float(b.mv[i]),
                            float(b.temp_c[i]), float(b.ohms[i])))
        return out

    def count(self) -> int:
        with self.lock:
            return sum(len(b) for b in self.batches)

    def wait_for(self, predicate: Callable[[], bool], timeout: float = 10.0) -> bool:
        """Wait until ``predicate()`` holds (checked on every change and every 50 ms)."""
        deadline = time.monotonic() + timeout
        while True:
            if predicate():
                return True
            remaining = deadline - time.monotonic()
            if remaining <= 0:
                return False
            with self.changed:
                self.changed.wait(min(0.05, remaining))


def same_value(a: float, b: float) -> bool:
    """Equal floats, NaN equal to NaN."""
    return bool(np.isnan(a) and np.isnan(b)) or a == b


def wait_until(predicate: Callable[[], bool], timeout: float = 30.0) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.02)
    return predicate()


def publish_all(port: int, messages: list[tuple[str, bytes]], qos: int = 1,
                retain: bool = False) -> None:
    """Publish with a separate paho client and wait until the broker has every message."""
    import paho.mqtt.client as paho
    from paho.mqtt.enums import CallbackAPIVersion

    client = paho.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                         client_id="", protocol=paho.MQTTv5)
    client.connect("127.0.0.1", port)
    client.loop_start()
    try:
        infos = [client.publish(topic, payload, qos=qos, retain=retain) for topic, payload in messages]
        for info in infos:
            info.wait_for_publish(10)
            if not info.is_published():
                raise RuntimeError("the test broker did not confirm a publish")
    finally:
        client.disconnect()
        client.loop_stop()


class Listener:
    """A paho subscriber that records (topic, payload, retain) of what it receives."""

    def __init__(self, port: int, topic: str, client_id: str = "", persistent: bool = False) -> None:
        import paho.mqtt.client as paho
        from paho.mqtt.enums import CallbackAPIVersion
        from paho.mqtt.packettypes import PacketTypes
        from paho.mqtt.properties import Properties

        self.messages: list[tuple[str, bytes, bool]] = []
        self.lock = threading.Lock()
        self.subscribed = threading.Event()
        self.client = paho.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                                  client_id=client_id, protocol=paho.MQTTv5)
        self.client.reconnect_delay_set(0.1, 0.5)  # type: ignore[arg-type]

        def on_connect(client, userdata, flags, rc, props):
            client.subscribe(topic, qos=1)

        def on_subscribe(client, userdata, mid, rcs, props):
            self.subscribed.set()

        def on_message(client, userdata, msg):
            with self.lock:
                self.messages.append((msg.topic, msg.payload, bool(msg.retain)))

        self.client.on_connect = on_connect
        self.client.on_subscribe = on_subscribe
        self.client.on_message = on_message
        props = None
        if persistent:
            props = Properties(PacketTypes.CONNECT)
            props.SessionExpiryInterval = 600
        self.client.connect_async("127.0.0.1", port, clean_start=not persistent, properties=props)
        self.client.loop_start()
        if not self.subscribed.wait(10):
            raise RuntimeError("test subscriber could not subscribe")

    def received(self) -> list[tuple[str, bytes, bool]]:
        with self.lock:
            return list(self.messages)

    def close(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()
