"""Pieces the fault-injection scenarios share.

* :class:`Stream` - N invented readings with unique timestamps, 4 ms apart,
  spread round-robin over a few invented probes (so every (probe, ts) is
  unique and stays unique at the millisecond precision of the time-series
  store);
* :func:`write_config` - a ``probeflow run`` config (YAML) for one instance;
* :class:`ServiceProcess` - ``probeflow run`` as a real subprocess, with
  SIGKILL / SIGTERM and restart, its stderr kept in a log file;
* :class:`AtLeastOncePublisher` - a paho publisher, QoS 1, persistent session,
  that keeps every message until the broker has acknowledged it and
  publishes it again otherwise;
* :func:`handshake` - proves a collector is subscribed before a stream starts;
* :class:`Schedule` - fault actions on their own thread while the stream runs;
* :func:`sqlite_counts`, :func:`victoria_counts` - what ended up where;
* :func:`wait_until`, :func:`wait_for_count` - poll with a generous timeout (no
  timed assertions: the timeout only keeps a broken run from hanging).

The site, probes and topics are invented for these tests.
"""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import threading
import time
import urllib.request
from collections import deque
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import paho.mqtt.client as paho
import yaml
from paho.mqtt.enums import CallbackAPIVersion
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

__all__ = [
    "PROBES",
    "SENTINEL_PROBE",
    "AtLeastOncePublisher",
    "Schedule",
    "SeriesCounts",
    "ServiceProcess",
    "Stream",
    "expected_ms_keys",
    "handshake",
    "mqtt_collector",
    "paced",
    "publish_stream",
    "scrape_metrics",
    "sqlite_counts",
    "sqlite_keys",
    "victoria_counts",
    "wait_for_count",
    "wait_until",
    "write_config",
]

SITE = "kestrel-fen-works"
"""Invented site name."""

PROBES = ("lagoon-1", "lagoon-2", "lagoon-3", "clarifier-out")
"""Invented probe ids; every scenario's readings are spread over these."""

SENTINEL_PROBE = "handshake"
"""A probe id used only to prove that a collector is subscribed; never counted."""

STEP_MS = 4
"""Gap between consecutive readings of a stream [ms]; > 1 ms so every reading
keeps its own timestamp at the time-series store's millisecond precision."""

TS_MEASUREMENT_FIELD = "ph_mv"
"""victoria-metrics series name of the readings' mv field (measurement ``ph``,
field ``mv``: always written when the mv is finite, which it always is here)."""


def wait_until(condition: Callable[[], Any], timeout: float, what: str, interval: float = 0.2) -> Any:
    """Poll ``condition`` until it returns something truthy; fail with ``what`` after ``timeout`` s."""
    deadline = time.monotonic() + timeout
    last: Any = None
    while True:
        try:
            last = condition()
        except AssertionError:
            raise
        except Exception as exc:  # noqa: BLE001 - a server may be restarting; try again
            last = exc
        else:
            if last:
                return last
        if time.monotonic() >= deadline:
            raise AssertionError(f"gave up after {timeout:g} s waiting for {what} (last: {last!r})")
        time.sleep(interval)


def wait_for_count(count: Callable[[], int], n: int, timeout: float, what: str) -> int:
    """Poll ``count()`` until it reaches ``n``; fail naming the last count after ``timeout`` s."""
    seen: list[int] = []

    def reached() -> bool:
        seen.append(count())
        return seen[-1] >= n

    try:
        wait_until(reached, timeout, what)
    except AssertionError as exc:
        raise AssertionError(f"{exc}: last count {seen[-1] if seen else None} of {n}") from None
    return seen[-1]


