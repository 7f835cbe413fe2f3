"""Fixtures for the operator views: real SQLite stores with known contents, and the CLI as a subprocess.

The stores are written with the service's own SqliteStore (readings, alert
events) and the calibration store (calibrations, grab samples), so the views
read exactly what the service writes.  Site and probe names are invented.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
from iapws import IAPWS97
from iapws._iapws import _Kw as iapws_pkw

from probeflow.batch import QUALITY_NAMES, ProcessedBatch
from probeflow.calibration.acceptance import Verdict
from probeflow.calibration.model import Calibration
from probeflow.calibration.store import CalibrationStore
from probeflow.events import AlertEvent
from probeflow.stores.sqlite import SqliteStore, SqliteStoreConfig

REPO = Path(__file__).resolve().parents[2]


def neutral_ph_reference(temp_c: float) -> float:
    """pKw/2 of liquid water at 0.101325 MPa from the iapws package (test-only reference:
    IAPWS R11-07(2019) ionization constant via iapws._iapws._Kw, density from IAPWS-IF97)."""
    t_k = temp_c + 273.15
    rho = IAPWS97(T=t_k, P=0.101325).rho
    return float(iapws_pkw(rho, t_k)) / 2.0


def run_cli(*args: str, cwd: Path | None = None, timeout: float = 300) -> subprocess.CompletedProcess[str]:
    """``python -m probeflow ARGS`` as a real subprocess (stdout is a pipe, not a terminal)."""
    env = dict(os.environ, PYTHONPATH=str(REPO), MPLBACKEND="Agg")
    return subprocess.run([sys.executable, "-m", "probeflow", *args], cwd=cwd or REPO, env=env,
                          capture_output=True, text=True, timeout=timeout, check=False)


def processed(probe: str, ts: list[float], ph: list[float], temp_c: list[float],
              quality: list[str]) -> ProcessedBatch:
    """A processed batch whose neutral pH is the reference value at each temperature."""
    neutral = np.array([neutral_ph_reference(t) if np.isfinite(t) else np.nan for t in temp_c])
    ph_a = np.asarray(ph, dtype=np.float64)
    return ProcessedBatch(
        probe=np.array([probe] * len(ts), dtype=object), ts=np.asarray(ts, dtype=np.float64),
        mv=np.full(len(ts), 0.0), temp_c=np.asarray(temp_c, dtype=np.float64), ph=ph_a,
        neutral_ph=neutral, neutral_dev=ph_a - neutral,
        quality=np.array([QUALITY_NAMES.index(q) for q in quality], dtype=np.uint8))


def alert(rule: str, probe: str, limit: str, event: str, state: str, ts: float, value: float,
          threshold: float, quantity: str = "ph", severity: str = "medium",
          message: str = "") -> AlertEvent:
    return AlertEvent(rule=rule, probe=probe, quantity=quantity, limit=limit, event=event, state=state,
                      ts=ts, value=value, threshold=threshold, severity=severity, message=message)


@dataclass
class KnownStore:
    """A store and config whose contents the status test knows."""

    config: Path
    db: Path
    now: float
    expected: dict[str, dict[str, object]] = field(default_factory=dict)


STATUS_CONFIG = """\
site: Hollin Brook test works
probes:
  - id: tank-a
    calibration: store
  - id: tank-b
    calibration: {{offset_mv: 1.5, slope_pct: 98.2, zero_ph: 7.0}}
  - id: tank-c
    calibration: {{offset_mv: 0.0, slope_pct: 100.0}}
stores:
  - type: sqlite
    path: {db}
rules:
  bands:
    - id: tank-ph
      probes: ["tank-*"]
      quantity: ph
      low: 6.5
      high: 8.5
"""


@pytest.fixture
def known_store(tmp_path: Path) -> KnownStore:
    """Three probes: tank-a (alarm returned, calibrations with a later rejection, grab sample),
    tank-b (active alarm, calibration fixed in the config), tank-c (no readings)."""
    db = tmp_path / "store" / "pf.sqlite"
    store = SqliteStore(SqliteStoreConfig(path=str(db)))
    now = time.time()
    day = 86400.0
    # readings: the status shows the newest one of each probe
    store.write(processed("tank-a", [now - 120, now - 60], [9.0, 7.1234], [30.0, 25.04],
                          ["good", "good"]), [])
    store.write(processed("tank-b", [now - 300, now - 30], [8.9, 8.6789], [16.0, 15.96],
                          ["good", "maintenance"]), [])
    store.write(ProcessedBatch.concat([processed("tank-a", [now - 3 * day], [7.0], [20.0], ["good"])]), [
        # tank-a low: raised, then returned without an acknowledgement -> still shown
        alert("tank-ph", "tank-a", "low", "raise", "unack_active", now - 900, 6.3, 6.5),
        alert("tank-ph", "tank-a", "low", "clear", "unack_returned", now - 800, 6.6, 6.5),
        # tank-a high: raised, acknowledged, cleared -> normal, not shown
        alert("tank-ph", "tank-a", "high", "raise", "unack_active", now - 700, 8.7, 8.5),
        alert("tank-ph", "tank-a", "high", "ack", "ack_active", now - 650, 8.7, 8.5),
        alert("tank-ph", "tank-a", "high", "clear", "normal", now - 600, 8.3, 8.5),
        # tank-b high: active, not acknowledged
        alert("tank-ph", "tank-b", "high", "raise", "unack_active", now - 280, 8.9, 8.5),
        # tank-b noise diagnostic: raised, then acknowledged while active
        alert("diagnostics", "tank-b", "noise", "raise", "unack_active", now - 500, 25.0, 20.0,
              quantity="mv"),
        alert("diagnostics", "tank-b", "noise", "ack", "ack_active", now - 400, 25.0, 20.0,
              quantity="mv"),
    ])
    store.close()
    with CalibrationStore(db) as cal:
        cal.record_calibration("tank-a", Calibration(-4.2, 97.3), Verdict(True), ts=now - 3 * day,
                               who="test")
        cal.record_calibration("tank-a", Calibration(-31.0, 85.0), Verdict(False, ("slope low",)),
                               ts=now - 1 * day, who="test")
        cal.record_grab("tank-a", now - 2 * 3600, 7.05, online_ph=7.12)
    config = tmp_path / "status.yaml"
    config.write_text(STATUS_CONFIG.format(db=db), encoding="utf-8")
    return KnownStore(config=config, db=db, now=now)


@pytest.fixture
def cli() -> Callable[..., subprocess.CompletedProcess[str]]:
    return run_cli
