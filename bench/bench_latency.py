"""Benchmark: end-to-end latency from an MQTT publish to the alert event.

A real mosquitto (tests/servers.py); ``probeflow run`` (subprocess) with the
MQTT collector (QoS 1, acknowledged after commit), the SQLite store, the MQTT
republish store (alert events on ``probeflow/{site}/{probe}/alert``, readings
grouped per probe) and one band rule (no on-delay) over 200 probes.  This
script publishes 2,000 readings/s (each probe 10 a second, one reading per
message, in slices every 10 ms) stamped with the wall time of publishing;
probe ``basin-000`` leaves the band and comes back every 0.25 s, so alarms are
raised and return.  It subscribes to the alert topic and takes, for every
alert event, receive time minus the time of the reading that caused it (the
event's ``ts``): publish -> broker -> collector -> conversion -> rules ->
republish -> broker -> subscriber.  The first 3 s are warm-up.  Reports the
median and the 99th percentile (aim: p99 < 100 ms).  ``--inflight`` sets
mosquitto's max_inflight_messages (default 100, as in the tests); ``--via
sqlite`` leaves out the republish store and watches the SQLite alerts table
instead (commit time, polled every 5 ms); in the default mode the commit
time is printed too, to tell the stages apart.  There is no bare
baseline for a latency; the publish rate actually reached is printed.

Run:  .venv/bin/python bench/bench_latency.py [--seconds S] [--rate R]
"""

from __future__ import annotations

import argparse
import signal
import subprocess
import tempfile
import threading
import time
from datetime import datetime
from pathlib import Path

import numpy as np
import orjson
import paho.mqtt.client as paho
from harness import PYTHON, SITE, probe_names, result, write_config
from servers import Mosquitto

N_PROBES = 200
TRIGGER = "basin-000"