# -- the readings ---------------------------------------------------------------------------
@dataclass(frozen=True)
class Stream:
    """``n`` readings, ``STEP_MS`` apart, starting ``t0_ms`` (epoch milliseconds)."""

    n: int
    t0_ms: int = field(default_factory=lambda: (int(time.time()) - 3600) * 1000)
    probes: Sequence[str] = PROBES

    def probe(self, i: int) -> str:
        return self.probes[i % len(self.probes)]

    def ts(self, i: int) -> float:
        return (self.t0_ms + STEP_MS * i) / 1000.0

    def mv(self, i: int) -> float:
        return round(-60.0 + (i % 240) * 0.5, 2)   # pH about 6..10, invented

    def record(self, i: int) -> dict[str, Any]:
        return {"probe": self.probe(i), "ts": self.ts(i), "mv": self.mv(i), "temp_c": 18.5}

    def payload(self, i: int) -> bytes:
        return json.dumps(self.record(i)).encode()

    def topic(self, i: int, prefix: str = "kestrel") -> str:
        return f"{prefix}/{self.probe(i)}/reading"

    def csv_line(self, i: int) -> bytes:
        """One serial line ``probe,ts,mv,temp_c``."""
        return f"{self.probe(i)},{self.ts(i):.3f},{self.mv(i)},18.5\r\n".encode()

    @property
    def ts_range(self) -> tuple[float, float]:
        return self.ts(0), self.ts(self.n - 1)


# -- the service ----------------------------------------------------------------------------
def write_config(
    path: Path,
    *,
    collectors: list[dict[str, Any]],
    sqlite_path: Path,
    influx: dict[str, Any] | None,
    metrics_port: int = 0,
    probes: Iterable[str] = (*PROBES, SENTINEL_PROBE),
    service: dict[str, Any] | None = None,
) -> Path:
    """A ``probeflow run`` config: the given collectors, SQLite and (optionally) the influx store."""
    stores: list[dict[str, Any]] = [{"type": "sqlite", "path": str(sqlite_path)}]
    if influx is not None:
        stores.append({
            "type": "influx", "org": "faults", "bucket": "ph", "token": "not-checked-by-victoria",
            "batch_lines": 500, "retry_initial_s": 0.2, "retry_max_s": 1.0, "timeout_s": 3.0,
            "flush_timeout_s": 3.0, **influx,
        })
    doc = {
        "site": SITE,
        "probes": [{"id": p, "calibration": {"offset_mv": 0.0, "slope_pct": 100.0, "zero_ph": 7.0}}
                   for p in probes],
        "collectors": collectors,
        "stores": stores,
        "service": {"batch_ms": 20, "stop_timeout_s": 10.0,
                    "metrics": {"port": metrics_port}, **(service or {})},
    }
    path.write_text(yaml.safe_dump(doc, sort_keys=False))
    return path


class ServiceProcess:
    """``probeflow run --config FILE`` as a child process (stderr appended to ``log_path``)."""

    def __init__(self, config: Path, log_path: Path) -> None:
        self.config = config
        self.log_path = log_path
        self.proc: subprocess.Popen[bytes] | None = None
        self.starts = 0

    def start(self) -> None:
        env = {**os.environ, "PYTHONUNBUFFERED": "1"}
        before = self.log_path.stat().st_size if self.log_path.exists() else 0
        with open(self.log_path, "ab") as log:
            self.proc = subprocess.Popen(
                [sys.executable, "-m", "probeflow", "run", "--config", str(self.config)],
                stdout=log, stderr=subprocess.STDOUT, env=env, start_new_session=True,
            )
        self.starts += 1
        wait_until(lambda: self._started_since(before), 60, "the service to log service_started")

    def _started_since(self, offset: int) -> bool:
        if self.proc is not None and self.proc.poll() is not None:
            raise AssertionError(f"probeflow run exited with {self.proc.returncode}:\n{self.log_tail()}")
        with open(self.log_path, "rb") as f:
            f.seek(offset)
            return b"event=service_started" in f.read()

    def kill(self) -> None:
        """Crash: SIGKILL, no chance to flush or ack anything."""
        self._end(signal.SIGKILL)

    def stop(self) -> int:
        """Clean stop: SIGTERM; returns the exit status."""
        return self._end(signal.SIGTERM)

    def _end(self, sig: int) -> int:
        if self.proc is None:
            return 0
        if self.proc.poll() is None:
            self.proc.send_signal(sig)
        try:
            code = self.proc.wait(60)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            code = self.proc.wait(10)
        self.proc = None
        return code

    def log_text(self) -> str:
        return self.log_path.read_text(errors="replace") if self.log_path.exists() else ""

    def log_tail(self, chars: int = 4000) -> str:
        return self.log_text()[-chars:]


