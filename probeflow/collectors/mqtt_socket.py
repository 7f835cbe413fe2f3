"""A read buffer under paho's network loop, so it reads many packets per system call.

paho-mqtt reads every incoming packet with three ``recv`` calls (the command
byte, the Remaining Length, the rest) and goes through ``select`` once per
packet.  Each of those calls gives up Python's GIL and has to take it back;
in a service where other threads (parsing, conversion, SQLite) want the GIL
too, every give-back can wait, and the network thread falls behind the broker.

:class:`BufferedSocketReader` wraps the plain TCP socket paho creates: one
``recv`` of up to 64 KiB fills a buffer, and paho's small reads are served from
it.  It reports the buffered bytes through ``pending()``, the method paho
already asks of TLS sockets ("bytes left in the socket"), so paho reads them
without waiting in ``select``.  Everything else (send, fileno, close, options)
goes to the socket unchanged.  The bytes paho sees are exactly the bytes
received, in order (tested against the unbuffered socket).

paho's ``loop_read`` handles one packet per pass of its loop (and one
``select``) for a client that only subscribes; :func:`buffer_reads` also lets a
pass handle every complete packet already in the buffer, up to
:data:`PACKETS_PER_PASS`, so the network thread goes through ``select`` (and
gives up the GIL) once per buffer-full rather than once per message.

Only plain TCP sockets are wrapped; TLS and WebSocket connections keep paho's
own reading.  :func:`buffer_reads` hooks the client's socket factory
(``Client._create_socket``) and its ``loop_read`` (paho-mqtt 2.x); a paho
without them is left as is.
"""

from __future__ import annotations

import socket
from typing import Any

__all__ = ["READ_CHUNK", "BufferedSocketReader", "buffer_reads"]

READ_CHUNK = 65536
"""Bytes asked of the kernel per ``recv`` [B]."""

PACKETS_PER_PASS = 64
"""Buffered packets handled per pass of paho's network loop, at most."""


class BufferedSocketReader:
    """A TCP socket whose ``recv`` is served from a read-ahead buffer."""

    __slots__ = ("_buf", "_pos", "_sock")

    def __init__(self, sock: socket.socket) -> None:
        self._sock = sock
        self._buf = b""
        self._pos = 0

    def recv(self, bufsize: int) -> bytes:
        """Up to ``bufsize`` bytes: buffered ones first, else one kernel read.

        Raises what the socket raises (BlockingIOError when nothing is there,
        OSError) and returns b"" at end of stream, as ``socket.recv`` does."""
        buf, pos = self._buf, self._pos
        avail = len(buf) - pos
        if avail <= 0:
            data = self._sock.recv(max(bufsize, READ_CHUNK))
            if len(data) <= bufsize:
                self._buf, self._pos = b"", 0
                return data
            self._buf, self._pos = data, bufsize
            return data[:bufsize]
        if bufsize >= avail:
            self._buf, self._pos = b"", 0
            return buf[pos:] if pos else buf
        self._pos = pos + bufsize
        return buf[pos:pos + bufsize]

    def pending(self) -> int:
        """Bytes received and not yet handed out (paho reads on while > 0)."""
        return len(self._buf) - self._pos

    def __getattr__(self, name: str) -> Any:
        return getattr(self._sock, name)


def buffer_reads(client: Any) -> bool:
    """Make ``client`` (a paho-mqtt 2.x ``Client``) read through a
    :class:`BufferedSocketReader` on every plain TCP connection it opens.
    Returns False when this paho has no socket factory to hook."""
    create = getattr(client, "_create_socket", None)
    if not callable(create):
        return False

    def create_buffered() -> Any:
        sock = create()
        return BufferedSocketReader(sock) if type(sock) is socket.socket else sock

    client._create_socket = create_buffered
    _read_buffered_packets(client)
    return True


def _read_buffered_packets(client: Any) -> None:
    """Let one network-loop pass handle every complete packet already buffered
    (up to :data:`PACKETS_PER_PASS`), not just one: paho's ``loop_read`` handles
    a single packet per ``select`` for a client that only subscribes."""
    read_one = getattr(client, "loop_read", None)
    if not callable(read_one):
        return

    def loop_read(max_packets: int = 1) -> Any:
        rc = read_one(max_packets)
        sock = getattr(client, "_sock", None)
        if type(sock) is not BufferedSocketReader:
            return rc
        passes = 1
        while not rc and passes < PACKETS_PER_PASS and sock.pending() and client._sock is sock:
            rc = read_one(max_packets)
            passes += 1
        return rc

    client.loop_read = loop_read
