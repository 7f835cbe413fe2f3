"""The interface every store implements (built-in or plugin).

A store receives processed readings and alert events in batches.  ``write``
may buffer; ``flush`` makes everything written so far durable (or queued in a
durable outbox); ``close`` flushes and releases resources.  Stores that talk to
a network must never block the reading path for long: they queue to disk or
memory and forward on their own thread.

Plugins register under the entry-point group ``probeflow.stores``; the class
has a pydantic ``Config`` model for its YAML section.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, ClassVar, Protocol, runtime_checkable

from pydantic import BaseModel

from probeflow.batch import ProcessedBatch, QuarantineItem
from probeflow.events import AlertEvent

__all__ = ["Store", "StoreConfigBase", "StoreContext"]


class StoreConfigBase(BaseModel):
    model_config = {"extra": "forbid"}
    type: str
    name: str | None = None


class StoreContext:
    """What the service gives a store: the site name and a logger."""

    def __init__(self, site: str, log: Any = None, base_dir: str = ".") -> None:
        self.site = site
        self.log = log
        self.base_dir = base_dir


@runtime_checkable
class Store(Protocol):
    Config: ClassVar[type[StoreConfigBase]]

    def __init__(self, config: Any, context: StoreContext) -> None: ...

    def write(self, batch: ProcessedBatch, alerts: Sequence[AlertEvent]) -> None:
        """Accept a processed batch and the alert events it produced."""

    def write_quarantine(self, items: Sequence[QuarantineItem]) -> None:
        """Keep rejected inputs (stores that do not keep them ignore this)."""

    def flush(self) -> None:
        """Make everything written so far durable."""

    def close(self) -> None:
        """Flush and release resources."""
