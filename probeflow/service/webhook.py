"""HTTP webhook for alert events, off the reading path.

Configured under ``notify.webhook``::

    notify:
      webhook:
        url: https://alarms.example.net/hooks/probeflow
        timeout_s: 5
        max_retries: 5

Each alert event is POSTed as one JSON object (the alert record plus
``site``), ``Content-Type: application/json``.  The notifier is an extra,
non-durable store: ``write`` only puts events into a bounded queue and returns
at once; one thread of its own sends them, retrying connection errors, 429
and 5xx with doubling backoff up to ``max_retries``.  A 4xx other than 429 is
not retried (the receiver refused the content).  Events that could not be
delivered, and events dropped because the queue was full (oldest first), are
counted and logged; nothing here ever waits on the reading path.
"""

from __future__ import annotations

import collections
import json
import threading
import time
import urllib.error
import urllib.request
from collections.abc import Sequence
from dataclasses import dataclass

from probeflow.batch import ProcessedBatch, QuarantineItem
from probeflow.config.models import WebhookSettings
from probeflow.events import AlertEvent
from probeflow.service.log import Log, RateLimiter

__all__ = ["WebhookCounters", "WebhookNotifier", "WebhookSettings"]


@dataclass
class WebhookCounters:
    sent: int = 0
    failed: int = 0          # gave up after max_retries (or refused with 4xx)
    retries: int = 0
    dropped: int = 0         # queue full: oldest event dropped


class _Permanent(Exception):
    pass


class WebhookNotifier:
    """A store that forwards alert events to an HTTP endpoint (module docstring)."""

    durable = False

    def __init__(self, settings: WebhookSettings, *, site: str, log: Log) -> None:
        self.settings = settings
        self.site = site
        self.log = log.bind(notifier="webhook")
        self.counters = WebhookCounters()
        self._queue: collections.deque[AlertEvent] = collections.deque()
        self._cond = threading.Condition()
        self._closing = False
        self._errors = RateLimiter(60.0)
        self._thread = threading.Thread(target=self._run, name="notify-webhook", daemon=True)
        self._thread.start()

    # -- store side (the store worker's thread) ---------------------------------------------
    def write(self, batch: ProcessedBatch, alerts: Sequence[AlertEvent]) -> None:
        if not alerts:
            return
        wanted = [a for a in alerts if self.settings.events == "all" or a.event == "raise"]
        if not wanted:
            return
        dropped = 0
        with self._cond:
            for alert in wanted:
                if len(self._queue) >= self.settings.queue_events:
                    self._queue.popleft()
                    dropped += 1
                self._queue.append(alert)
            self._cond.notify()
        if dropped:
            self.counters.dropped += dropped
            self.log.error("webhook_queue_full", dropped=dropped, dropped_total=self.counters.dropped,
                           hint="the webhook receiver is down or too slow; oldest events dropped")

    def write_quarantine(self, items: Sequence[QuarantineItem]) -> None:
        """Rejected input is not notified."""

    def flush(self) -> None:
        """Nothing to make durable: delivery is best effort (the SQLite store keeps every event)."""

    def close(self, grace_s: float | None = None) -> None:
        """Deliver what is queued within ``grace_s`` (default: one timeout), then stop."""
        grace = self.settings.timeout_s if grace_s is None else grace_s
        deadline = time.monotonic() + grace
        with self._cond:
            while self._queue and time.monotonic() < deadline:
                self._cond.wait(0.05)
            self._closing = True
            left = len(self._queue)
            self._queue.clear()
            self._cond.notify_all()
        self._thread.join(max(0.1, deadline - time.monotonic()) + self.settings.timeout_s)
        if left:
            self.counters.failed += left
            self.log.error("webhook_not_delivered_at_stop", events=left)

    # -- sender thread ----------------------------------------------------------------------
    def _run(self) -> None:
        while True:
            with self._cond:
                while not self._queue and not self._closing:
                    self._cond.wait()
                if self._closing:
                    return
                alert = self._queue[0]
            self._deliver(alert)
            with self._cond:
                if self._queue and self._queue[0] is alert:
                    self._queue.popleft()
                self._cond.notify_all()

    def _deliver(self, alert: AlertEvent) -> None:
        record = alert.to_record()
        record["site"] = self.site
        body = json.dumps(record, allow_nan=False).encode("utf-8")
        delay = self.settings.backoff_s
        for attempt in range(self.settings.max_retries + 1):
            try:
                self._post(body)
                self.counters.sent += 1
                return
            except _Permanent as exc:
                self._give_up(alert, str(exc))
                return
            except (OSError, urllib.error.URLError) as exc:
                reason = f"{type(exc).__name__}: {exc}"
            if attempt == self.settings.max_retries:
                self._give_up(alert, reason)
                return
            self.counters.retries += 1
            allowed, held = self._errors.allow("retry")
            if allowed:
                self.log.warning("webhook_retry", attempt=attempt + 1, retry_in_s=delay, error=reason,
                                 suppressed=held)
            with self._cond:
                if self._closing:
                    return
                self._cond.wait(delay)
            delay = min(delay * 2.0, self.settings.backoff_max_s)

    def _post(self, body: bytes) -> None:
        request = urllib.request.Request(self.settings.url, data=body, method="POST",
                                         headers={"Content-Type": "application/json",
                                                  "User-Agent": "probeflow-webhook"})
        try:
            with urllib.request.urlopen(request, timeout=self.settings.timeout_s) as response:
                response.read()
        except urllib.error.HTTPError as exc:
            if exc.code == 429 or exc.code >= 500:
                raise OSError(f"HTTP {exc.code}") from None
            raise _Permanent(f"HTTP {exc.code}: the receiver refused the event") from None

    def _give_up(self, alert: AlertEvent, reason: str) -> None:
        self.counters.failed += 1
        self.log.error("webhook_failed", alarm_id=alert.alarm_id, alert_event=alert.event,
                       error=reason, failed_total=self.counters.failed)
