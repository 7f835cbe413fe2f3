"""A real ``probeflow run`` subprocess fed through stdin, with a real SQLite file.

The site is invented (Marrow Creek test tanks).  Waiting helpers poll the
SQLite file with a generous deadline; they fail with what was seen, never on
speed.
"""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import Any

import pytest

REPO = Path(__file__).resolve().parents[2]
PYTHON = REPO / ".venv" / "bin" / "python"
if not PYTHON.exists():
    PYTHON = Path(sys.executable)

WAIT_S = 60.0

BASE_CONFIG = """\
# invented site for the integration tests
site: marrow-creek-test
probes:
  - id: tank-a
    calibration: {{offset_mv: 4.0, slope_pct: 97.0, zero_ph: 7.0}}
  - id: tank-b
    calibration: store
collectors:
{collectors}
stores:
  - type: sqlite
    path: {db}
rules:
  bands:
    - id: tank-ph
      probes: ["tank-*"]
      quantity: ph
      high: 8.5
service:
  batch_ms: 5
  state_path: {state}
{extra}"""


def wait_for(what: str, probe: Callable[[], Any], timeout: float = WAIT_S) -> Any:
    """Poll ``probe`` until it returns something truthy; fail naming ``what``."""
    deadline = time.monotonic() + timeout
    last: Any = None
    while time.monotonic() < deadline:
        last = probe()
        if last:
            return last
        time.sleep(0.05)
    pytest.fail(f"gave up waiting for {what} after {timeout:g} s (last seen: {last!r})")


class Site:
    """A temp directory with a config, its SQLite file and the real CLI."""

    def __init__(self, root: Path, collectors: str = "  - type: stdin", extra: str = "") -> None:
        self.dir = root
        self.db = root / "probeflow.sqlite"
        self.config = root / "site.yaml"
        self.config.write_text(BASE_CONFIG.format(collectors=collectors, db=self.db,
                                                  state=root / "state.json", extra=extra))
        self.env = dict(os.environ, PYTHONUNBUFFERED="1")

    def cli(self, *args: str, timeout: float = 120.0) -> subprocess.CompletedProcess[str]:
        return subprocess.run([str(PYTHON), "-m", "probeflow", *args], cwd=self.dir, env=self.env,
                              capture_output=True, text=True, timeout=timeout, check=False)

    def query(self, sql: str, params: Sequence[Any] = ()) -> list[tuple[Any, ...]]:
        if not self.db.exists():
            return []
        db = sqlite3.connect(self.db, timeout=10)
        try:
            return db.execute(sql, tuple(params)).fetchall()
        except sqlite3.OperationalError as exc:
            if "no such table" in str(exc):
                return []
            raise
        finally:
            db.close()

    def readings(self, probe: str | None = None) -> list[tuple[Any, ...]]:
        sql = "SELECT probe, ts, mv, temp_c, ph, quality FROM readings"
        if probe is None:
            return self.query(sql + " ORDER BY ts")
        return self.query(sql + " WHERE probe = ? ORDER BY ts", (probe,))

    def alerts(self, alarm_id: str | None = None) -> list[dict[str, Any]]:
        sql = "SELECT alarm_id, event, state, ts, value, message FROM alerts"
        rows = self.query(sql + (" WHERE alarm_id = ?" if alarm_id else "") + " ORDER BY id",
                          (alarm_id,) if alarm_id else ())
        return [dict(zip(("alarm_id", "event", "state", "ts", "value", "message"), r, strict=True))
                for r in rows]


class RunningService:
    """``probeflow run --config`` as a subprocess; readings go in through its stdin."""

    def __init__(self, site: Site) -> None:
        self.site = site
        self.stderr_path = site.dir / "service.log"
        self._stderr = self.stderr_path.open("wb")
        self.proc = subprocess.Popen([str(PYTHON), "-m", "probeflow", "run", "--config",
                                      str(site.config)], cwd=site.dir, env=site.env,
                                     stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
                                     stderr=self._stderr)
        wait_for("the service to start", lambda: b"service_started" in self.log_bytes()
                 or self.proc.poll() is not None)
        if self.proc.poll() is not None:
            pytest.fail(f"probeflow run exited at start:\n{self.log()}")

    def log_bytes(self) -> bytes:
        return self.stderr_path.read_bytes()

    def log(self) -> str:
        return self.log_bytes().decode("utf-8", "replace")

    def send(self, records: Sequence[dict[str, Any]]) -> None:
        assert self.proc.stdin is not None
        self.proc.stdin.write(b"".join(json.dumps(r).encode() + b"\n" for r in records))
        self.proc.stdin.flush()

    def stop(self) -> int:
        """Close stdin (end of input: the service flushes and exits)."""
        if self.proc.poll() is None and self.proc.stdin is not None:
            self.proc.stdin.close()
        try:
            code = self.proc.wait(timeout=WAIT_S)
        except subprocess.TimeoutExpired:
            self.proc.send_signal(signal.SIGTERM)
            code = self.proc.wait(timeout=WAIT_S)
        self._stderr.close()
        return code

    def terminate(self) -> int:
        """SIGTERM (what systemd sends): the service flushes and exits."""
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
        code = self.proc.wait(timeout=WAIT_S)
        self._stderr.close()
        return code

    def kill(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait(timeout=WAIT_S)
        self._stderr.close()


@pytest.fixture
def site(tmp_path: Path) -> Site:
    return Site(tmp_path)


@pytest.fixture
def make_site(tmp_path: Path) -> Callable[..., Site]:
    def make(collectors: str = "  - type: stdin", extra: str = "") -> Site:
        return Site(tmp_path, collectors, extra)
    return make


@pytest.fixture
def service_of() -> Iterator[Callable[[Site], RunningService]]:
    started: list[RunningService] = []

    def start(site: Site) -> RunningService:
        svc = RunningService(site)
        started.append(svc)
        return svc
    yield start
    for svc in started:
        svc.kill()
