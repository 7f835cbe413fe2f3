"""A serial port for tests: a symlink that points at the slave side of a real
pseudo-terminal, which can be unplugged (master closed) and plugged in again
as a new pseudo-terminal behind the same path, as a USB adapter that comes
back under a stable ``/dev/serial/by-id/...`` name would."""

from __future__ import annotations

import fcntl
import os
import struct
import termios
import time
import tty
from pathlib import Path

__all__ = ["SwappablePty"]


class SwappablePty:
    def __init__(self, link: Path) -> None:
        self.link = link
        self.master: int | None = None
        self.slave: int | None = None
        self.plugs = 0

    def plug(self) -> None:
        """A new pseudo-terminal behind ``link`` (the symlink is replaced atomically)."""
        master, slave = os.openpty()
        tty.setraw(slave)                    # no echo, no line editing: bytes pass as written
        tmp = self.link.with_name(self.link.name + ".new")
        if tmp.is_symlink():
            tmp.unlink()
        os.symlink(os.ttyname(slave), tmp)
        os.replace(tmp, self.link)
        self.master, self.slave = master, slave
        self.plugs += 1

    def unplug(self) -> None:
        """Close both of our ends: the reader's next read fails, as with a pulled adapter."""
        for fd in (self.master, self.slave):
            if fd is not None:
                os.close(fd)
        self.master = self.slave = None

    def write(self, data: bytes) -> None:
        assert self.master is not None, "the port is unplugged"
        view = memoryview(data)
        while view:
            n = os.write(self.master, view)
            view = view[n:]

    def unread_bytes(self) -> int:
        """Bytes written but not yet taken by the reader (FIONREAD on the slave side)."""
        assert self.slave is not None
        raw = fcntl.ioctl(self.slave, termios.FIONREAD, struct.pack("i", 0))
        return int(struct.unpack("i", raw)[0])

    def wait_drained(self, timeout: float = 30.0) -> None:
        deadline = time.monotonic() + timeout
        while self.unread_bytes():
            if time.monotonic() > deadline:
                raise AssertionError(f"the reader left {self.unread_bytes()} bytes unread for {timeout:g} s")
            time.sleep(0.01)
