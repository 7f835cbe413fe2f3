"""The interface every collector implements (built-in or plugin).

A collector reads probe readings from one source (serial port, MQTT broker,
recording file, stdin, simulator) on its own thread(s) and hands them to the
pipeline through a :class:`CollectorContext`:

* ``context.emit(batch)`` for parsed readings (a :class:`ReadingBatch`, with
  ``on_committed`` hooks when the source needs an acknowledgement after the
  readings are durably stored);
* ``context.quarantine(reason, raw)`` for input that could not be parsed.

A collector never raises out of its threads: it counts, quarantines, backs off
and reconnects.  Plugins register under the entry-point group
``probeflow.collectors``; the class has a pydantic ``Config`` model for its YAML
section (the ``type`` key selects the plugin).
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, ClassVar, Protocol, runtime_checkable

from pydantic import BaseModel

from probeflow.batch import QuarantineItem, ReadingBatch

__all__ = ["Collector", "CollectorContext", "CollectorCounters", "CollectorConfigBase"]


class CollectorConfigBase(BaseModel):
    """Keys common to every collector section."""

    model_config = {"extra": "forbid"}
    type: str
    name: str | None = None


@dataclass
class CollectorCounters:
    """Per-collector counters (exported as metrics, shown by ``status``)."""

    received: int = 0          # readings parsed and emitted
    quarantined: int = 0       # inputs rejected and kept aside
    reconnects: int = 0
    connected: bool = False
    last_error: str = ""
    session_lost: int = 0      # MQTT: the broker had no session where one was expected (data gap)
    lock: threading.Lock = field(default_factory=threading.Lock, repr=False)

    def add(self, **deltas: int) -> None:
        with self.lock:
            for key, value in deltas.items():
                setattr(self, key, getattr(self, key) + value)


@dataclass
class CollectorContext:
    """What the pipeline gives a collector: where to put readings and rejects."""

    name: str
    emit_batch: Callable[[ReadingBatch], None]
    quarantine_item: Callable[[QuarantineItem], None]
    known_probes: frozenset[str] | None = None   # None: accept any probe id
    counters: CollectorCounters = field(default_factory=CollectorCounters)
    stop_event: threading.Event = field(default_factory=threading.Event)
    log: Any = None
    on_session_lost: Callable[[str, str], None] | None = None
    """Called as ``(collector_name, detail)`` when a source may have lost readings
    (an MQTT broker that forgot the persistent session): raise a data-gap alert."""

    def emit(self, batch: ReadingBatch) -> None:
        if len(batch):
            self.counters.add(received=len(batch))
            self.emit_batch(batch)

    def quarantine(self, reason: str, raw: str | bytes) -> None:
        if isinstance(raw, bytes):
            raw = raw.decode("utf-8", errors="backslashreplace")
        self.counters.add(quarantined=1)
        self.quarantine_item(QuarantineItem(self.name, reason, raw, time.time()))


@runtime_checkable
class Collector(Protocol):
    """A source of readings.  ``finite`` sources (files, stdin, fast simulator)
    set ``done`` when exhausted so ``replay``/``filter`` can finish."""

    Config: ClassVar[type[CollectorConfigBase]]

    def __init__(self, config: Any, context: CollectorContext) -> None: ...

    def start(self) -> None:
        """Start reading on background thread(s); return at once."""

    def stop(self, timeout: float = 5.0) -> None:
        """Stop reading and join threads."""

    @property
    def done(self) -> bool:
        """True once a finite source has emitted everything (always False for live ones)."""
