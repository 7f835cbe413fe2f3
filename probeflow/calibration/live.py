"""Live readings of one probe, for calibrating at the probe.

Two sources, chosen by :func:`open_live_source`:

* :class:`StoreTail` when the service is running: the service writes every
  reading to the SQLite ``readings`` table within about a second, so the newest
  rows of the probe are the live stream.  "Running" means the probe has a row
  younger than ``fresh_s`` (10 s by default).
* :class:`CollectorTap` when it is not: the config's collectors are opened
  here (through the plugin registry) and their readings filtered to the probe.
  Readings are converted by the same :class:`~probeflow.convert.Converter` the
  service uses, so an RTD's ohms or a fixed temperature give the temperature.
  Nothing is acknowledged to the source (the tap stores nothing): an MQTT
  broker keeps the messages for the service.  Do not tap a serial port the
  service has open.

Values typed in by hand need no source; the ``calibrate`` command prompts for them.
"""

from __future__ import annotations

import math
import queue
import threading
import time
from collections.abc import Callable
from typing import Any, NamedTuple, Protocol

import numpy as np

from probeflow.batch import QuarantineItem, ReadingBatch
from probeflow.calibration.store import CalibrationStore
from probeflow.collectors.base import CollectorContext
from probeflow.config.load import LoadedConfig
from probeflow.convert import Converter
from probeflow.errors import CollectorError, ProbeflowError

__all__ = ["CollectorTap", "LiveSource", "Sample", "StoreTail", "open_live_source", "service_is_writing"]

DEFAULT_FRESH_S = 10.0


class Sample(NamedTuple):
    ts: float       # epoch s
    mv: float       # mV
    temp_c: float   # °C, NaN when unknown


class LiveSource(Protocol):
    """A stream of one probe's readings."""

    description: str

    def samples(self, timeout: float) -> list[Sample]:
        """Readings that arrived since the last call, waiting up to ``timeout`` s for one."""

    def close(self) -> None: ...


def service_is_writing(store: CalibrationStore, probe: str, now: float,
                       fresh_s: float = DEFAULT_FRESH_S) -> bool:
    newest = store.newest_reading_ts(probe)
    return newest is not None and newest >= now - fresh_s


class StoreTail:
    """The probe's newest rows in the ``readings`` table, as the service writes them."""

    def __init__(self, store: CalibrationStore, probe: str, *, start: float | None = None,
                 poll_s: float = 0.25, sleep: Callable[[float], None] = time.sleep) -> None:
        self.store = store
        self.probe = probe
        self.description = f"readings of {probe} stored by the running service ({store.path})"
        self._last = (store.newest_reading_ts(probe) or -math.inf) if start is None else start
        self._poll_s = poll_s
        self._sleep = sleep

    def samples(self, timeout: float) -> list[Sample]:
        deadline = time.monotonic() + timeout
        while True:
            rows = self.store.readings(self.probe, math.nextafter(self._last, math.inf), math.inf)
            if rows:
                self._last = rows[-1][0]
                return [Sample(ts, mv, temp) for ts, mv, temp, _ph, _q in rows]
            if time.monotonic() >= deadline:
                return []
            self._sleep(min(self._poll_s, max(0.0, deadline - time.monotonic())))

    def close(self) -> None:
        """The store belongs to the caller."""


class CollectorTap:
    """The config's collectors, opened here, filtered to one probe."""

    def __init__(self, config: LoadedConfig, probe: str) -> None:
        if not config.collectors:
            raise CollectorError(f"{config.path}: the service is not writing readings of {probe} and "
                                 "the config has no collectors to read it from; start the service, "
                                 "or type the readings in (--source typed).")
        self.probe = probe
        self.description = (f"readings of {probe} from the collector(s) "
                            f"{', '.join(s.name for s in config.collectors)}")
        self._converter = Converter(config.probes)
        self._queue: queue.Queue[Sample] = queue.Queue(maxsize=100_000)
        self._collectors: list[tuple[Any, CollectorContext]] = []
        self.quarantined = 0
        self.close_errors: list[str] = []
        self._lock = threading.Lock()
        try:
            for section in config.collectors:
                context = CollectorContext(name=section.name, emit_batch=self._on_batch,
                                           quarantine_item=self._on_quarantine, known_probes=None,
                                           stop_event=threading.Event())
                collector = section.plugin(section.config, context)
                collector.start()
                self._collectors.append((collector, context))
        except ProbeflowError:
            self.close()
            raise
        except Exception as exc:  # plugin code
            self.close()
            raise CollectorError(f"cannot open the collectors to read {probe}: "
                                 f"{type(exc).__name__}: {exc}") from exc

    def _on_quarantine(self, item: QuarantineItem) -> None:
        with self._lock:
            self.quarantined += 1

    def _on_batch(self, batch: ReadingBatch) -> None:
        mine = np.flatnonzero(batch.probe == self.probe)
        if not mine.size:
            return
        part = ReadingBatch(batch.probe[mine], batch.ts[mine], batch.mv[mine], batch.temp_c[mine],
                            batch.ohms[mine])
        done = self._converter.convert(part)
        for ts, mv, temp in zip(done.ts.tolist(), done.mv.tolist(), done.temp_c.tolist(), strict=True):
            try:
                self._queue.put_nowait(Sample(ts, mv, temp))
            except queue.Full:  # nobody reads: keep the newest by dropping the oldest
                self._queue.get_nowait()
                self._queue.put_nowait(Sample(ts, mv, temp))

    def samples(self, timeout: float) -> list[Sample]:
        try:
            out = [self._queue.get(timeout=timeout)]
        except queue.Empty:
            return []
        while True:
            try:
                out.append(self._queue.get_nowait())
            except queue.Empty:
                return sorted(out)

    def close(self) -> None:
        for collector, context in self._collectors:
            context.stop_event.set()
            try:
                collector.stop(timeout=2.0)
            except Exception as exc:  # noqa: BLE001 - plugin code; close the others all the same
                self.close_errors.append(f"{context.name}: {type(exc).__name__}: {exc}")
        self._collectors.clear()


def open_live_source(config: LoadedConfig, probe: str, store: CalibrationStore, *,
                     mode: str = "auto", now: float | None = None,
                     fresh_s: float = DEFAULT_FRESH_S) -> LiveSource:
    """``mode``: auto (the service's stored readings when it is writing them, else the
    collectors), service, or collector."""
    t = time.time() if now is None else now
    if mode == "service" or (mode == "auto" and service_is_writing(store, probe, t, fresh_s)):
        return StoreTail(store, probe)
    if mode in ("auto", "collector"):
        return CollectorTap(config, probe)
    raise ProbeflowError(f"unknown reading source {mode!r}: use auto, service, collector or typed")
