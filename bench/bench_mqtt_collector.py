"""Benchmark: MqttCollector draining a broker queue, against a bare paho subscriber.

A real mosquitto (tests/servers.py) holds N QoS 1 messages for each of two
persistent sessions, queued while they were offline; each client then connects
and drains its queue.  The baseline is the plainest paho subscriber: automatic
acknowledgement and one orjson decode per message.  The collector validates
every payload, coalesces micro-batches, builds numpy columns and acknowledges
each message only after the (simulated) commit, in order, from its ack thread.
Reports messages per second for both and the ratio collector / bare.  The
payloads are invented readings of an invented site.

Run:  .venv/bin/python bench/bench_mqtt_collector.py [--messages N] [--inflight K]
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path
from typing import Any

import orjson
import paho.mqtt.client as paho
from paho.mqtt.enums import CallbackAPIVersion
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

from servers import Mosquitto

from probeflow.batch import QuarantineItem, ReadingBatch
from probeflow.collectors.base import CollectorContext
from probeflow.collectors.mqtt import MqttCollector

TOPIC = "larkmoor/+/reading"

_PUBLISHER = r"""
import sys, orjson, paho.mqtt.client as paho
from paho.mqtt.enums import CallbackAPIVersion
port, n = int(sys.argv[1]), int(sys.argv[2])
c = paho.Client(callback_api_version=CallbackAPIVersion.VERSION2, protocol=paho.MQTTv5)
c.max_inflight_messages_set(1000)
c.connect("127.0.0.1", port)
c.loop_start()
last = None
for i in range(n):
    body = {"ts": 1764633600.0 + i * 0.001, "mv": -12.5 + (i % 100) * 0.1, "temp_c": 25.0}
    last = c.publish(f"larkmoor/tank-{i % 8}/reading", orjson.dumps(body), qos=1)
last.wait_for_publish(120)
c.disconnect()
c.loop_stop()
"""


def _bare_client(port: int, on_message: Any, subscribed: threading.Event) -> paho.Client:
    client = paho.Client(callback_api_version=CallbackAPIVersion.VERSION2, client_id="bench-bare",
                         protocol=paho.MQTTv5)
    client.on_connect = lambda c, u, f, rc, p: c.subscribe(TOPIC, qos=1)
    client.on_subscribe = lambda *a: subscribed.set()
    client.on_message = on_message
    props = Properties(PacketTypes.CONNECT)
    props.SessionExpiryInterval = 3600
    client.connect("127.0.0.1", port, clean_start=False, properties=props)
    return client


class _Counter:
    """The simulated pipeline: counts readings and commits at once."""

    def __init__(self) -> None:
        self.rows = 0
        self.cond = threading.Condition()

    def emit(self, batch: ReadingBatch) -> None:
        with self.cond:
            self.rows += len(batch)
            self.cond.notify_all()
        for hook in batch.on_committed:
            hook()

    def wait(self, n: int, timeout: float) -> None:
        with self.cond:
            self.cond.wait_for(lambda: self.rows >= n, timeout)


def _collector(broker: Mosquitto, counter: _Counter) -> MqttCollector:
    def keep(item: QuarantineItem) -> None:
        raise RuntimeError(f"unexpected reject: {item.reason}")

    config = MqttCollector.Config(type="mqtt", url=broker.url, topic=TOPIC, client_id="bench-collector")
    return MqttCollector(config, CollectorContext("bench", counter.emit, keep))


def prepare(broker: Mosquitto, n: int) -> None:
    """Create both persistent sessions, then queue n messages for each while offline."""
    c = _collector(broker, _Counter())
    c.start()
    c.subscribed.wait(10)
    c.stop()
    sub = threading.Event()
    bare = _bare_client(broker.port, lambda *a: None, sub)
    bare.loop_start()
    sub.wait(10)
    bare.disconnect()
    bare.loop_stop()
    subprocess.run([sys.executable, "-c", _PUBLISHER, str(broker.port), str(n)], check=True)


def drain_bare(broker: Mosquitto, n: int) -> float:
    got = [0]
    done = threading.Event()

    def on_message(client: paho.Client, userdata: Any, msg: paho.MQTTMessage) -> None:
        orjson.loads(msg.payload)
        got[0] += 1
        if got[0] >= n:
            done.set()

    t0 = time.perf_counter()
    client = _bare_client(broker.port, on_message, threading.Event())
    client.loop_start()
    done.wait(300)
    elapsed = time.perf_counter() - t0
    client.disconnect()
    client.loop_stop()
    return n / elapsed


def drain_collector(broker: Mosquitto, n: int) -> float:
    counter = _Counter()
    collector = _collector(broker, counter)
    t0 = time.perf_counter()
    collector.start()
    counter.wait(n, 300)
    elapsed = time.perf_counter() - t0
    collector.stop()
    if counter.rows < n:
        raise RuntimeError(f"only {counter.rows} of {n} readings arrived")
    return n / elapsed


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--messages", type=int, default=30_000)
    parser.add_argument("--inflight", type=int, default=100, help="broker max_inflight_messages")
    args, _ = parser.parse_known_args()
    with tempfile.TemporaryDirectory() as tmp:
        broker = Mosquitto(Path(tmp) / "mosquitto")
        broker.conf.write_text(broker.conf.read_text().replace(
            "max_inflight_messages 100", f"max_inflight_messages {args.inflight}"))
        broker.start()
        try:
            prepare(broker, args.messages)
            bare = drain_bare(broker, args.messages)
            ours = drain_collector(broker, args.messages)
        finally:
            broker.kill()
    print(f"MQTT drain of {args.messages} queued QoS 1 messages (broker in-flight limit {args.inflight}):")
    print(f"  bare paho subscriber (auto ack, json decode): {bare:10,.0f} msg/s")
    print(f"  MqttCollector (validate, batch, ack after commit): {ours:10,.0f} msg/s")
    print(f"  ratio collector / bare: {ours / bare:.2f}")


if __name__ == "__main__":
    main()
