"""Benchmark: live MQTT at QoS 1 into SQLite, against a bare paho subscriber.

A real mosquitto (tests/servers.py) on a free loopback port.  Each run drains
a backlog: the subscriber's persistent session is created first, then N
messages are published (QoS 1) while it is away, so the broker holds them;
the subscriber then connects and receives them as fast as it can.  The rate is
readings from the first stored (or received) to the last, divided by that time.

* single: one reading per message on ``plant/<probe>/reading`` (the probe is
  the topic level).  Ours: ``probeflow run`` (subprocess) with the MQTT
  collector and the SQLite store; a message is acknowledged only after its
  reading is committed.  The rate is taken from the row count in the SQLite
  file (polled every 20 ms).  Baseline: ``BareSubscriber`` (paho, automatic
  acks, orjson parse only).  Target: ours >= 0.7 x bare.
* batch: 100 readings per message (arrays naming their probes).  Ours as
  above.  Baselines: a bare executemany of the same rows into the same table
  shape, 10,000 rows per transaction (target >= 0.7 x, and >= 150,000
  readings/s), and the bare paho subscriber for orientation.

mosquitto runs with the tests' settings (max_inflight_messages 100: held
acknowledgements are back-pressure, so this limit bounds ours, not the bare
subscriber's); ``--inflight N`` changes it.

Run:  .venv/bin/python bench/bench_mqtt.py [--messages N] [--batch-messages M] [--repeat R]
"""

from __future__ import annotations

import argparse
import itertools
import signal
import sqlite3
import statistics
import subprocess
import tempfile
import threading
import time
from pathlib import Path

import orjson
import paho.mqtt.client as paho
from baselines import BareSubscriber, bare_executemany, bare_readings_table
from harness import PYTHON, T0, make_readings, result, timed, write_config
from servers import Mosquitto

N_PROBES = 1000
TOPIC = "plant/+/reading"
BARE_TOPIC = "bare/+/reading"   # its own topic: a persistent session queues only its own backlog


def publish_all(port: int, messages: list[tuple[str, bytes]]) -> None:
    """Publish at QoS 1 and wait until the broker has confirmed every message."""
    done = threading.Event()
    confirmed = itertools.count(1)
    total = len(messages)

    def on_publish(client: paho.Client, userdata: object, mid: int, rc: object, props: object) -> None:
        if next(confirmed) >= total:
            done.set()

    client = paho.Client(paho.CallbackAPIVersion.VERSION2, client_id="bench-publisher",
                         protocol=paho.MQTTv5)
    client.max_inflight_messages_set(1000)
    client.max_queued_messages_set(0)
    client.on_publish = on_publish
    client.connect("127.0.0.1", port)
    client.loop_start()
    for topic, payload in messages:
        client.publish(topic, payload, qos=1)
    if not done.wait(300):
        raise RuntimeError("the broker did not confirm every published message")
    client.disconnect()
    client.loop_stop()


def single_messages(n: int, t0: float, prefix: str = "plant") -> list[tuple[str, bytes]]:
    cols = make_readings(n, N_PROBES, t0=t0)
    return [(f"{prefix}/{p}/reading", orjson.dumps({"ts": t, "mv": m, "temp_c": c}))
            for p, t, m, c in zip(cols["probe"].tolist(), cols["ts"].tolist(), cols["mv"].tolist(),
                                  cols["temp_c"].tolist())]


def batch_messages(n_msgs: int, per: int, t0: float, prefix: str = "plant") -> list[tuple[str, bytes]]:
    cols = make_readings(n_msgs * per, N_PROBES, t0=t0)
    recs = [{"probe": p, "ts": t, "mv": m, "temp_c": c}
            for p, t, m, c in zip(cols["probe"].tolist(), cols["ts"].tolist(), cols["mv"].tolist(),
                                  cols["temp_c"].tolist())]
    return [(f"{prefix}/{recs[i]['probe']}/reading", orjson.dumps(recs[i:i + per]))
            for i in range(0, len(recs), per)]


