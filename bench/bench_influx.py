"""Benchmark: the InfluxDB store's line-protocol builder and its outbox forwarder.

Two figures, each against a bare baseline measured in the same run, on a real
victoria-metrics started on a free loopback port (as the tests do):

* build: ``reading_lines`` (escaping, NaN handling, quality tag, one fixed
  template per NaN pattern) on numpy columns of N readings from 1,000 probes,
  against the plainest hand-written loop that formats the same lines with an
  f-string per row and no escaping or NaN handling; influxdb-client's
  ``Point`` objects are timed too, on a tenth of the rows, for orientation;
* forward: the store's forwarder draining an outbox pre-filled with the
  N lines (read oldest rows from SQLite, send synchronously, delete after
  the server confirms), against a bare synchronous influxdb-client write of
  the same lines pre-joined into 5,000-line bodies.  Each repeat uses its own
  timestamps so the server sees new points every time; the two are
  interleaved so machine noise hits both alike.

Medians of the repeats as points per second, and the ratios (targets: forward
>= 0.8 x bare).

Run:  .venv/bin/python bench/bench_influx.py [--readings N] [--repeat R]
"""

from __future__ import annotations

import argparse
import logging
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "tests"))

from influxdb_client import InfluxDBClient, Point, WritePrecision
from influxdb_client.client.write_api import SYNCHRONOUS
from servers import VictoriaMetrics

from probeflow.batch import QUALITY_NAMES, ProcessedBatch
from probeflow.stores.base import StoreContext
from probeflow.stores.influx import InfluxStore, InfluxStoreConfig
from probeflow.stores.line_protocol import reading_lines
from probeflow.stores.outbox import Outbox

N_PROBES = 1000
BODY_LINES = 5000
SITE = "north-weir"


def make_batch(n: int, t0: float, seed: int = 3) -> ProcessedBatch:
    """Invented demo data: 1,000 probes read in turn every 0.1 s, full-precision floats."""
    rng = np.random.default_rng(seed)
    idx = np.arange(n)
    names = np.array([f"tank-{k:03d}" for k in range(N_PROBES)], dtype=object)
    temp = rng.normal(25.0, 4.0, n)
    ph = rng.normal(7.2, 0.8, n)
    neutral = 7.0 - 0.0165 * (temp - 25.0)
    return ProcessedBatch(
        probe=names[idx % N_PROBES], ts=t0 + (idx // N_PROBES) * 0.1 + (idx % N_PROBES) * 1e-4,
        mv=rng.normal(0.0, 60.0, n), temp_c=temp, ph=ph, neutral_ph=neutral, neutral_dev=ph - neutral,
        quality=np.zeros(n, dtype=np.uint8),
    )


def bare_build(b: ProcessedBatch) -> list[str]:
    """Baseline: one f-string per row, no escaping, no NaN handling."""
    stamps = np.rint(b.ts * 1000).astype(np.int64).tolist()
    return [
        f"ph,probe={p},quality=good,site={SITE} ph={a!r},mv={m!r},temp_c={t!r},"
        f"neutral_ph={u!r},neutral_dev={d!r} {s}"
        for p, a, m, t, u, d, s in zip(b.probe.tolist(), b.ph.tolist(), b.mv.tolist(),
                                         b.temp_c.tolist(), b.neutral_ph.tolist(),
                                         b.neutral_dev.tolist(), stamps)
    ]


def point_build(b: ProcessedBatch) -> list[str]:
    """For orientation: the library's Point objects, one per row."""
    out = []
    for i in range(len(b)):
        p = Point("ph").tag("probe", b.probe[i]).tag("quality", QUALITY_NAMES[int(b.quality[i])])
        p = p.tag("site", SITE)
        for f in ("ph", "mv", "temp_c", "neutral_ph", "neutral_dev"):
            p = p.field(f, float(getattr(b, f)[i]))
        out.append(p.time(round(float(b.ts[i]) * 1000), WritePrecision.MS).to_line_protocol())
    return out


def timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--readings", type=int, default=200_000)
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    n, reps = args.readings, args.repeat
    logging.basicConfig(level=logging.WARNING)

    # -- build -----------------------------------------------------------------
    batch = make_batch(n, 1764633600.0)
    ours_b, bare_b = [], []
    for _ in range(reps):
        bare_b.append(timed(lambda: bare_build(batch)))
        ours_b.append(timed(lambda: reading_lines(batch, site=SITE)))
    small = make_batch(n // 10, 1764633600.0)
    point_t = statistics.median(timed(lambda: point_build(small)) for _ in range(max(1, reps // 2)))
    b_ours, b_bare = n / statistics.median(ours_b), n / statistics.median(bare_b)
    print(f"build   probeflow reading_lines  {b_ours:12,.0f} points/s")
    print(f"build   bare f-string loop       {b_bare:12,.0f} points/s   ratio {b_ours / b_bare:.2f}")
    print(f"build   influxdb-client Point    {len(small) / point_t:12,.0f} points/s   (orientation)")

    # -- forward ---------------------------------------------------------------
    with tempfile.TemporaryDirectory(prefix="bench-influx-") as tmp:
        vm = VictoriaMetrics(Path(tmp) / "vm")
        vm.start()
        try:
            client = InfluxDBClient(url=vm.url, token="", org="works", timeout=30_000)
            api = client.write_api(write_options=SYNCHRONOUS)
            ours_f, bare_f = [], []
            for rep in range(reps):
                # Fresh timestamps for each run (building is not timed here).
                bare_lines = reading_lines(make_batch(n, 1764633600.0 + 86400 * (2 * rep + 1)), site=SITE).lines
                ours_lines = reading_lines(make_batch(n, 1764633600.0 + 86400 * (2 * rep + 2)), site=SITE).lines
                bodies = ["\n".join(bare_lines[i : i + BODY_LINES]).encode() for i in range(0, n, BODY_LINES)]

                def bare_send(bodies: list[bytes] = bodies) -> None:
                    for body in bodies:
                        api.write("ph", "works", body, write_precision="ms")

                path = Path(tmp) / f"outbox-{rep}.sqlite"
                box = Outbox(path)
                box.append(ours_lines, "ms", BODY_LINES)
                box.close()
                cfg = InfluxStoreConfig(type="influx", url=vm.url, org="works", bucket="ph",
                                        outbox_path=str(path), batch_lines=BODY_LINES, timeout_s=30,
                                        flush_timeout_s=600)
                holder: list[InfluxStore] = []

                def forward(cfg: InfluxStoreConfig = cfg, holder: list[InfluxStore] = holder) -> None:
                    store = InfluxStore(cfg, StoreContext(SITE))
                    holder.append(store)
                    if not store.flush() or store.outbox_lines:
                        raise RuntimeError("the forwarder did not drain the outbox")

                if rep % 2:
                    bare_f.append(timed(bare_send))
                    ours_f.append(timed(forward))
                else:
                    ours_f.append(timed(forward))
                    bare_f.append(timed(bare_send))
                holder[0].close()
            api.close()
            client.close()
        finally:
            vm.kill()
    f_ours, f_bare = n / statistics.median(ours_f), n / statistics.median(bare_f)
    print(f"forward probeflow outbox->server {f_ours:12,.0f} points/s")
    print(f"forward bare sync write, 5,000-line bodies {f_bare:12,.0f} points/s   "
          f"ratio {f_ours / f_bare:.2f} (target >= 0.8)")
    print(f"({n:,} readings, {N_PROBES} probes, median of {reps} repeats)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