def scrape_metrics(port: int) -> str:
    with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=5) as resp:
        return resp.read().decode()


# -- the publisher --------------------------------------------------------------------------
class AtLeastOncePublisher:
    """QoS 1 publisher with a persistent session that never gives up on a message.

    paho keeps unacknowledged QoS 1 messages and sends them again after a
    reconnect; on top of that every message is remembered until its PUBACK
    arrived, and :meth:`settle` publishes again whatever has not been
    acknowledged (a second copy is harmless: the stores keep one per
    (probe, ts)).
    """

    def __init__(self, port: int, client_id: str) -> None:
        self.port = port
        self.client = paho.Client(CallbackAPIVersion.VERSION2, client_id=client_id,
                                  protocol=paho.MQTTv5)
        self.client.max_inflight_messages_set(50)
        self.client.max_queued_messages_set(0)
        self.client.reconnect_delay_set(0.1, 0.5)
        self._pending: dict[int, tuple[str, bytes, paho.MQTTMessageInfo]] = {}
        self._lock = threading.Lock()
        self.connected = threading.Event()
        self.republished = 0
        self.client.on_connect = self._on_connect
        self.client.on_disconnect = self._on_disconnect
        # paho's own log, last lines only: printed when a reconnect never comes
        self._paho_log: deque[str] = deque(maxlen=60)
        self.client.on_log = self._on_log

    def _on_connect(self, client: Any, userdata: Any, flags: Any, reason_code: Any, props: Any) -> None:
        if not reason_code.is_failure:
            self.connected.set()

    def _on_disconnect(self, client: Any, userdata: Any, flags: Any, reason_code: Any, props: Any) -> None:
        self.connected.clear()

    def _on_log(self, client: Any, userdata: Any, level: int, text: str) -> None:
        self._paho_log.append(f"{time.monotonic():.3f} {text[:200]}")

    def diagnosis(self) -> str:
        """What the publisher knows about its connection: for a failure message."""
        thread = getattr(self.client, "_thread", None)
        alive = thread is not None and thread.is_alive()
        return (f"paho network thread alive: {alive}; connected: {self.client.is_connected()}; "
                f"unacknowledged: {len(self._pending)}; paho log (newest last):\n  "
                + "\n  ".join(self._paho_log))

    def start(self) -> None:
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = 3600
        self.client.connect_async("127.0.0.1", self.port, keepalive=10, clean_start=False,
                                  properties=props)
        self.client.loop_start()
        wait_until(self.connected.is_set, 30, "the publisher to connect")

    def publish(self, key: int, topic: str, payload: bytes) -> None:
        info = self.client.publish(topic, payload, qos=1)
        with self._lock:
            self._pending[key] = (topic, payload, info)
        self._forget_acknowledged()

    @staticmethod
    def _acknowledged(info: paho.MQTTMessageInfo) -> bool:
        # A message published while disconnected carries rc NO_CONN for good (paho
        # still sends it after the reconnect, but is_published() raises then):
        # count it as unacknowledged, settle() publishes it again.
        return info.rc == paho.MQTT_ERR_SUCCESS and info.is_published()

    def _forget_acknowledged(self) -> None:
        with self._lock:
            done = [k for k, (_t, _p, info) in self._pending.items() if self._acknowledged(info)]
            for k in done:
                del self._pending[k]

    @property
    def unacknowledged(self) -> int:
        self._forget_acknowledged()
        return len(self._pending)

    def settle(self, timeout: float = 60.0) -> None:
        """Until the broker acknowledged every message: wait, and publish again what stays unacknowledged."""
        deadline = time.monotonic() + timeout
        while self.unacknowledged:
            if time.monotonic() > deadline:
                raise AssertionError(f"{self.unacknowledged} messages never acknowledged by the broker")
            if not self.connected.wait(30):
                raise AssertionError("the publisher did not reconnect within 30 s; " + self.diagnosis())
            with self._lock:
                items = list(self._pending.items())
            for key, (topic, payload, info) in items:
                if info.rc == paho.MQTT_ERR_SUCCESS:
                    info.wait_for_publish(timeout=2.0)
                if not self._acknowledged(info):
                    self.republished += 1
                    new = self.client.publish(topic, payload, qos=1)
                    with self._lock:
                        self._pending[key] = (topic, payload, new)

    def stop(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()


# -- what ended up where ----------------------------------------------------------------------
def sqlite_keys(path: Path, probes: Sequence[str] = PROBES) -> list[tuple[str, float]]:
    """All (probe, ts) rows of the readings table for ``probes`` (duplicates kept)."""
    if not path.exists():
        return []
    con = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=30)
    try:
        marks = ",".join("?" * len(probes))
        return [(p, t) for p, t in con.execute(
            f"SELECT probe, ts FROM readings WHERE probe IN ({marks})", tuple(probes))]
    except sqlite3.OperationalError:
        return []   # the service has not created the table yet
    finally:
        con.close()


