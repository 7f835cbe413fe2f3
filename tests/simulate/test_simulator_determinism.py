"""Same seed and arguments: byte-identical files; a different seed: different ones.

Runs the command as a user does, in a real subprocess.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest
from sim_scenarios import BASE, make_scenario

from probeflow.simulate.generator import Simulation

ROOT = Path(__file__).parents[2]
DEMO = ROOT / "simulators" / "scenarios" / "larkmoor-dairy.yaml"


def _simulate(tmp: Path, name: str, seed: int, ext: str, truth_ext: str) -> tuple[Path, Path]:
    out, truth = tmp / f"{name}.{ext}", tmp / f"{name}-truth.{truth_ext}"
    proc = subprocess.run(
        [sys.executable, "-m", "probeflow", "simulate", "--scenario", str(DEMO), "--out", str(out),
         "--duration", "40min", "--speed", "0", "--seed", str(seed), "--truth", str(truth),
         "--no-progress"],
        check=False, capture_output=True, text=True, timeout=120, cwd=ROOT,
    )
    assert proc.returncode == 0, proc.stderr
    return out, truth


@pytest.mark.parametrize(("ext", "truth_ext"), [("jsonl", "parquet"), ("parquet", "jsonl")])
def test_same_seed_same_bytes_other_seed_other_bytes(tmp_path: Path, ext: str, truth_ext: str) -> None:
    a, ta = _simulate(tmp_path, "a", 5, ext, truth_ext)
    b, tb = _simulate(tmp_path, "b", 5, ext, truth_ext)
    c, tc = _simulate(tmp_path, "c", 6, ext, truth_ext)
    assert a.stat().st_size > 10_000
    assert a.read_bytes() == b.read_bytes()
    assert ta.read_bytes() == tb.read_bytes()
    assert a.read_bytes() != c.read_bytes()
    assert ta.read_bytes() != tc.read_bytes()


def test_parquet_holds_every_reading_with_nulls_for_missing(tmp_path: Path) -> None:
    out, truth = _simulate(tmp_path, "p", 5, "parquet", "parquet")
    table = pq.read_table(out)
    assert table.column_names == ["probe", "ts", "mv", "temp_c", "ohms"]
    probes = set(table.column("probe").to_pylist())
    assert probes == {"cip-ph-a", "cip-ph-b", "bal-ph-1", "bal-ph-2", "bal-ph-3", "outfall-ph"}
    is_outfall = np.asarray(table.column("probe").to_pylist()) == "outfall-ph"
    outfall = table.filter(is_outfall)
    assert outfall.column("temp_c").null_count == outfall.num_rows
    assert outfall.column("ohms").null_count == 0
    meta = pq.ParquetFile(truth).schema_arrow.metadata
    assert meta[b"seed"] == b"5" and b"coated" in meta[b"fault_schedule"]


def _probe_columns(sim: Simulation, probe: str) -> np.ndarray:
    rows = []
    for chunk in sim.chunks():
        r = chunk.readings
        m = r.code == r.probes.index(probe)
        rows.append(np.stack([r.ts[m], r.mv[m], r.temp_c[m]]))
    return np.concatenate(rows, axis=1)


def test_adding_a_probe_leaves_the_others_unchanged() -> None:
    base = make_scenario()
    more = make_scenario(probes=[{"id": "new-0", "stream": "cool"}, *BASE["probes"]])
    for probe in ("w-1", "c-1"):
        a = _probe_columns(Simulation(base, 9, duration_ms=1_800_000), probe)
        b = _probe_columns(Simulation(more, 9, duration_ms=1_800_000), probe)
        assert np.array_equal(a, b, equal_nan=True)


def test_chunking_does_not_change_the_readings() -> None:
    sc = make_scenario()
    a = _probe_columns(Simulation(sc, 4, duration_ms=3_600_000), "w-2")
    b = _probe_columns(Simulation(sc, 4, duration_ms=3_600_000, chunk_ticks=734), "w-2")
    assert np.array_equal(a, b, equal_nan=True)
    c = _probe_columns(Simulation(sc, 5, duration_ms=3_600_000), "w-2")
    assert not np.array_equal(a, c, equal_nan=True)


def test_bad_scenario_exits_with_a_config_error(tmp_path: Path) -> None:
    bad = tmp_path / "bad.yaml"
    bad.write_text(DEMO.read_text().replace("stream: outfall", "stream: outfal"))
    proc = subprocess.run(
        [sys.executable, "-m", "probeflow", "simulate", "--scenario", str(bad), "--out",
         str(tmp_path / "x.jsonl"), "--duration", "1min"],
        check=False, capture_output=True, text=True, timeout=60, cwd=ROOT,
    )
    assert proc.returncode == 2
    assert "bad.yaml" in proc.stderr and "probes[5].stream" in proc.stderr and "outfal" in proc.stderr