class ProbeflowRun:
    """``probeflow run`` with the MQTT collector and a SQLite store, as a subprocess."""

    def __init__(self, tmp: Path, port: int, client_id: str) -> None:
        self.tmp, self.port, self.client_id = tmp, port, client_id

    def start(self, db: Path) -> subprocess.Popen[bytes]:
        config = write_config(
            self.tmp / f"{self.client_id}.yaml", N_PROBES,
            collectors=[{"type": "mqtt", "url": f"mqtt://127.0.0.1:{self.port}", "topic": TOPIC,
                         "qos": 1, "client_id": self.client_id}],
            stores=[{"type": "sqlite", "path": str(db)}])
        log = open(self.tmp / f"{self.client_id}.log", "ab")  # noqa: SIM115 - lives as long as the child
        return subprocess.Popen([PYTHON, "-m", "probeflow", "run", "--config", str(config)],
                                stdout=subprocess.DEVNULL, stderr=log)

    @staticmethod
    def count(db: Path) -> int:
        try:
            con = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=1)
            try:
                return int(con.execute("SELECT count(*) FROM readings").fetchone()[0])
            finally:
                con.close()
        except sqlite3.Error:
            return 0

    @staticmethod
    def stop(proc: subprocess.Popen[bytes]) -> None:
        proc.send_signal(signal.SIGTERM)
        if proc.wait(30) != 0:
            raise RuntimeError(f"probeflow run exited with {proc.returncode}")

    def prime(self, publish: list[tuple[str, bytes]]) -> None:
        """Create the persistent session: run until one reading is stored."""
        db = self.tmp / f"{self.client_id}-prime.sqlite"
        proc = self.start(db)
        deadline = time.monotonic() + 60
        while self.count(db) < 1:
            if time.monotonic() > deadline or proc.poll() is not None:
                raise RuntimeError(f"probeflow run did not store the priming reading; see "
                                   f"{self.tmp / (self.client_id + '.log')}")
            publish_all(self.port, publish)
            time.sleep(0.5)
        self.stop(proc)

    def drain(self, db: Path, expected: int, timeout: float = 600) -> float:
        """Readings per second from the first stored row to the last."""
        proc = self.start(db)
        first_t = first_n = None
        deadline = time.monotonic() + timeout
        while True:
            n = self.count(db)
            now = time.perf_counter()
            if first_t is None and n > 0:
                first_t, first_n = now, n
            if n >= expected:
                break
            if time.monotonic() > deadline or proc.poll() is not None:
                proc.kill()
                raise RuntimeError(f"only {n} of {expected} readings stored")
            time.sleep(0.02)
        self.stop(proc)
        if first_t is None or first_n is None or now <= first_t:
            return float("nan")
        return (expected - first_n) / (now - first_t)


