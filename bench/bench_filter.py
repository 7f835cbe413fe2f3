"""Benchmark: ``probeflow filter``, JSON lines stdin -> stdout, as a subprocess.

Input: N invented reading records (default 1 million) of 1,000 probes, with
one band rule over every probe (so the rules stage runs too).  Output:
processed records (and alert events) on stdout, read and counted by this
script.  The baseline is ``baselines.py echo`` in a subprocess: orjson
decode and encode of every line, nothing else.  Both include interpreter
start-up.  Median of the repeats (interleaved) as lines per second, and the
ratio filter / echo (target >= 0.5).

Run:  .venv/bin/python bench/bench_filter.py [--lines N] [--repeat R]
"""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

from harness import (
    PYTHON,
    REPO,
    band_rules,
    interleaved,
    json_lines,
    make_readings,
    result,
    run_pipe,
    write_config,
)

N_PROBES = 1000


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--lines", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--full", action="store_true", help="the issue's size (1 M lines; the default)")
    args = ap.parse_args()
    n = 1_000_000 if args.full else args.lines
    with tempfile.TemporaryDirectory(prefix="bench-filter-") as tmp:
        tmpdir = Path(tmp)
        data = tmpdir / "in.jsonl"
        data.write_bytes(json_lines(make_readings(n, N_PROBES)))
        config = write_config(tmpdir / "filter.yaml", N_PROBES, rules=band_rules(N_PROBES))
        out_bytes: dict[str, int] = {}

        def ours() -> None:
            out_bytes["filter"] = run_pipe(
                [PYTHON, "-m", "probeflow", "filter", "--config", str(config)], data)

        def bare() -> None:
            out_bytes["echo"] = run_pipe([PYTHON, str(REPO / "bench" / "baselines.py"), "echo"], data)

        medians = interleaved({"filter": ours, "echo": bare}, args.repeat)
    ours_rate, bare_rate = n / medians["filter"], n / medians["echo"]
    ratio = ours_rate / bare_rate
    print(f"probeflow filter : {ours_rate:12,.0f} lines/s  ({medians['filter']:.2f} s, "
          f"{out_bytes['filter'] / 1e6:.0f} MB out)")
    print(f"bare orjson echo : {bare_rate:12,.0f} lines/s  ({medians['echo']:.2f} s, "
          f"{out_bytes['echo'] / 1e6:.0f} MB out)")
    print(f"ratio {ratio:.2f} (target >= 0.5); {n:,} lines, {N_PROBES} probes, median of {args.repeat}")
    result("filter stdin->stdout", f"{ours_rate:,.0f} lines/s", f"{bare_rate:,.0f} lines/s", ratio,
           ">= 0.5x", f"{n:,} lines")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
