"""Fixtures for the calibration store tests: a temp config, a real SQLite file, the real CLI."""

from __future__ import annotations

import json
import subprocess
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from probeflow.batch import ProcessedBatch, Quality
from probeflow.stores.base import StoreContext
from probeflow.stores.sqlite import SqliteStore

REPO = Path(__file__).resolve().parents[2]
PYTHON = REPO / ".venv" / "bin" / "python"

CONFIG = """\
# invented test site
site: fenwick-test
probes:
  - id: basin-ph-1
    calibration: store
    calibration_due_days: 30
  - id: basin-ph-2
    calibration: {{offset_mv: 2.0, slope_pct: 98.0, zero_ph: 7.0}}
stores:
  - type: sqlite
    path: {db}
"""


@dataclass
class CliResult:
    returncode: int
    stdout: str
    stderr: str

    def json(self) -> dict:
        return json.loads(self.stdout)


@dataclass
class Site:
    dir: Path
    config: Path
    db: Path

    def cli(self, *args: str, input_text: str | None = None) -> CliResult:
        """Run the real command line as a subprocess (stdin not a terminal)."""
        proc = subprocess.run([str(PYTHON if PYTHON.exists() else sys.executable), "-m", "probeflow",
                               *args], cwd=self.dir, capture_output=True, text=True, check=False,
                              input=input_text if input_text is not None else "", timeout=120)
        return CliResult(proc.returncode, proc.stdout, proc.stderr)

    def write_readings(self, probe: str, ts: Sequence[float], mv: Sequence[float],
                       temp_c: Sequence[float], ph: Sequence[float],
                       quality: Quality = Quality.GOOD) -> None:
        """Rows in the readings table, written by the real sqlite store."""
        n = len(ts)
        f = lambda v: np.asarray(v, dtype=np.float64)
        batch = ProcessedBatch(np.array([probe] * n, dtype=object), f(ts), f(mv), f(temp_c), f(ph),
                               np.full(n, 7.0), f(ph) - 7.0, np.full(n, int(quality), dtype=np.uint8))
        store = SqliteStore(SqliteStore.Config(path=str(self.db)), StoreContext("fenwick-test"))
        try:
            store.write(batch, [])
        finally:
            store.close()


@pytest.fixture
def site(tmp_path: Path) -> Site:
    db = tmp_path / "data" / "site.sqlite"
    config = tmp_path / "site.yaml"
    config.write_text(CONFIG.format(db=db), encoding="utf-8")
    return Site(tmp_path, config, db)


@pytest.fixture
def rng() -> Callable[[int], np.random.Generator]:
    return np.random.default_rng
