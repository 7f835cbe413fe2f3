"""Calibrating against live readings: the running service's stored readings, or the collectors.

The interactive session runs the real command on a pseudo-terminal.  The
"service" is played by the test writing readings into the real SQLite
``readings`` table: a simulated electrode (offset 5 mV, slope 96 %, model
E = E0 - s k(T) (pH - 7) from probeflow.chemistry.potential_from_ph) settling
in each buffer as a first-order step (tau 10 s) with 0.05 mV noise.
"""

from __future__ import annotations

import json
import os
import pty
import select
import subprocess
import time
from pathlib import Path

import numpy as np

PYTHON = Path(__file__).resolve().parents[2] / ".venv" / "bin" / "python"

from probeflow.buffers import buffer_ph
from probeflow.calibration.live import CollectorTap, StoreTail
from probeflow.calibration.store import CalibrationStore
from probeflow.chemistry import potential_from_ph
from probeflow.config import load_config

PROBE = "basin-ph-1"
OFFSET, SLOPE, TEMP_C = 5.0, 96.0, 22.0


class Pty:
    """The real command on a pseudo-terminal; ``expect`` reads until a text appears."""

    def __init__(self, args: list[str], cwd) -> None:
        self.master, slave = pty.openpty()
        self.proc = subprocess.Popen([str(PYTHON), "-m", "probeflow", *args], cwd=cwd, stdin=slave,
                                     stdout=slave, stderr=subprocess.PIPE, close_fds=True)
        os.close(slave)
        self.seen = ""

    def expect(self, text: str, guard_s: float = 60.0) -> str:
        end = time.monotonic() + guard_s
        while text not in self.seen:
            if time.monotonic() > end or self.proc.poll() is not None and not self._ready(0.2):
                raise AssertionError(f"never saw {text!r}; output so far:\n{self.seen}\n"
                                     f"stderr: {self.proc.stderr.read().decode() if self.proc.poll() is not None else ''}")
            if self._ready(0.2):
                try:
                    self.seen += os.read(self.master, 65536).decode(errors="replace")
                except OSError:
                    pass
        found, self.seen = self.seen, self.seen[self.seen.index(text) + len(text):]
        return found

    def _ready(self, timeout: float) -> bool:
        return bool(select.select([self.master], [], [], timeout)[0])

    def send(self, line: str) -> None:
        os.write(self.master, (line + "\n").encode())

    def finish(self) -> tuple[int, str]:
        rc = self.proc.wait(timeout=60)
        rest = ""
        while self._ready(0.1):
            try:
                chunk = os.read(self.master, 65536).decode(errors="replace")
            except OSError:
                break
            if not chunk:
                break
            rest += chunk
        os.close(self.master)
        return rc, self.seen + rest


def settle_into(site, buffer: str, start_ts: float, from_mv: float, seed: int) -> tuple[float, float]:
    """Write 150 s of readings settling from ``from_mv`` to the buffer's potential; (last ts, final mV)."""
    target = float(potential_from_ph(buffer_ph(buffer, TEMP_C), TEMP_C, OFFSET, SLOPE, 7.0))
    t = np.arange(1.0, 151.0)
    mv = target + (from_mv - target) * np.exp(-t / 10.0) + np.random.default_rng(seed).normal(0, 0.05, t.size)
    site.write_readings(PROBE, start_ts + t, mv, np.full(t.size, TEMP_C), np.full(t.size, np.nan))
    return float(start_ts + t[-1]), target


def test_interactive_calibration_from_the_running_service(site):
    t0 = time.time()
    site.write_readings(PROBE, [t0], [0.0], [TEMP_C], [7.0])   # the service is writing
    session = Pty(["calibrate", "--config", str(site.config), "--probe", PROBE,
                   "--buffer-set", "primary_4_7_9", "--yes", "--json", "--who", "L. Marsh",
                   "--serial", "EL-778"], site.dir)
    session.expect("Reading readings of basin-ph-1 stored by the running service")
    session.expect("press Enter")
    with CalibrationStore(site.db) as store:
        assert store.maintenance_state(time.time(), [PROBE]) == {PROBE: True}
    last, e1 = settle_into(site, "phthalate_0.05", t0, 0.0, seed=1)
    session.send("")
    session.expect("STABLE")
    session.expect("Recognised")
    session.expect("Buffer name or its pH (empty to skip this point) [phthalate_0.05]")
    session.send("")
    session.expect("Another point?")
    session.send("y")
    session.expect("press Enter")
    settle_into(site, "borax_0.01", last, e1, seed=2)
    session.send("")
    session.expect("[borax_0.01]")
    session.send("")
    session.expect("Another point?")
    session.send("n")
    rc, output = session.finish()
    assert rc == 0, output
    result = json.loads(output.strip().splitlines()[-1])
    assert result["verdict"] == "accepted"
    assert abs(result["offset_mv"] - OFFSET) < 0.2
    assert abs(result["slope_pct"] - SLOPE) < 0.3
    assert [p["stable"] for p in result["points"]] == [True, True]
    assert all(abs(p["drift_mv_per_min"]) < 0.5 for p in result["points"])
    with CalibrationStore(site.db) as store:
        (period,) = store.maintenance_periods(PROBE)
        assert period.reason == "calibration" and period.ended is not None
        assert store.maintenance_state(time.time(), [PROBE]) == {PROBE: False}
        rec = store.latest_accepted(PROBE)
        assert rec.electrode_serial == "EL-778" and [p.stable for p in rec.points] == [True, True]


def test_store_tail_returns_only_new_rows_of_the_probe(site):
    site.write_readings(PROBE, [1.0, 2.0], [10.0, 11.0], [20.0, 20.0], [7.0, 7.0])
    with CalibrationStore(site.db) as store:
        tail = StoreTail(store, PROBE, poll_s=0.01)
        assert tail.samples(timeout=0.0) == []
        site.write_readings(PROBE, [3.0, 4.0], [12.0, 13.0], [21.0, 21.0], [7.0, 7.0])
        site.write_readings("basin-ph-2", [5.0], [99.0], [21.0], [7.0])
        got = tail.samples(timeout=1.0)
        assert [(s.ts, s.mv, s.temp_c) for s in got] == [(3.0, 12.0, 21.0), (4.0, 13.0, 21.0)]
        assert tail.samples(timeout=0.0) == []


def test_collector_tap_reads_the_probe_from_the_configured_collector(site, tmp_path):
    """No service running: the config's file collector is opened and filtered to the probe."""
    recording = tmp_path / "rec.jsonl"
    lines = []
    for i in range(20):
        lines.append(json.dumps({"probe": PROBE, "ts": 1.79e9 + i, "mv": 50.0 + i, "temp_c": 19.5}))
        lines.append(json.dumps({"probe": "basin-ph-2", "ts": 1.79e9 + i, "mv": -5.0, "temp_c": 19.5}))
    lines.append("this line is not a reading")
    recording.write_text("\n".join(lines) + "\n", encoding="utf-8")
    config_file = tmp_path / "tap.yaml"
    config_file.write_text(site.config.read_text() + f"collectors:\n  - type: file\n    path: {recording}\n",
                           encoding="utf-8")
    config = load_config(config_file)
    tap = CollectorTap(config, PROBE)
    got = []
    try:
        end = time.monotonic() + 30
        while len(got) < 20 and time.monotonic() < end:
            got.extend(tap.samples(timeout=0.5))
    finally:
        tap.close()
    assert [s.mv for s in got] == [50.0 + i for i in range(20)]
    assert {s.temp_c for s in got} == {19.5}
    assert tap.quarantined == 1
