"""Serial output: a pseudo-terminal that behaves like an instrument on a serial line.

Creates a pty pair with ``os.openpty``; readers open the device path
(``os.ttyname`` of the slave side, printed at start) with any serial library.
Lines are ASCII in the chosen layout (csv or kv, see probeflow.simulate.encode),
ended with CR LF as serial instruments usually do (common practice, no source), and paced at the
baud rate: a line of n bytes takes n * 10 / baud seconds (8 data bits, one
start and one stop bit).  When nobody reads, writing blocks once the pty's
buffer is full, like a line with hardware flow control.
"""

from __future__ import annotations

import os
import threading
import time
import tty

from probeflow.errors import ProbeflowError
from probeflow.simulate.encode import encode_lines
from probeflow.simulate.generator import Readings

__all__ = ["BITS_PER_BYTE", "SerialOutput"]

BITS_PER_BYTE = 10   # start bit + 8 data bits + stop bit (8N1)


class SerialOutput:
    """Writes readings as lines to the master side of a new pseudo-terminal."""

    def __init__(self, baud: int = 9600, layout: str = "csv",
                 stop: threading.Event | None = None, ohms_column: bool = False) -> None:
        if baud <= 0:
            raise ProbeflowError(f"baud rate must be positive, not {baud}")
        if layout not in ("csv", "kv", "json"):
            raise ProbeflowError(f'serial layout must be "csv", "kv" or "json", not "{layout}"')
        self.baud = baud
        self.layout = layout
        self.ohms_column = ohms_column
        self.stop = stop or threading.Event()
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)          # no echo, no line-end translation
        self.path = os.ttyname(self.slave)
        self.lines_written = 0
        self._next = time.monotonic()

    def write(self, readings: Readings) -> None:
        for line in encode_lines(readings, self.layout, with_ts=False,
                                 ohms_column=self.ohms_column):
            if self.stop.is_set():
                return
            data = line + b"\r\n"
            now = time.monotonic()
            if self._next > now:
                time.sleep(self._next - now)
            view = memoryview(data)
            while view:
                written = os.write(self.master, view)
                view = view[written:]
            self._next = max(self._next, now) + len(data) * BITS_PER_BYTE / self.baud
            self.lines_written += 1

    @property
    def csv_fields(self) -> list[str]:
        """The column names a csv reader needs for these lines."""
        return ["probe", "mv", "temp_c", "ohms"] if self.ohms_column else ["probe", "mv", "temp_c"]

    def close(self) -> None:
        for fd in (self.master, self.slave):
            try:
                os.close(fd)
            except OSError:
                pass
