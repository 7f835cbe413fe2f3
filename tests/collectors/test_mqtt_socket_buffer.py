"""BufferedSocketReader hands paho exactly the bytes the socket received, in order.

Checked on real connected socket pairs (socket.socketpair) against the plain
socket's behaviour: the same byte stream, BlockingIOError when nothing has
arrived on a non-blocking socket, b"" at end of stream.
"""

from __future__ import annotations

import random
import socket

import pytest

from probeflow.collectors.mqtt_socket import BufferedSocketReader, buffer_reads


def test_small_reads_return_the_stream_unchanged_and_pending_counts_the_rest() -> None:
    rng = random.Random(4)
    data = bytes(rng.randrange(256) for _ in range(200_000))
    left, right = socket.socketpair()
    try:
        reader = BufferedSocketReader(right)
        got = bytearray()
        sent = 0
        while len(got) < len(data):
            if sent < len(data):
                chunk = rng.randrange(1, 5000)
                sent += left.send(data[sent:sent + chunk])
            want = rng.choice([1, 1, 2, rng.randrange(1, 3000)])
            piece = reader.recv(want)
            assert 0 < len(piece) <= want
            got += piece
            assert reader.pending() >= 0
        assert bytes(got) == data
        assert reader.pending() == 0
    finally:
        left.close()
        right.close()


def test_nothing_there_raises_like_the_socket_and_end_of_stream_is_empty() -> None:
    left, right = socket.socketpair()
    right.setblocking(False)
    reader = BufferedSocketReader(right)
    try:
        with pytest.raises(BlockingIOError):
            reader.recv(1)
        left.sendall(b"\x30\x05hello")
        assert reader.recv(1) == b"\x30"
        assert reader.pending() == 6                  # the rest is buffered: no select needed
        assert reader.recv(1) == b"\x05"
        assert reader.recv(5) == b"hello"
        left.close()
        assert reader.recv(1) == b""
        assert reader.fileno() == right.fileno()     # everything else is the socket's
    finally:
        right.close()


def test_only_plain_tcp_sockets_are_wrapped() -> None:
    class FakeClient:
        def __init__(self, made: object) -> None:
            self.made = made

        def _create_socket(self) -> object:
            return self.made

    left, right = socket.socketpair()
    try:
        plain = FakeClient(right)
        assert buffer_reads(plain)
        assert isinstance(plain._create_socket(), BufferedSocketReader)
        other = FakeClient(object())                 # e.g. a TLS or WebSocket wrapper
        assert buffer_reads(other)
        assert not isinstance(other._create_socket(), BufferedSocketReader)
        assert not buffer_reads(object())            # no socket factory to hook
    finally:
        left.close()
        right.close()
