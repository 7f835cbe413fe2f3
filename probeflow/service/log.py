"""Structured logs to stderr: one line per event, ``key=value`` or JSON.

``log.info("store_retry", store="sqlite", attempt=3)`` writes
``ts=2026-12-02T06:00:00.000000Z level=info event=store_retry store=sqlite attempt=3``.
Never pass secrets: config objects are not logged, only names and counts.
:class:`RateLimiter` lets a repeated event (a kind of bad input) through once
per interval and counts what it held back.
"""

from __future__ import annotations

import sys
import threading
import time
from typing import IO, Any, Literal

import orjson

from probeflow.events import rfc3339

__all__ = ["Log", "RateLimiter"]


def _kv(value: Any) -> str:
    text = str(value)
    if text and not any(c in text for c in ' "=\n\t\\'):
        return text
    return orjson.dumps(text).decode()


class Log:
    """A small structured logger (thread-safe, one write per line)."""

    def __init__(self, stream: IO[str] | None = None, fmt: Literal["kv", "json"] = "kv",
                 **bound: Any) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.fmt = fmt
        self.bound = bound
        self._lock = threading.Lock()

    def bind(self, **fields: Any) -> Log:
        child = Log(self.stream, self.fmt, **{**self.bound, **fields})
        child._lock = self._lock
        return child

    def _emit(self, level: str, event: str, args: tuple[Any, ...], fields: dict[str, Any]) -> None:
        if args:
            # A plugin written for the standard library's logging style:
            # log.warning("%d points queued", n).  Keep its text as the message.
            try:
                message = event % args
            except (TypeError, ValueError):
                message = " ".join([event, *map(str, args)])
            fields = {"message": message, **fields}
            event = "plugin_log"
        record = {"ts": rfc3339(time.time()), "level": level, "event": event, **self.bound, **fields}
        if self.fmt == "json":
            line = orjson.dumps(record, default=str).decode()
        else:
            line = " ".join(f"{k}={_kv(v)}" for k, v in record.items())
        with self._lock:
            try:
                self.stream.write(line + "\n")
                self.stream.flush()
            except (OSError, ValueError):
                pass  # stderr closed: nowhere left to report to

    # Each method takes either ``event, **fields`` (structured) or the standard
    # library's ``message, *args`` form, so plugins may use either.
    def debug(self, event: str, *args: Any, **fields: Any) -> None:
        pass

    def info(self, event: str, *args: Any, **fields: Any) -> None:
        self._emit("info", event, args, fields)

    def warning(self, event: str, *args: Any, **fields: Any) -> None:
        self._emit("warning", event, args, fields)

    def error(self, event: str, *args: Any, **fields: Any) -> None:
        self._emit("error", event, args, fields)

    def exception(self, event: str, *args: Any, **fields: Any) -> None:
        """Like :meth:`error`, adding the type of the exception being handled."""
        exc = sys.exc_info()[1]
        if exc is not None:
            fields = {"error": type(exc).__name__, **fields}
        self._emit("error", event, args, fields)


class RateLimiter:
    """Allow one event per key per ``interval_s``; count the ones held back."""

    def __init__(self, interval_s: float = 60.0, clock: Any = time.monotonic) -> None:
        self.interval_s = interval_s
        self.clock = clock
        self._last: dict[Any, float] = {}
        self._held: dict[Any, int] = {}
        self._lock = threading.Lock()

    def allow(self, key: Any) -> tuple[bool, int]:
        """(True, n held back since the last one) when the event may be logged now."""
        now = self.clock()
        with self._lock:
            last = self._last.get(key)
            if last is None or now - last >= self.interval_s:
                self._last[key] = now
                return True, self._held.pop(key, 0)
            self._held[key] = self._held.get(key, 0) + 1
            return False, 0
