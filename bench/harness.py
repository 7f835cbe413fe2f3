"""Shared helpers of the benchmark scripts: timing, invented input data, configs.

Nothing here is timed itself.  Every figure a script prints is the median of
several repetitions and is quoted with its ratio to a bare baseline measured
in the same run (see ``baselines.py``); the machines are shared and noisy, so
a lone absolute time means little.

All data is invented: the site "north-weir" and its probes "basin-000" ...
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import orjson
import yaml

REPO = Path(__file__).resolve().parents[1]
PYTHON = str(REPO / ".venv" / "bin" / "python") if (REPO / ".venv" / "bin" / "python").exists() \
    else sys.executable
SITE = "north-weir"
T0 = 1_764_633_600.0   # 2025-12-02T00:00:00Z

if str(REPO / "tests") not in sys.path:
    sys.path.insert(0, str(REPO / "tests"))   # tests/servers.py: real mosquitto / victoria-metrics


def probe_names(n_probes: int) -> list[str]:
    return [f"basin-{k:03d}" for k in range(n_probes)]


def make_readings(n: int, n_probes: int, seed: int = 11, t0: float = T0) -> dict[str, np.ndarray]:
    """Invented readings as columns: probes read in turn, every probe once per second."""
    rng = np.random.default_rng(seed)
    idx = np.arange(n)
    names = np.array(probe_names(n_probes), dtype=object)
    return {
        "probe": names[idx % n_probes],
        "ts": t0 + (idx // n_probes) * 1.0 + (idx % n_probes) * (1.0 / n_probes) * 0.5,
        "mv": np.round(rng.normal(0.0, 20.0, n), 2),   # pH about 7 +- 0.35
        "temp_c": np.round(rng.normal(18.0, 4.0, n), 2),
    }


def json_lines(cols: dict[str, np.ndarray]) -> bytes:
    """The columns as JSON Lines reading records (input format of probeflow)."""
    rows = zip(cols["probe"].tolist(), cols["ts"].tolist(), cols["mv"].tolist(),
               cols["temp_c"].tolist())
    dumps = orjson.dumps
    return b"\n".join(dumps({"probe": p, "ts": t, "mv": m, "temp_c": c}) for p, t, m, c in rows) + b"\n"


def probe_configs(n_probes: int, seed: int = 5) -> list[dict[str, Any]]:
    rng = np.random.default_rng(seed)
    return [{"id": name, "calibration": {"offset_mv": round(float(rng.normal(0, 5)), 2),
                                         "slope_pct": round(float(rng.uniform(94, 101)), 2),
                                         "zero_ph": 7.0}}
            for name in probe_names(n_probes)]


def band_rules(n_probes: int) -> dict[str, Any]:
    """One band rule over every probe (a typical site-wide discharge band; the
    invented readings cross it rarely, as in a plant that mostly runs well)."""
    return {"bands": [{"id": "basin-ph", "probes": ["basin-*"], "quantity": "ph",
                       "low": 5.5, "high": 8.5, "deadband": 0.1,
                       "on_delay_s": 0, "off_delay_s": 0}]}


def write_config(path: Path, n_probes: int, *, collectors: Sequence[dict[str, Any]] = (),
                 stores: Sequence[dict[str, Any]] = (), rules: dict[str, Any] | None = None,
                 service: dict[str, Any] | None = None) -> Path:
    doc: dict[str, Any] = {"site": SITE, "probes": probe_configs(n_probes)}
    if collectors:
        doc["collectors"] = list(collectors)
    if stores:
        doc["stores"] = list(stores)
    if rules is not None:
        doc["rules"] = rules
    if service:
        doc["service"] = service
    path.write_text(yaml.safe_dump(doc, sort_keys=False))
    return path


def timed(fn: Callable[[], object]) -> float:
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def interleaved(runs: dict[str, Callable[[], object]], repeat: int,
                between: Callable[[], object] | None = None) -> dict[str, float]:
    """Median seconds of each function, run in turn ``repeat`` times (the
    order alternates so slow drifts in machine load hit every one alike)."""
    times: dict[str, list[float]] = {k: [] for k in runs}
    names = list(runs)
    for rep in range(repeat):
        for name in (names if rep % 2 == 0 else names[::-1]):
            if between is not None:
                between()
            times[name].append(timed(runs[name]))
    return {k: statistics.median(v) for k, v in times.items()}


def run_pipe(argv: Sequence[str], stdin_path: Path, env: dict[str, str] | None = None) -> int:
    """Run ``argv`` with ``stdin_path`` as stdin and stdout discarded (counted);
    returns the bytes written to stdout."""
    with open(stdin_path, "rb") as fin:
        proc = subprocess.Popen(list(argv), stdin=fin, stdout=subprocess.PIPE,
                                stderr=subprocess.DEVNULL, env=env)
        total = 0
        if proc.stdout is None:
            raise RuntimeError("no stdout pipe")
        while True:
            chunk = proc.stdout.read(1 << 20)
            if not chunk:
                break
            total += len(chunk)
        if proc.wait() != 0:
            raise RuntimeError(f"{argv} exited with {proc.returncode}")
    return total


def machine_load() -> str:
    try:
        one, five, fifteen = os.getloadavg()
    except OSError:
        return "load average unknown"
    return f"load average {one:.2f} {five:.2f} {fifteen:.2f} on {os.cpu_count()} cores"


def result(stage: str, figure: str, baseline: str, ratio: float | None, target: str,
           size: str) -> None:
    """One machine-readable summary line per figure (collected into bench/README.md)."""
    r = "-" if ratio is None else f"{ratio:.2f}x"
    print(f"RESULT | {stage} | {figure} | {baseline} | {r} | {target} | {size} | {machine_load()}",
          flush=True)
