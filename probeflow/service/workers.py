"""Store isolation: one worker thread and queue per store, and commit tracking.

A failing store is retried with capped exponential backoff on its own thread,
so it never stalls the others.  Back-pressure policy when a store's queue is
full: a *durable* store (SQLite, whose commit releases source
acknowledgements) makes the pipeline wait, since nothing may be acknowledged
before it is stored; any other store loses its oldest queued batch, and the
loss is counted and logged (never silent).  So is what a buffering
(non-durable) store accepted but could not flush when the service stopped.

:class:`CommitTracker` runs each batch's ``on_committed`` hooks once every
durable store has committed it, strictly in batch order.
"""

from __future__ import annotations

import functools
import itertools
import queue
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from probeflow.batch import CommitHook, ProcessedBatch, QuarantineItem
from probeflow.events import AlertEvent
from probeflow.service.log import Log, RateLimiter

__all__ = ["CommitTracker", "StoreWorker"]

_CLOSE = object()
_FIRST_RETRY_S = 0.2


class CommitTracker:
    """Calls hooks of batch ``seq`` after ``needed`` durable stores reported it, in order."""

    def __init__(self, needed: int, log: Log) -> None:
        self.needed = needed
        self.log = log
        self._lock = threading.Lock()
        self._pending: dict[int, list[Any]] = {}   # seq -> [count, hooks]
        self._next = 0
        self._seq = itertools.count()

    def add(self, hooks: tuple[CommitHook, ...]) -> int:
        seq = next(self._seq)
        with self._lock:
            self._pending[seq] = [0, hooks]
        if self.needed == 0:
            self.done(seq, count=False)
        return seq

    def done(self, seq: int, count: bool = True) -> None:
        ready: list[CommitHook] = []
        with self._lock:
            entry = self._pending.get(seq)
            if entry is None:
                return
            if count:
                entry[0] += 1
            while self._next in self._pending and self._pending[self._next][0] >= self.needed:
                ready.extend(self._pending.pop(self._next)[1])
                self._next += 1
            for hook in ready:  # in order, under the lock: one caller at a time
                try:
                    hook()
                except Exception as exc:  # noqa: BLE001 - a source's ack failing must not stop storing
                    self.log.error("commit_hook_failed", error=f"{type(exc).__name__}: {exc}")

    @property
    def waiting(self) -> int:
        with self._lock:
            return len(self._pending)


@dataclass
class StoreCounters:
    batches: int = 0
    rows: int = 0
    errors: int = 0
    lost_batches: int = 0
    lost_rows: int = 0


