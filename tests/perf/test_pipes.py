"""Wider pipe buffers for filter's stdin and stdout (probeflow/pipes.py).

Checked on real pipes with the kernel's own answer (F_GETPIPE_SZ); the
default of 64 KiB and the unprivileged ceiling of 1 MiB are Linux's
(pipe(7) and /proc/sys/fs/pipe-max-size; common practice, no source beyond
the man page).
"""

from __future__ import annotations

import fcntl
import os
import subprocess
import time

import pytest

from probeflow.pipes import PIPE_BUFFER_BYTES, widen_pipe

F_GETPIPE_SZ = getattr(fcntl, "F_GETPIPE_SZ", None)
pytestmark = pytest.mark.skipif(F_GETPIPE_SZ is None, reason="pipe sizes are a Linux feature")


def pipe_size(fd: int) -> int:
    return int(fcntl.fcntl(fd, F_GETPIPE_SZ))


def test_a_pipe_gets_the_wider_buffer():
    r, w = os.pipe()
    try:
        before = pipe_size(w)
        assert widen_pipe(w) == PIPE_BUFFER_BYTES
        assert pipe_size(r) == PIPE_BUFFER_BYTES > before   # one buffer, seen from both ends
    finally:
        os.close(r)
        os.close(w)


def test_anything_but_a_pipe_is_left_alone(tmp_path):
    with open(tmp_path / "plain.jsonl", "wb") as f:
        assert widen_pipe(f.fileno()) is None
    r, w = os.pipe()
    os.close(r)
    os.close(w)
    assert widen_pipe(w) is None   # a closed descriptor: no error, nothing done


def test_filter_widens_its_stdin_and_stdout_pipes(cli, cli_env, tmp_path):
    config = tmp_path / "probeflow.yaml"
    config.write_text("site: pipe-test\nprobes:\n  - id: tank-3\n", encoding="utf-8")
    proc = subprocess.Popen(cli + ["filter", "--config", str(config)], stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=cli_env)
    assert proc.stdin is not None and proc.stdout is not None and proc.stderr is not None
    try:
        before = pipe_size(proc.stdout.fileno())
        for line in proc.stderr:   # the stores are open once the service has started
            if b"event=service_started" in line:
                break
        seen = [pipe_size(proc.stdout.fileno()), pipe_size(proc.stdin.fileno())]
        deadline = time.monotonic() + 30   # the stdin reader widens its pipe when it starts
        while seen[1] != PIPE_BUFFER_BYTES and time.monotonic() < deadline:
            time.sleep(0.05)
            seen[1] = pipe_size(proc.stdin.fileno())
        proc.stdin.write(b'{"probe":"tank-3","ts":1764633600.0,"mv":0.0,"temp_c":25.0}\n')
        proc.stdin.close()
        out = proc.stdout.read()
        assert proc.wait(60) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
    assert before < PIPE_BUFFER_BYTES
    assert seen == [PIPE_BUFFER_BYTES, PIPE_BUFFER_BYTES]
    assert out.count(b'"kind":"reading"') == 1
