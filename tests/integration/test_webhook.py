"""The HTTP webhook notifier against a real local http.server, alone and inside
``probeflow run``; a receiver that never answers does not hold up the readings."""

from __future__ import annotations

import json
import socket
import threading
import time
from collections.abc import Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import pytest

from probeflow.calibration import Calibration
from probeflow.config.models import WebhookSettings
from probeflow.events import AlertEvent
from probeflow.service.log import Log
from probeflow.service.webhook import WebhookNotifier

from .conftest import wait_for

INLINE_A = Calibration(4.0, 97.0, 7.0)   # tank-a's inline calibration in the test config


class Receiver:
    """A local webhook receiver: answers ``statuses`` in turn, then 200."""

    def __init__(self, statuses: list[int] | None = None) -> None:
        self.statuses = list(statuses or [])
        self.bodies: list[dict] = []
        self.requests = 0
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:
                length = int(self.headers.get("Content-Length", 0))
                body = self.rfile.read(length)
                receiver.requests += 1
                status = receiver.statuses.pop(0) if receiver.statuses else 200
                if status == 200:
                    receiver.bodies.append(json.loads(body))
                self.send_response(status)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args: object) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.url = f"http://127.0.0.1:{self.server.server_address[1]}/hook"
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)
        self.thread.start()

    def close(self) -> None:
        self.server.shutdown()
        self.server.server_close()


@pytest.fixture
def receiver() -> Iterator[Receiver]:
    r = Receiver()
    yield r
    r.close()


def alert(i: int) -> AlertEvent:
    return AlertEvent("tank-ph", "tank-a", "ph", "high", "raise", "unack_active", 1.79e9 + i,
                      9.0, 8.5, "medium", f"event {i}")


def test_retries_5xx_with_backoff_and_delivers_every_event():
    receiver = Receiver([503, 503])
    notifier = WebhookNotifier(WebhookSettings(url=receiver.url, backoff_s=0.01, max_retries=3),
                               site="marrow-creek-test", log=Log(fmt="kv"))
    notifier.write(None, [alert(i) for i in range(5)])  # type: ignore[arg-type]
    wait_for("five deliveries", lambda: len(receiver.bodies) == 5)
    notifier.close()
    receiver.close()
    assert [b["message"] for b in receiver.bodies] == [f"event {i}" for i in range(5)]
    assert {b["site"] for b in receiver.bodies} == {"marrow-creek-test"}
    assert notifier.counters.retries == 2 and notifier.counters.sent == 5
    assert notifier.counters.failed == 0


def test_a_refused_event_is_counted_not_retried():
    receiver = Receiver([400])
    notifier = WebhookNotifier(WebhookSettings(url=receiver.url, backoff_s=0.01, max_retries=5),
                               site="marrow-creek-test", log=Log(fmt="kv"))
    notifier.write(None, [alert(0), alert(1)])  # type: ignore[arg-type]
    wait_for("the second event", lambda: len(receiver.bodies) == 1)
    notifier.close()
    receiver.close()
    assert receiver.requests == 2
    assert notifier.counters.failed == 1 and notifier.counters.sent == 1


def test_gives_up_after_max_retries_when_nobody_listens():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]   # closed again: connection refused
    notifier = WebhookNotifier(WebhookSettings(url=f"http://127.0.0.1:{port}/", backoff_s=0.01,
                                               max_retries=2), site="x", log=Log(fmt="kv"))
    notifier.write(None, [alert(0)])  # type: ignore[arg-type]
    wait_for("the give-up", lambda: notifier.counters.failed == 1)
    notifier.close()
    assert notifier.counters.retries == 2 and notifier.counters.sent == 0


def readings(count: int, start: float) -> list[dict]:
    """tank-a alternating above and below the 8.5 band limit: one alert event per reading."""
    high, low = float(INLINE_A.to_mv(9.0, 25.0)), float(INLINE_A.to_mv(7.0, 25.0))
    return [{"probe": "tank-a", "ts": start + 0.01 * i, "mv": high if i % 2 == 0 else low,
             "temp_c": 25.0} for i in range(count)]


def test_service_sends_alert_events_to_the_webhook(make_site, service_of, receiver):
    site = make_site(extra=f"notify:\n  webhook: {{url: \"{receiver.url}\", timeout_s: 2}}\n")
    svc = service_of(site)
    svc.send(readings(4, time.time()))
    wait_for("four alert events at the webhook", lambda: len(receiver.bodies) == 4)
    assert [(b["alarm_id"], b["event"]) for b in receiver.bodies] == [
        ("tank-ph/tank-a/high", "raise"), ("tank-ph/tank-a/high", "clear")] * 2
    assert svc.stop() == 0


def test_a_hung_webhook_does_not_hold_up_readings(make_site, service_of):
    hung = socket.socket()
    hung.bind(("127.0.0.1", 0))
    hung.listen(1)   # accepts connections in the kernel, never answers
    url = f"http://127.0.0.1:{hung.getsockname()[1]}/hook"
    try:
        site = make_site(extra=f"notify:\n  webhook: {{url: \"{url}\", timeout_s: 3, max_retries: 3}}\n")
        svc = service_of(site)
        n = 3000
        start = time.time()
        for part in range(3):
            svc.send(readings(1000, start + 10.0 * part))
        # each event would hold a blocking sender for 4 x 3 s: all readings arrive anyway
        wait_for("every reading stored", lambda: len(site.readings()) == n)
        raised = [a for a in site.alerts("tank-ph/tank-a/high") if a["event"] == "raise"]
        assert len(raised) == n // 2
        assert svc.stop() == 0
        assert f"readings={n}" in svc.log()
        assert "webhook_retry" in svc.log() or "webhook_not_delivered_at_stop" in svc.log()
    finally:
        hung.close()
