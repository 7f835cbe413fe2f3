"""Larger kernel buffers for the pipes of ``probeflow filter`` and the stdin source.

Linux gives a pipe 64 KiB; a filter that writes 200 bytes per reading fills
that in about 300 readings, so writer and reader take turns on the CPU many
thousand times a second.  ``F_SETPIPE_SZ`` raises it (up to
``/proc/sys/fs/pipe-max-size``, 1 MiB by default, for an unprivileged user).
Anything that is not a pipe, another OS, or a refusal (a user's pipe-memory
quota) leaves the buffer as it is: only speed depends on it.
"""

from __future__ import annotations

import fcntl
import os
import stat

__all__ = ["PIPE_BUFFER_BYTES", "widen_pipe"]

PIPE_BUFFER_BYTES = 1 << 20


def widen_pipe(fd: int, size: int = PIPE_BUFFER_BYTES) -> int | None:
    """Ask for a ``size``-byte buffer on ``fd`` if it is a pipe; returns the
    buffer size the kernel set, or None when nothing was changed."""
    set_size = getattr(fcntl, "F_SETPIPE_SZ", None)
    try:
        if set_size is None or not stat.S_ISFIFO(os.fstat(fd).st_mode):
            return None
        return int(fcntl.fcntl(fd, set_size, size))
    except OSError:
        return None
