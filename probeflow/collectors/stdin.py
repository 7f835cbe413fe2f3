"""Stdin collector: JSON Lines reading records from standard input (filter mode).

Reads whatever is available (up to 1 MiB at a time), parses every complete
line in one pass and emits it as one batch, so a slow trickle is forwarded at
once and a fast stream moves in large batches.  Ends (``done``) at end of file.  When the service stops, lines already
written to the pipe are still read and emitted.
"""

from __future__ import annotations

import os
import select
import sys
import threading
from typing import Any, BinaryIO, Literal

from probeflow.collectors.base import CollectorConfigBase, CollectorContext
from probeflow.collectors.parse import DEFAULT_MAX_RECORD_BYTES, RecordParser
from probeflow.pipes import widen_pipe

__all__ = ["StdinCollector", "StdinCollectorConfig", "read_json_lines"]

_CHUNK = 1 << 20


class StdinCollectorConfig(CollectorConfigBase):
    type: Literal["stdin"] = "stdin"
    max_line_bytes: int = DEFAULT_MAX_RECORD_BYTES


def read_json_lines(stream: BinaryIO | int, parser: RecordParser, context: CollectorContext,
                    stop: threading.Event) -> None:
    """Parse JSON lines from a file descriptor or binary stream until EOF or ``stop``."""
    fd = stream if isinstance(stream, int) else stream.fileno()
    widen_pipe(fd)   # speed only; see probeflow/pipes.py
    tail = b""
    while True:
        stopping = stop.is_set()
        # after a stop request, take only what is already written, then end
        ready, _, _ = select.select([fd], [], [], 0.0 if stopping else 0.2)
        if not ready:
            if stopping:
                break
            continue
        chunk = os.read(fd, _CHUNK)
        if not chunk:
            break
        data = tail + chunk
        cut = data.rfind(b"\n")
        if cut < 0:
            tail = data
            if len(tail) > parser.max_bytes:  # one endless line: reject what we have
                context.quarantine(f"too long: over {parser.max_bytes} bytes without a newline",
                                   tail[:4096])
                tail = b""
            continue
        tail = data[cut + 1:]
        _emit(data[:cut].split(b"\n"), parser, context)
    if tail.strip():
        _emit([tail], parser, context)


def _emit(lines: list[bytes], parser: RecordParser, context: CollectorContext) -> None:
    parsed = parser.lines(lines)
    for reason, raw in parsed.rejects:
        context.quarantine(reason, raw)
    context.emit(parsed.batch())


class StdinCollector:
    """Reads reading records from stdin until end of file."""

    Config = StdinCollectorConfig

    def __init__(self, config: StdinCollectorConfig, context: CollectorContext,
                 stream: Any = None) -> None:
        self.config = config
        self.context = context
        self.stream = stream if stream is not None else sys.stdin.buffer
        self.parser = RecordParser(context.known_probes, max_bytes=config.max_line_bytes)
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._run, name="stdin", daemon=True)

    def start(self) -> None:
        self._thread.start()

    def _run(self) -> None:
        try:
            read_json_lines(self.stream, self.parser, self.context, self.context.stop_event)
        except OSError as exc:
            self.context.counters.last_error = str(exc)
            if self.context.log is not None:
                self.context.log.error("stdin_read_failed", error=str(exc))
        finally:
            self._done.set()

    def stop(self, timeout: float = 5.0) -> None:
        self.context.stop_event.set()
        self._thread.join(timeout)  # a blocked read ends with the process (daemon thread)

    @property
    def done(self) -> bool:
        return self._done.is_set()

    clock_pace = 1.0
    """Readings carry their own times (maybe of an old recording): the service's
    time-based rules follow them, advancing in real time while input waits."""
