"""Ordered, generation-checked MQTT acknowledgements, sent from one thread.

The MQTT collector registers each QoS 1 message here in arrival order.  When
the pipeline has committed a batch (its ``on_committed`` hook runs), or when a
malformed message has been handed to the quarantine, the message's entry is
marked *settled*.  The ack thread sends PUBACKs from the head of the ledger only
while the head is settled, so acknowledgements leave in arrival order even when
settlements come out of order (MQTT 5.0, 4.6: a client acknowledges in the
order it received).

A reconnect starts a new *generation*.  Entries of an older generation are
dropped, never acked: the broker redelivers those messages on the new
connection, with the same packet ids, and acking the old entry would confirm a
redelivery that is not stored yet.  The stores are idempotent on (probe, ts), so
the second copy is stored once.
"""

from __future__ import annotations

import logging
import threading
from collections import deque
from collections.abc import Callable

__all__ = ["AckEntry", "AckLedger"]

_log = logging.getLogger("probeflow.collectors.mqtt")

AckEntry = list  # [generation: int, mid: int, qos: int, settled: bool]
"""One held acknowledgement; a list (not a dataclass) because it is made per message."""

_SETTLED = 3


class AckLedger:
    """Held acknowledgements of one MQTT connection, released in order.

    ``send(mid, qos)`` is called only from the ledger's own thread.
    """

    def __init__(self, send: Callable[[int, int], object], name: str = "mqtt") -> None:
        self._send = send
        self._entries: deque[AckEntry] = deque()
        self._lock = threading.Lock()
        self._wake = threading.Event()
        self._stopping = threading.Event()
        self._generation = 0
        self._thread = threading.Thread(target=self._run, name=f"{name}-acks", daemon=True)
        self.sent = 0               # acks handed to the client
        self.dropped_stale = 0      # acks of an older connection, not sent

    # -- called by the collector -------------------------------------------------
    @property
    def generation(self) -> int:
        return self._generation

    def new_generation(self) -> int:
        """A new connection is up: forget every held ack of the older ones."""
        with self._lock:
            self._generation += 1
            stale = len(self._entries)
            self._entries.clear()
            self.dropped_stale += stale
        if stale:
            _log.info("reconnected: %d unacknowledged message(s) will be redelivered by the broker", stale)
        return self._generation

    def hold(self, generation: int, mid: int, qos: int) -> AckEntry | None:
        """Register a received message in arrival order; None if it needs no ack."""
        if qos == 0:
            return None
        entry: AckEntry = [generation, mid, qos, False]
        with self._lock:
            if generation != self._generation:
                self.dropped_stale += 1
                return None
            self._entries.append(entry)
        return entry

    def settle(self, entries: list[AckEntry]) -> None:
        """Mark entries as safe to acknowledge (committed or quarantined)."""
        for entry in entries:
            entry[_SETTLED] = True
        self._wake.set()

    def pending(self) -> int:
        with self._lock:
            return len(self._entries)

    # -- the ack thread ----------------------------------------------------------
    def start(self) -> None:
        self._thread.start()

    def stop(self, timeout: float = 2.0) -> None:
        self._stopping.set()
        self._wake.set()
        if self._thread.is_alive():
            self._thread.join(timeout)

    def _release_settled_head(self) -> None:
        # The generation check and the send happen under the lock, so a reconnect
        # (new_generation) cannot slip between them.  paho's on_connect runs
        # without the client's packet mutex, so this lock order cannot deadlock.
        with self._lock:
            entries = self._entries
            while entries and entries[0][_SETTLED]:
                generation, mid, qos, _ = entries.popleft()
                if generation != self._generation:
                    self.dropped_stale += 1
                    continue
                self._send(mid, qos)
                self.sent += 1

    def _run(self) -> None:
        while True:
            self._wake.wait(0.5)
            self._wake.clear()
            try:
                self._release_settled_head()
            except Exception:  # noqa: BLE001 - never let the ack thread die
                _log.exception("sending an MQTT acknowledgement failed")
            if self._stopping.is_set():
                return
