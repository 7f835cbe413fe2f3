"""Helpers for the reliability suite (imported by its test modules)."""

from __future__ import annotations

import socket
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import pytest

from probeflow.batch import QuarantineItem, ReadingBatch
from probeflow.collectors.base import CollectorContext

PROBES = ("tank-3", "tank-4", "basin-1")
"""Invented probe ids used throughout this suite (the same as in conftest.BASE_YAML)."""


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@dataclass
class Recorder:
    """What a collector handed to the pipeline: batches and quarantined items."""

    batches: list[ReadingBatch] = field(default_factory=list)
    quarantined: list[QuarantineItem] = field(default_factory=list)

    @property
    def readings(self) -> int:
        return sum(len(b) for b in self.batches)

    def rows(self) -> list[tuple[str, float, float]]:
        return [(str(p), float(t), float(m)) for b in self.batches
                for p, t, m in zip(b.probe.tolist(), b.ts.tolist(), b.mv.tolist())]

    def commit(self, batch: ReadingBatch) -> None:
        """Keep the batch and run its commit hooks at once (a store that commits on receipt)."""
        self.batches.append(batch)
        for hook in batch.on_committed:
            hook()

    def context(self, name: str = "fuzz", known: frozenset[str] | None = frozenset(PROBES)
                ) -> CollectorContext:
        return CollectorContext(name=name, emit_batch=self.commit,
                                quarantine_item=self.quarantined.append, known_probes=known)


def wait_until(predicate: Callable[[], bool], what: str, limit_s: float = 30.0,
               poll_s: float = 0.01, detail: Callable[[], str] | None = None) -> None:
    """Poll ``predicate`` until true; fail naming ``what`` (and ``detail()``,
    e.g. a log tail) if it never becomes true."""
    end = time.monotonic() + limit_s
    while not predicate():
        if time.monotonic() > end:
            more = f"\n{detail()}" if detail is not None else ""
            pytest.fail(f"gave up waiting for {what}{more}")
        time.sleep(poll_s)
