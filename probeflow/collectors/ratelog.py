"""A log line per kind of trouble per minute, with a count of the ones held back.

Collectors meet the same trouble thousands of times (a device sending garbage,
a broker that is down); every occurrence is counted and quarantined, but the
log gets one line per kind per interval so it stays readable.
"""

from __future__ import annotations

import logging
import threading
import time
from typing import Any

__all__ = ["RateLimitedLog", "default_logger"]


class RateLimitedLog:
    """Wraps the service's structured logger (``log.warning(event, **fields)``)
    or a stdlib logger; ``kind`` is the event name, ``message`` the text."""

    def __init__(self, log: Any, interval_s: float = 60.0) -> None:
        self._log = log
        self._stdlib = isinstance(log, (logging.Logger, logging.LoggerAdapter))
        self._interval = interval_s
        self._last: dict[str, float] = {}
        self._held: dict[str, int] = {}
        self._lock = threading.Lock()

    def _admit(self, kind: str) -> int | None:
        now = time.monotonic()
        with self._lock:
            last = self._last.get(kind)
            if last is not None and now - last < self._interval:
                self._held[kind] = self._held.get(kind, 0) + 1
                return None
            self._last[kind] = now
            return self._held.pop(kind, 0)

    def say(self, level: str, kind: str, message: str, **fields: Any) -> None:
        """Log now, without rate limiting."""
        if self._stdlib:
            extra = "".join(f" {k}={v}" for k, v in fields.items())
            getattr(self._log, level)(f"{kind}: {message}{extra}")
        else:
            getattr(self._log, level)(kind, message=message, **fields)

    def _limited(self, level: str, kind: str, message: str) -> None:
        held = self._admit(kind)
        if held is None:
            return
        if held:
            self.say(level, kind, message, suppressed=held)
        else:
            self.say(level, kind, message)

    def warning(self, kind: str, message: str) -> None:
        self._limited("warning", kind, message)

    def error(self, kind: str, message: str) -> None:
        self._limited("error", kind, message)

    def info(self, kind: str, message: str) -> None:
        self._limited("info", kind, message)


def default_logger(context_log: Any, name: str) -> Any:
    """The context's logger if the service gave one, else a stdlib logger."""
    return context_log if context_log is not None else logging.getLogger(name)