def poll_alerts(db: Path, warm_until: list[float], latencies: list[float],
                stop: threading.Event) -> None:
    """Alert rows committed to SQLite: receive time = when a 5 ms poll first sees them."""
    import sqlite3

    last = 0
    con = None
    while not stop.is_set():
        try:
            if con is None:
                con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
            rows = con.execute("SELECT id, ts FROM alerts WHERE id > ? ORDER BY id", (last,)).fetchall()
        except sqlite3.Error:
            con = None
            rows = []
        now = time.time()
        for row_id, ts in rows:
            last = row_id
            if ts >= warm_until[0]:
                latencies.append(now - ts)
        time.sleep(0.005)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=30.0)
    ap.add_argument("--rate", type=int, default=2000, help="readings (messages) per second")
    ap.add_argument("--full", action="store_true", help="120 s")
    ap.add_argument("--inflight", type=int, default=100, help="mosquitto max_inflight_messages")
    ap.add_argument("--via", choices=("mqtt", "sqlite"), default="mqtt",
                    help="where alert events are watched: the republish store's topic (default) "
                         "or the SQLite alerts table, polled every 5 ms (no republish store)")
    args = ap.parse_args()
    seconds = 120.0 if args.full else args.seconds
    latencies: list[float] = []
    commit_latencies: list[float] = []
    errors: list[bytes] = []
    warm_until = [float("inf")]
    subscribed = threading.Event()
    with tempfile.TemporaryDirectory(prefix="bench-latency-") as tmp:
        tmpdir = Path(tmp)
        broker = Mosquitto(tmpdir / "broker", extra_conf=f"max_inflight_messages {args.inflight}\n")
        broker.start()
        proc = None
        try:
            url = f"mqtt://127.0.0.1:{broker.port}"
            rules = {"bands": [{"id": "basin-ph", "probes": ["basin-*"], "quantity": "ph",
                                "low": 5.5, "high": 8.5, "deadband": 0.1,
                                "on_delay_s": 0, "off_delay_s": 0}]}
            config = write_config(
                tmpdir / "latency.yaml", N_PROBES,
                collectors=[{"type": "mqtt", "url": url, "topic": "plant/+/reading", "qos": 1,
                             "client_id": "bench-latency-service"}],
                stores=[{"type": "sqlite", "path": str(tmpdir / "latency.sqlite")}]
                + ([{"type": "mqtt", "url": url, "client_id": "bench-latency-republish",
                     "group_readings": True}] if args.via == "mqtt" else []),
                rules=rules)

            def on_message(client: paho.Client, userdata: object, msg: paho.MQTTMessage) -> None:
                now = time.time()
                try:
                    rec = orjson.loads(msg.payload)
                    ts = datetime.fromisoformat(rec["ts"]).timestamp()
                    if ts >= warm_until[0]:
                        latencies.append(now - ts)
                except Exception:  # noqa: BLE001 - a raise would end paho's network thread
                    errors.append(msg.payload)

            sub = paho.Client(paho.CallbackAPIVersion.VERSION2, client_id="bench-latency-watch",
                              protocol=paho.MQTTv5)
            sub.on_message = on_message
            sub.on_subscribe = lambda c, u, mid, rc, p: subscribed.set()
            sub.connect("127.0.0.1", broker.port)
            sub.subscribe(f"probeflow/{SITE}/+/alert", qos=1)
            sub.loop_start()
            if not subscribed.wait(10):
                raise RuntimeError("could not subscribe to the alert topic")

            proc = subprocess.Popen([PYTHON, "-m", "probeflow", "run", "--config", str(config)],
                                    stdout=subprocess.DEVNULL,
                                    stderr=open(tmpdir / "run.log", "wb"))  # noqa: SIM115 - lives as long as the child
            polling = threading.Event()
            # the SQLite commit of each alert is watched in both modes, to tell the stages apart
            committed = latencies if args.via == "sqlite" else commit_latencies
            threading.Thread(target=poll_alerts, daemon=True,
                             args=(tmpdir / "latency.sqlite", warm_until, committed, polling)).start()
            pub = paho.Client(paho.CallbackAPIVersion.VERSION2, client_id="bench-latency-pub",
                              protocol=paho.MQTTv5)
            pub.max_inflight_messages_set(1000)
            pub.connect("127.0.0.1", broker.port)
            pub.loop_start()
            time.sleep(3.0)   # the service starts and subscribes

            names = probe_names(N_PROBES)
            topics = [f"plant/{p}/reading" for p in names]
            rng = np.random.default_rng(8)
            per_slice = max(1, args.rate // 100)
            k = 0
            sent = 0
            start = time.monotonic()
            warm_until[0] = time.time() + 3.0
            next_t = start
            while time.monotonic() - start < seconds:
                now = time.time()
                excursion = int((time.monotonic() - start) / 0.25) % 2 == 1
                mv = rng.normal(0.0, 15.0, per_slice)
                for i in range(per_slice):
                    probe_i = (k + i) % N_PROBES
                    value = 250.0 if (probe_i == 0 and excursion) else round(float(mv[i]), 2)
                    pub.publish(topics[probe_i], orjson.dumps({"ts": now, "mv": value, "temp_c": 18.0}),
                                qos=1)
                k += per_slice
                sent += per_slice
                next_t += 0.01
                time.sleep(max(0.0, next_t - time.monotonic()))
            elapsed = time.monotonic() - start
            time.sleep(1.0)
            polling.set()
            pub.disconnect()
            pub.loop_stop()
            proc.send_signal(signal.SIGTERM)
            proc.wait(30)
            proc = None
            sub.disconnect()
            sub.loop_stop()
        finally:
            if proc is not None:
                proc.kill()
            broker.kill()
    if not latencies:
        raise RuntimeError(f"no alert event arrived ({len(errors)} unreadable messages)")
    ms = np.array(latencies) * 1000.0
    p50, p99 = float(np.median(ms)), float(np.percentile(ms, 99))
    print(f"published {sent:,} readings in {elapsed:.1f} s ({sent / elapsed:,.0f}/s), {N_PROBES} probes")
    print(f"alert events: {len(ms)}; latency publish -> alert event: median {p50:.1f} ms, "
          f"p99 {p99:.1f} ms, max {ms.max():.1f} ms (aim p99 < 100 ms)")
    if commit_latencies:
        cm = np.array(commit_latencies) * 1000.0
        print(f"the same events committed in SQLite (5 ms polls): median {float(np.median(cm)):.1f} ms, "
              f"p99 {float(np.percentile(cm, 99)):.1f} ms")
    result("latency MQTT publish -> alert event", f"median {p50:.0f} ms, p99 {p99:.0f} ms", "-", None,
           "p99 < 100 ms", f"{sent / elapsed:,.0f} readings/s for {seconds:.0f} s, {len(ms)} events, "
           f"max_inflight_messages {args.inflight}, watched via {args.via}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