def sqlite_counts(path: Path, probes: Sequence[str] = PROBES) -> tuple[int, int]:
    """(rows, distinct (probe, ts)) of the readings of ``probes``."""
    keys = sqlite_keys(path, probes)
    return len(keys), len(set(keys))


@dataclass(frozen=True)
class SeriesCounts:
    samples: int           # samples over all series
    distinct: int          # distinct (probe, timestamp) over all series
    per_series: dict[str, tuple[int, int]]   # series -> (samples, distinct timestamps)
    keys: frozenset[tuple[str, int]]         # (probe, ms timestamp)

    @property
    def duplicated_series(self) -> dict[str, tuple[int, int]]:
        return {k: v for k, v in self.per_series.items() if v[0] != v[1]}


def victoria_counts(victoria: Any, probes: Sequence[str] = PROBES) -> SeriesCounts:
    """Samples of the readings' mv series per (probe, quality) series in victoria-metrics."""
    match = f'{{__name__="{TS_MEASUREMENT_FIELD}",probe=~"{"|".join(probes)}"}}'
    per: dict[str, tuple[int, int]] = {}
    keys: list[tuple[str, int]] = []
    for series in victoria.export(match):
        labels = series["metric"]
        name = ",".join(f"{k}={labels[k]}" for k in sorted(labels))
        stamps = series["timestamps"]
        per[name] = (len(stamps), len(set(stamps)))
        keys.extend((labels["probe"], int(t)) for t in stamps)
    return SeriesCounts(sum(v[0] for v in per.values()), len(set(keys)), per, frozenset(keys))


def expected_ms_keys(stream: Stream, indices: Iterable[int]) -> set[tuple[str, int]]:
    return {(stream.probe(i), stream.t0_ms + STEP_MS * i) for i in indices}


# -- scenario plumbing ------------------------------------------------------------------------
def mqtt_collector(port: int, client_id: str = "kestrel-logger-1",
                   topic: str | list[str] = "kestrel/+/reading") -> dict[str, Any]:
    """The mqtt collector section: QoS 1, persistent session under a fixed client id."""
    return {"type": "mqtt", "url": f"mqtt://127.0.0.1:{port}", "topic": topic,
            "client_id": client_id, "qos": 1, "keepalive": 5,
            "reconnect_min_s": 0.1, "reconnect_max_s": 1.0}


