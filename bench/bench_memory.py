"""Benchmark: resident memory of ``probeflow run`` with 1,000 probes over a soak.

``probeflow run`` (subprocess) with a stdin collector, the SQLite store and
one band rule over every probe is fed invented readings on its standard input
at a steady rate (default 2,000 readings/s: every probe twice a second, with
a few excursions so alarms come and go).  Resident memory (VmRSS from
/proc/PID/status) is sampled every second.  Reports the peak, the level after
warm-up, and the slope of a least-squares line through the second half of
the samples [MiB per minute]; flat means a slope near zero.  For scale, the
RSS of a bare interpreter that imports the same libraries (numpy, pandas,
pyarrow, pydantic, paho, orjson) is measured too.

Run:  .venv/bin/python bench/bench_memory.py [--soak SECONDS] [--rate READINGS_PER_S]
      (--soak 600 for the full 10-minute soak)
"""

from __future__ import annotations

import argparse
import subprocess
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import orjson
from harness import PYTHON, band_rules, probe_names, result, write_config

N_PROBES = 1000
BARE_IMPORTS = "import numpy, pandas, pyarrow, pydantic, paho.mqtt.client, orjson, yaml, sqlite3, time; time.sleep(3)"


def rss_mib(pid: int) -> float:
    with open(f"/proc/{pid}/status") as f:
        for line in f:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024.0
    return float("nan")


def feed(stdin, rate: int, stop: threading.Event) -> int:
    """Write readings at ``rate`` per second in 20 slices a second; returns the count."""
    names = probe_names(N_PROBES)
    rng = np.random.default_rng(3)
    per_slice = max(1, rate // 20)
    sent = 0
    k = 0
    next_t = time.monotonic()
    while not stop.is_set():
        now = time.time()
        mv = rng.normal(0.0, 20.0, per_slice)
        mv[rng.random(per_slice) < 0.002] = 250.0  # an excursion: pH far below the band
        lines = [orjson.dumps({"probe": names[(k + i) % N_PROBES], "ts": now + i * 1e-6,
                               "mv": round(float(mv[i]), 2), "temp_c": 18.0})
                 for i in range(per_slice)]
        k += per_slice
        try:
            stdin.write(b"\n".join(lines) + b"\n")
            stdin.flush()
        except BrokenPipeError:
            break
        sent += per_slice
        next_t += 0.05
        time.sleep(max(0.0, next_t - time.monotonic()))
    return sent


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--soak", type=float, default=60.0, help="seconds (600 = the full soak)")
    ap.add_argument("--rate", type=int, default=2000, help="readings per second")
    ap.add_argument("--cache-mib", type=int, default=None,
                    help="the SQLite store's page cache (default: the store's, 64 MiB); the cache "
                         "grows with the file until full, which shows as a slope in short soaks")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="bench-memory-") as tmp:
        tmpdir = Path(tmp)
        config = write_config(tmpdir / "soak.yaml", N_PROBES, collectors=[{"type": "stdin"}],
                              stores=[{"type": "sqlite", "path": str(tmpdir / "soak.sqlite"),
                                       **({} if args.cache_mib is None else {"cache_mib": args.cache_mib})}],
                              rules=band_rules(N_PROBES))
        bare = subprocess.Popen([PYTHON, "-c", BARE_IMPORTS])
        time.sleep(2.5)
        bare_rss = rss_mib(bare.pid)
        bare.wait()

        proc = subprocess.Popen([PYTHON, "-m", "probeflow", "run", "--config", str(config)],
                                stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
                                stderr=open(tmpdir / "run.log", "wb"))  # noqa: SIM115 - lives as long as the child
        stop = threading.Event()
        counted: list[int] = []
        writer = threading.Thread(target=lambda: counted.append(feed(proc.stdin, args.rate, stop)))
        writer.start()
        samples: list[tuple[float, float]] = []
        start = time.monotonic()
        while time.monotonic() - start < args.soak:
            time.sleep(1.0)
            if proc.poll() is not None:
                raise RuntimeError(f"probeflow run ended early; see {tmpdir / 'run.log'}")
            samples.append((time.monotonic() - start, rss_mib(proc.pid)))
        stop.set()
        writer.join()
        if proc.stdin is not None:
            proc.stdin.close()   # end of input: the service converts what is left and exits
        code = proc.wait(60)
        if code != 0:
            raise RuntimeError(f"probeflow run exited with {code}")
    t = np.array([s[0] for s in samples])
    rss = np.array([s[1] for s in samples])
    half = len(t) // 2
    slope = float(np.polyfit(t[half:], rss[half:], 1)[0]) * 60.0 if len(t) - half >= 3 else float("nan")
    warm = float(np.median(rss[max(0, half - 3):half + 3]))
    peak = float(rss.max())
    sent = counted[0] if counted else 0
    print(f"readings fed: {sent:,} at {args.rate:,}/s over {args.soak:.0f} s, {N_PROBES} probes")
    print(f"RSS after warm-up {warm:.1f} MiB, peak {peak:.1f} MiB, "
          f"slope over the second half {slope:+.2f} MiB/min")
    print(f"bare interpreter with the same libraries imported: {bare_rss:.1f} MiB")
    print("samples (s, MiB): " + ", ".join(f"{a:.0f}:{b:.0f}" for a, b in samples[:: max(1, len(samples) // 12)]))
    result("memory of probeflow run (1,000 probes)", f"peak {peak:.0f} MiB, slope {slope:+.2f} MiB/min",
           f"{bare_rss:.0f} MiB (bare imports)", None, "flat over 10 min; report peak",
           f"{args.soak:.0f} s soak at {args.rate:,}/s"
           + ("" if args.cache_mib is None else f", SQLite cache {args.cache_mib} MiB"))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
