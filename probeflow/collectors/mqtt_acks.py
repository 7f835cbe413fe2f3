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

Acknowledgements are sent *a group at a time*: the ack thread takes every
settled entry at the head of the ledger and hands their packet ids to the
sender at once.  :class:`GroupAckSender` writes the whole group into paho's
outgoing queue as one buffer of consecutive PUBACK packets, so the network
thread is woken once and writes them with one socket send, where
``client.ack`` per message queues one packet, wakes the loop and costs one
send each.  The bytes on the wire are the same as ``client.ack`` would send
(tested against paho's own packet).
"""

from __future__ import annotations

import logging
import struct
import threading
from collections import deque
from collections.abc import Callable, Sequence
from typing import Any

__all__ = ["AckEntry", "AckLedger", "GroupAckSender", "puback_packets"]

_log = logging.getLogger("probeflow.collectors.mqtt")

AckEntry = list  # [generation: int, mid: int | list[int], qos: int, settled: bool]
"""One held acknowledgement, or a group of them (``mid`` a list of packet ids in
arrival order, all QoS 1); a list, not a dataclass, because it is made often."""

_SETTLED = 3

_PUBACK = 0x40
"""Fixed-header byte of a PUBACK (MQTT 5.0 section 3.4.1; the same in 3.1.1)."""

_PUBACK_WORD = (_PUBACK << 24) | (2 << 16)
"""PUBACK fixed header plus Remaining Length 2, as the top half of a 32-bit word."""


def puback_packets(mids: Sequence[int]) -> bytes:
    """Consecutive PUBACK packets for the packet ids ``mids``, in that order.

    Each is 4 bytes: 0x40, Remaining Length 2, the packet identifier (16 bits,
    big endian).  MQTT 5.0 section 3.4.2.1 lets the Reason Code be left out when
    it is 0x00 (Success) and there are no properties; MQTT 3.1.1 section 3.4 has
    no Reason Code.  paho's ``client.ack`` sends the same 4 bytes.

    >>> puback_packets([1, 258]).hex()
    '4002000140020102'
    """
    if not mids:
        return b""
    if min(mids) < 1 or max(mids) > 0xFFFF:
        raise ValueError(f"an MQTT packet identifier lies between 1 and 65535, got {min(mids)}..{max(mids)}")
    word = _PUBACK_WORD
    return struct.pack(f"!{len(mids)}I", *[word | mid for mid in mids])


class GroupAckSender:
    """Sends the PUBACKs of a group of QoS 1 messages through paho in one go.

    The group goes into the client's outgoing packet queue as one buffer
    (``Client._packet_queue``, the function ``client.ack`` itself calls, safe
    from any thread: it appends to a deque and wakes the network loop).  If the
    installed paho has no such function, each id goes through ``client.ack``.
    A reconnect clears paho's outgoing queue, so a group queued just before it
    is not sent; those messages are redelivered (the ledger drops their
    entries), which is the same as with ``client.ack``.
    """

    def __init__(self, client: Any) -> None:
        self._client = client
        queue = getattr(client, "_packet_queue", None)
        self._queue = queue if callable(queue) else None
        self.groups = 0    # calls that sent something
        self.packets = 0   # PUBACKs sent

    @property
    def grouped(self) -> bool:
        """True when groups go out as one buffer (False: one ``client.ack`` each)."""
        return self._queue is not None

    def __call__(self, mids: Sequence[int]) -> None:
        if not mids:
            return
        if self._queue is None or len(mids) == 1:
            for mid in mids:
                self._client.ack(mid, 1)
        else:
            self._queue(_PUBACK, puback_packets(mids), 0, 0)
        self.groups += 1
        self.packets += len(mids)


class AckLedger:
    """Held acknowledgements of one MQTT connection, released in order.

    ``send(mid, qos)`` is called only from the ledger's own thread; when
    ``send_group(mids)`` is given, it is called instead, once per run of settled
    entries at the head (all QoS 1, in arrival order).
    """

    def __init__(self, send: Callable[[int, int], object], name: str = "mqtt",
                 send_group: Callable[[list[int]], object] | None = None) -> None:
        self._send = send
        self._send_group = send_group
        self._entries: deque[AckEntry] = deque()
        self._lock = threading.Lock()
        self._wake = threading.Event()
        self._stopping = threading.Event()
        self._generation = 0
        self._thread = threading.Thread(target=self._run, name=f"{name}-acks", daemon=True)
        self.sent = 0               # acks handed to the client
        self.dropped_stale = 0      # acks of an older connection, not sent
        self._held = 0              # messages in group entries beyond one per entry

    # -- called by the collector -------------------------------------------------
    @property
    def generation(self) -> int:
        return self._generation

    def new_generation(self) -> int:
        """A new connection is up: forget every held ack of the older ones."""
        with self._lock:
            self._generation += 1
            stale = len(self._entries) + self._held
            self._entries.clear()
            self._held = 0
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

    def hold_group(self, generation: int, mids: Sequence[int]) -> AckEntry | None:
        """Register QoS 1 messages received one after the other as *one* entry
        (one lock and one allocation per group); None if the connection they
        came on is no longer the current one (they are then counted as stale)."""
        if not mids:
            return None
        entry: AckEntry = [generation, list(mids), 1, False]
        with self._lock:
            if generation != self._generation:
                self.dropped_stale += len(mids)
                return None
            self._entries.append(entry)
            self._held += len(mids) - 1
        return entry

    def settle(self, entries: list[AckEntry]) -> None:
        """Mark entries as safe to acknowledge (committed or quarantined)."""
        for entry in entries:
            entry[_SETTLED] = True
        self._wake.set()

    def pending(self) -> int:
        with self._lock:
            return len(self._entries) + self._held

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
            current = self._generation
            group = self._send_group
            mids: list[int] = []
            while entries and entries[0][_SETTLED]:
                generation, mid, qos, _ = entries.popleft()
                many = type(mid) is list
                count = len(mid) if many else 1
                if many:
                    self._held -= count - 1
                if generation != current:
                    self.dropped_stale += count
                    continue
                if group is not None:
                    if many:
                        mids.extend(mid)
                    else:
                        mids.append(mid)
                elif many:
                    for m in mid:
                        self._send(m, qos)
                else:
                    self._send(mid, qos)
                self.sent += count
            if mids and group is not None:
                group(mids)

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