def bare_drain(port: int, client_id: str, expected: int) -> float:
    sub = BareSubscriber("127.0.0.1", port, BARE_TOPIC, client_id)
    try:
        if not sub.wait_for(expected, 600):
            raise RuntimeError(f"the bare subscriber got {sub.readings} of {expected}")
        per_msg = expected / max(sub.messages, 1)
        return (sub.readings - per_msg) / (sub.last - sub.first)
    finally:
        sub.close()


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--messages", type=int, default=20_000, help="single-reading messages per run")
    ap.add_argument("--batch-messages", type=int, default=2_000, help="100-reading messages per run")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--inflight", type=int, default=100, help="mosquitto max_inflight_messages")
    ap.add_argument("--full", action="store_true", help="100,000 single and 10,000 batch messages")
    args = ap.parse_args()
    n_single = 100_000 if args.full else args.messages
    n_batch = 10_000 if args.full else args.batch_messages
    per = 100
    epoch = itertools.count(1)
    with tempfile.TemporaryDirectory(prefix="bench-mqtt-") as tmp:
        tmpdir = Path(tmp)
        broker = Mosquitto(tmpdir / "broker", extra_conf=f"max_inflight_messages {args.inflight}\n")
        broker.start()
        try:
            ours = ProbeflowRun(tmpdir, broker.port, "bench-probeflow")
            ours.prime(single_messages(1, T0 - 86400))
            BareSubscriber("127.0.0.1", broker.port, BARE_TOPIC, "bench-bare").close()

            single: dict[str, list[float]] = {"ours": [], "bare": []}
            batch: dict[str, list[float]] = {"ours": [], "bare_sub": [], "executemany": []}
            for rep in range(args.repeat):
                for who in (("ours", "bare") if rep % 2 == 0 else ("bare", "ours")):
                    msgs = single_messages(n_single, T0 + 86400 * next(epoch),
                                           "plant" if who == "ours" else "bare")
                    publish_all(broker.port, msgs)
                    if who == "ours":
                        single["ours"].append(ours.drain(tmpdir / f"single-{rep}.sqlite", n_single))
                    else:
                        single["bare"].append(bare_drain(broker.port, "bench-bare", n_single))
                for who in (("ours", "bare_sub") if rep % 2 == 0 else ("bare_sub", "ours")):
                    msgs = batch_messages(n_batch, per, T0 + 86400 * next(epoch),
                                          "plant" if who == "ours" else "bare")
                    publish_all(broker.port, msgs)
                    if who == "ours":
                        batch["ours"].append(ours.drain(tmpdir / f"batch-{rep}.sqlite", n_batch * per))
                    else:
                        batch["bare_sub"].append(bare_drain(broker.port, "bench-bare", n_batch * per))
                cols = make_readings(n_batch * per, N_PROBES, t0=T0 + 86400 * next(epoch))
                rows = list(zip(cols["probe"].tolist(), cols["ts"].tolist(), cols["mv"].tolist(),
                                cols["temp_c"].tolist(), cols["mv"].tolist(), cols["temp_c"].tolist(),
                                cols["mv"].tolist(), ["good"] * len(cols["ts"])))
                db = bare_readings_table(tmpdir / f"bare-{rep}.sqlite")
                batch["executemany"].append(len(rows) / timed(lambda db=db, rows=rows: bare_executemany(db, rows)))
                db.close()
        finally:
            broker.kill()
    med = {k: statistics.median(v) for k, v in single.items()}
    bmed = {k: statistics.median(v) for k, v in batch.items()}
    r1 = med["ours"] / med["bare"]
    r2 = bmed["ours"] / bmed["executemany"]
    print(f"single  probeflow run (ack after SQLite commit): {med['ours']:10,.0f} readings/s")
    print(f"single  bare paho subscriber (parse only)      : {med['bare']:10,.0f} readings/s  "
          f"ratio {r1:.2f} (target >= 0.7)")
    print(f"batch   probeflow run, 100 per message         : {bmed['ours']:10,.0f} readings/s "
          f"(target >= 150,000)")
    print(f"batch   bare executemany, 10,000 per commit    : {bmed['executemany']:10,.0f} rows/s  "
          f"ratio {r2:.2f} (target >= 0.7)")
    print(f"batch   bare paho subscriber (parse only)      : {bmed['bare_sub']:10,.0f} readings/s "
          f"(orientation)")
    print(f"({n_single:,} single messages, {n_batch:,} x {per} batch messages, "
          f"max_inflight_messages {args.inflight}, median of {args.repeat})")
    result("MQTT QoS 1, 1 reading/message -> SQLite", f"{med['ours']:,.0f} readings/s",
           f"{med['bare']:,.0f} msg/s (bare paho)", r1, ">= 0.7x", f"{n_single:,} messages")
    result("MQTT QoS 1, 100 readings/message -> SQLite", f"{bmed['ours']:,.0f} readings/s",
           f"{bmed['executemany']:,.0f} rows/s (bare executemany)", r2, ">= 0.7x and >= 150k/s",
           f"{n_batch:,} messages")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
