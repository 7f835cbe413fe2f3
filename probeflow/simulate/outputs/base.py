"""The one interface of every simulator output."""

from __future__ import annotations

from typing import Protocol

from probeflow.simulate.generator import Readings

__all__ = ["Output"]


class Output(Protocol):
    """Takes delivered readings in order; ``close`` flushes and releases everything."""

    def write(self, readings: Readings) -> None: ...

    def close(self) -> None: ...
