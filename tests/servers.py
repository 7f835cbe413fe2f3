"""Real servers for the tests: mosquitto and victoria-metrics on free loopback ports.

Each runs as a child process with its own data folder; ``kill()`` simulates a
crash (SIGKILL), ``stop()`` a clean shutdown, ``start()`` brings it back on the
same port with the same data, so outage tests can restart it.
"""

from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import time
import urllib.request
from collections.abc import Callable
from pathlib import Path

__all__ = ["Mosquitto", "VictoriaMetrics", "free_port", "wait_for_port"]


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def wait_for_port(port: int, timeout: float = 15.0, alive: Callable[[], bool] | None = None) -> None:
    """Until something accepts connections on ``port``; with ``alive``, give up as soon as it
    says the server process has exited (a port already in use, a bad data folder)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=0.5):
                return
        except OSError:
            if alive is not None and not alive():
                raise TimeoutError(f"the server process exited before listening on 127.0.0.1:{port}") from None
            time.sleep(0.05)
    raise TimeoutError(f"nothing listens on 127.0.0.1:{port} after {timeout} s")


def _binary(name: str, *extra: str) -> str:
    found = shutil.which(name)
    if found:
        return found
    for cand in extra:
        if os.access(cand, os.X_OK):
            return cand
    raise FileNotFoundError(f"{name} is not installed (make test installs it with apt-get)")


class _Server:
    port: int
    proc: subprocess.Popen[bytes] | None = None
    log_path: Path

    def _argv(self) -> list[str]:
        raise NotImplementedError

    def start(self, attempts: int = 3) -> None:
        """Start the server and wait until it listens.  A process that exits before
        listening (for instance on a port not yet free right after a kill) is started again,
        up to ``attempts`` times; one that hangs is not."""
        if self.proc is not None and self.proc.poll() is None:
            return
        for attempt in range(1, attempts + 1):
            self._log = open(self.log_path, "ab")
            self.proc = subprocess.Popen(
                self._argv(), stdout=self._log, stderr=subprocess.STDOUT, start_new_session=True
            )
            try:
                wait_for_port(self.port, alive=lambda: self.proc is not None and self.proc.poll() is None)
                return
            except TimeoutError as exc:
                exited = self.proc.poll() is not None
                self.kill()
                if not exited or attempt == attempts:
                    raise RuntimeError(f"{self._argv()[0]} did not start ({exc}, attempt {attempt}); "
                                       f"log:\n{self._log_tail()}") from None
                time.sleep(0.5)

    def _log_tail(self, chars: int = 2000) -> str:
        return self.log_path.read_text(errors="replace")[-chars:] if self.log_path.exists() else ""

    def describe(self) -> str:
        """Process state, port and log tail: for failure messages."""
        if self.proc is None:
            state = "not running (stopped or killed by the test)"
        elif self.proc.poll() is None:
            state = f"running, pid {self.proc.pid}"
        else:
            state = f"exited with {self.proc.returncode}"
        return f"{state}, port {self.port}; log tail:\n{self._log_tail()}"

    def _end(self, sig: int) -> None:
        if self.proc is None:
            return
        if self.proc.poll() is None:
            self.proc.send_signal(sig)
            try:
                self.proc.wait(10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(10)
        self.proc = None
        self._log.close()

    def kill(self) -> None:
        """Crash: SIGKILL."""
        self._end(signal.SIGKILL)

    def stop(self) -> None:
        """Clean shutdown: SIGTERM."""
        self._end(signal.SIGTERM)

    def restart(self, crash: bool = True) -> None:
        self.kill() if crash else self.stop()
        self.start()


class Mosquitto(_Server):
    """mosquitto with persistence (autosave every second) on a free loopback port."""

    def __init__(self, workdir: Path, port: int | None = None, extra_conf: str = "") -> None:
        self.port = port or free_port()
        self.dir = Path(workdir)
        self.dir.mkdir(parents=True, exist_ok=True)
        (self.dir / "data").mkdir(exist_ok=True)
        self.log_path = self.dir / "mosquitto.log"
        self.conf = self.dir / "mosquitto.conf"
        lines = [
            f"listener {self.port} 127.0.0.1",
            "allow_anonymous true",
            "persistence true",
            f"persistence_location {self.dir / 'data'}/",
            "autosave_interval 1",
            "max_queued_messages 100000",
            "max_inflight_messages 100",
            "log_dest stdout",
            "log_type error",
            "log_type warning",
        ]
        if os.geteuid() == 0:
            lines.append("user root")
        self.conf.write_text("\n".join(lines) + "\n" + extra_conf)

    @property
    def url(self) -> str:
        return f"mqtt://127.0.0.1:{self.port}"

    def _argv(self) -> list[str]:
        return [_binary("mosquitto", "/usr/sbin/mosquitto"), "-c", str(self.conf)]


class VictoriaMetrics(_Server):
    """victoria-metrics (accepts the InfluxDB v2 write API) on a free loopback port."""

    def __init__(self, workdir: Path, port: int | None = None) -> None:
        self.port = port or free_port()
        self.dir = Path(workdir)
        self.dir.mkdir(parents=True, exist_ok=True)
        self.log_path = self.dir / "victoria-metrics.log"

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def _argv(self) -> list[str]:
        return [
            _binary("victoria-metrics"),
            f"-httpListenAddr=127.0.0.1:{self.port}",
            f"-storageDataPath={self.dir / 'data'}",
            "-retentionPeriod=100y",
            "-search.latencyOffset=0s",
            "-search.disableCache",
            "-loggerLevel=ERROR",
            # Keep one sample per series and timestamp, as InfluxDB does with a
            # rewritten point, so idempotent re-sends can be counted.
            "-dedup.minScrapeInterval=1ms",
        ]

    def flush(self) -> None:
        """Make recently written points visible to queries."""
        urllib.request.urlopen(f"{self.url}/internal/force_flush", timeout=10).read()

    def export(self, match: str = '{__name__=~".+"}') -> list[dict]:
        """All series matching ``match`` through /api/v1/export (JSON lines)."""
        import json
        import urllib.parse

        self.flush()
        query = urllib.parse.urlencode({"match[]": match, "start": "0"})
        with urllib.request.urlopen(f"{self.url}/api/v1/export?{query}", timeout=30) as resp:
            return [json.loads(line) for line in resp.read().splitlines() if line.strip()]