class StoreWorker:
    """Runs one store on its own thread, retrying failures with capped backoff."""

    def __init__(self, name: str, store: Any, log: Log, *, queue_batches: int = 1024,
                 retry_max_s: float = 30.0, on_committed: Callable[[int], None] | None = None) -> None:
        self.name = name
        self.store = store
        self.log = log.bind(store=name)
        self.durable = bool(getattr(store, "durable", False))
        self.retry_max_s = retry_max_s
        self.on_committed = on_committed
        self.counters = StoreCounters()
        self._unflushed_batches = 0   # written to a non-durable store since it was last flushed
        self._unflushed_rows = 0
        self._queue: queue.Queue[Any] = queue.Queue(maxsize=queue_batches)
        self._deadline = float("inf")
        self._closing = threading.Event()
        self._errors = RateLimiter(60.0)
        self._thread = threading.Thread(target=self._loop, name=f"store-{name}", daemon=True)

    def start(self) -> None:
        self._thread.start()

    @property
    def backlog(self) -> int:
        """Batches queued for this store and not yet taken up for writing."""
        return self._queue.qsize()

    def submit(self, seq: int | None, batch: ProcessedBatch, alerts: Sequence[AlertEvent]) -> None:
        self._put(("write", seq, batch, alerts))

    def submit_quarantine(self, items: Sequence[QuarantineItem]) -> None:
        self._put(("quarantine", None, items, ()))

    def _put(self, item: Any) -> None:
        if self.durable:
            self._queue.put(item)
            return
        while True:
            try:
                self._queue.put_nowait(item)
                return
            except queue.Full:
                try:
                    lost = self._queue.get_nowait()
                except queue.Empty:
                    continue
                self._count_loss(lost)

    def _count_loss(self, item: Any) -> None:
        if item is _CLOSE:
            return
        kind, _seq, payload, _alerts = item
        self.counters.lost_batches += 1
        self.counters.lost_rows += len(payload)
        self.log.error("store_queue_overflow", lost_batches=self.counters.lost_batches,
                       lost_rows=self.counters.lost_rows, kind=kind,
                       hint="the store cannot keep up or is down; its oldest queued data was dropped")

    def close(self, timeout: float) -> None:
        """Write what is queued, flush and close; give up after ``timeout`` seconds."""
        self._deadline = time.monotonic() + timeout
        self._closing.set()
        try:
            self._queue.put(_CLOSE, timeout=max(0.0, timeout))
        except queue.Full:
            pass
        self._thread.join(max(0.0, self._deadline - time.monotonic()) + 0.5)
        if self._thread.is_alive():
            self.log.error("store_close_timeout", queued=self._queue.qsize())

    def _loop(self) -> None:
        while True:
            item = self._queue.get()
            if item is _CLOSE:
                if not self._retry("close", self._finish):
                    self._count_unflushed_loss()
                return
            kind, seq, payload, alerts = item
            ok = self._retry(kind, functools.partial(self._write, kind, payload, alerts))
            if ok:
                self.counters.batches += 1
                if kind == "write":
                    self.counters.rows += len(payload)
                if not self.durable:
                    self._unflushed_batches += 1
                    self._unflushed_rows += len(payload)
                if seq is not None and self.on_committed is not None and self.durable:
                    self.on_committed(seq)
            else:
                self._count_loss(item)

    def _count_unflushed_loss(self) -> None:
        """The store gave up flushing at close: what it accepted since its last
        flush may not have reached it, and is counted as lost."""
        if not self._unflushed_batches:
            return
        self.counters.lost_batches += self._unflushed_batches
        self.counters.lost_rows += self._unflushed_rows
        self.log.error("store_lost_unflushed", lost_batches=self._unflushed_batches,
                       lost_rows=self._unflushed_rows,
                       hint="the store could not flush at shutdown; rows it had accepted may be missing from it")
        self._unflushed_batches = self._unflushed_rows = 0

    def _write(self, kind: str, payload: Any, alerts: Sequence[AlertEvent]) -> None:
        if kind == "write":
            self.store.write(payload, alerts)
        else:
            self.store.write_quarantine(payload)

    def _finish(self) -> None:
        self.store.flush()
        self._unflushed_batches = self._unflushed_rows = 0
        self.store.close()

    def _retry(self, what: str, action: Callable[[], None]) -> bool:
        delay = _FIRST_RETRY_S
        attempt = 0
        while True:
            attempt += 1
            try:
                action()
                if attempt > 1:
                    self.log.info("store_recovered", action=what, attempts=attempt)
                return True
            except Exception as exc:  # noqa: BLE001 - plugin code: any failure is isolated here
                self.counters.errors += 1
                allowed, held = self._errors.allow(type(exc).__name__)
                if allowed:
                    self.log.error("store_failed", action=what, attempt=attempt, retry_in_s=delay,
                                   suppressed=held, error=f"{type(exc).__name__}: {exc}")
            if self._closing.is_set() and time.monotonic() + delay > self._deadline:
                self.log.error("store_gave_up", action=what, attempts=attempt)
                return False
            if self._closing.is_set():
                time.sleep(delay)
            else:
                self._closing.wait(delay)
            delay = min(delay * 2.0, self.retry_max_s)