def handshake(publisher: AtLeastOncePublisher, db: Path, prefix: str = "kestrel",
              timeout: float = 60.0) -> None:
    """Publish sentinel readings until one is stored: the collector is subscribed and its
    persistent session exists, so from now on the broker keeps what it cannot deliver."""
    deadline = time.monotonic() + timeout
    k = 0
    while not sqlite_keys(db, (SENTINEL_PROBE,)):
        if time.monotonic() > deadline:
            raise AssertionError(f"no handshake reading reached {db} in {timeout:g} s")
        k += 1
        body = json.dumps({"probe": SENTINEL_PROBE, "ts": time.time() - 7200 + k, "mv": 0.0}).encode()
        publisher.client.publish(f"{prefix}/{SENTINEL_PROBE}/reading", body, qos=1)
        # one at a time: a sentinel the broker accepted before the subscription
        # existed is gone, one accepted after it arrives within this wait
        stop = time.monotonic() + 2.0
        while time.monotonic() < stop and not sqlite_keys(db, (SENTINEL_PROBE,)):
            time.sleep(0.05)


class Schedule:
    """Fault actions run on their own thread at given offsets [s] from :meth:`start`."""

    def __init__(self, actions: Sequence[tuple[float, Callable[[], None]]]) -> None:
        self.actions = sorted(actions, key=lambda a: a[0])
        self.errors: list[BaseException] = []
        self.log: list[tuple[float, str]] = []
        self._thread = threading.Thread(target=self._run, daemon=True)

    def start(self) -> None:
        self._t0 = time.monotonic()
        self._thread.start()

    def _run(self) -> None:
        # An action that fails does not stop the schedule: the later ones bring
        # servers back, and a scenario left with a server down only hides the
        # first error behind a timeout.
        for at, action in self.actions:
            delay = self._t0 + at - time.monotonic()
            if delay > 0:
                time.sleep(delay)
            name = getattr(action, "__name__", "action")
            try:
                action()
                self.log.append((time.monotonic() - self._t0, name))
            except BaseException as exc:  # noqa: BLE001 - reported by join() and check()
                self.log.append((time.monotonic() - self._t0, f"{name} failed: {exc!r}"))
                self.errors.append(exc)

    def check(self) -> None:
        """Raise the first error of an action run so far (the schedule may still be running)."""
        if self.errors:
            raise AssertionError(f"a fault action failed; schedule log: {self.log}") from self.errors[0]

    def join(self, timeout: float = 120.0) -> None:
        self._thread.join(timeout)
        if self._thread.is_alive():
            raise AssertionError("the fault schedule did not finish")
        if self.errors:
            raise self.errors[0]


def paced(indices: Sequence[int], rate_per_s: float) -> Iterable[int]:
    """Yield ``indices`` at ``rate_per_s``, sleeping between them (keeps a stream going for a while)."""
    t0 = time.monotonic()
    for k, i in enumerate(indices):
        delay = t0 + k / rate_per_s - time.monotonic()
        if delay > 0:
            time.sleep(delay)
        yield i


def publish_stream(publisher: AtLeastOncePublisher, stream: Stream, rate_per_s: float,
                   prefix: str = "kestrel", faults: Schedule | None = None) -> None:
    """Publish ``stream`` at ``rate_per_s`` and settle it.  With ``faults``, a failed fault
    action is reported as the cause rather than the timeout it leads to."""
    try:
        for i in paced(range(stream.n), rate_per_s):
            publisher.publish(i, stream.topic(i, prefix), stream.payload(i))
        publisher.settle()
    except AssertionError:
        if faults is not None:
            faults.check()
        raise


def assert_every_reading_once(db: Path, victoria: Any, stream: Stream, n: int) -> None:
    """The end state every scenario must reach: the n readings of ``stream`` exactly once in
    SQLite (rows == distinct (probe, ts) == n, the same keys) and in victoria-metrics (no
    series holding a timestamp twice, n samples, the same keys at millisecond precision)."""
    rows, distinct = sqlite_counts(db)
    assert (rows, distinct) == (n, n)
    assert set(sqlite_keys(db)) == {(stream.probe(i), stream.ts(i)) for i in range(n)}
    counts = victoria_counts(victoria)
    assert counts.duplicated_series == {}
    assert (counts.samples, counts.distinct) == (n, n)
    assert counts.keys == expected_ms_keys(stream, range(n))
