"""A store that shows readings and alert events on a terminal (used by ``demo``)."""

from __future__ import annotations

import math
import threading
from collections.abc import Sequence
from typing import IO

import numpy as np

from probeflow.batch import QUALITY_NAMES, ProcessedBatch, QuarantineItem
from probeflow.collectors.parse import reason_kind
from probeflow.events import AlertEvent, rfc3339
from probeflow.service.log import RateLimiter

__all__ = ["ConsoleView"]


class ConsoleView:
    """A store that shows readings and alert events on a terminal."""

    durable = False

    def __init__(self, stream: IO[str], every_s: float) -> None:
        self.stream = stream
        self.every_s = every_s
        self._last: dict[str, float] = {}
        self._lock = threading.Lock()
        self._rejected: dict[str, int] = {}
        self._reject_lines = RateLimiter(10.0)

    def write(self, batch: ProcessedBatch, alerts: Sequence[AlertEvent]) -> None:
        lines: list[str] = []
        if len(batch):
            # last row of each probe in this batch, if its previous line is old enough
            order = np.argsort(batch.ts, kind="stable")
            for i in order.tolist():
                probe = batch.probe[i]
                t = float(batch.ts[i])
                if t - self._last.get(probe, -math.inf) >= self.every_s:
                    self._last[probe] = t
                    lines.append(
                        f"{rfc3339(t)[:19]}Z  {probe:<14} pH {batch.ph[i]:6.2f}  "
                        f"(neutral {batch.neutral_ph[i]:5.2f}, dev {batch.neutral_dev[i]:+5.2f})  "
                        f"{batch.temp_c[i]:5.1f} °C  {batch.mv[i]:+7.1f} mV  "
                        f"{QUALITY_NAMES[int(batch.quality[i])]}")
        for a in alerts:
            value = "" if not math.isfinite(a.value) else f" value {a.value:.2f}"
            threshold = "" if not math.isfinite(a.threshold) else f" limit {a.threshold:.2f}"
            lines.append(f"{rfc3339(a.ts)[:19]}Z  ALERT {a.event.upper():<9} {a.alarm_id} "
                         f"[{a.severity}] state {a.state}{value}{threshold}  {a.message}")
        if lines:
            with self._lock:
                self.stream.write("\n".join(lines) + "\n")
                self.stream.flush()

    def write_quarantine(self, items: Sequence[QuarantineItem]) -> None:
        lines = []
        for item in items:
            kind = reason_kind(item.reason)
            self._rejected[kind] = self._rejected.get(kind, 0) + 1
            allowed, _held = self._reject_lines.allow(kind)
            if allowed:
                lines.append(f"REJECTED (kept in quarantine) from {item.source}: {item.reason} "
                             f"[{self._rejected[kind]} of this kind so far]")
        if lines:
            with self._lock:
                self.stream.write("\n".join(lines) + "\n")

    def flush(self) -> None:
        self.stream.flush()

    def close(self) -> None:
        self.flush()
