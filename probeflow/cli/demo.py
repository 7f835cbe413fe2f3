"""probeflow demo: the simulated site of configs/demo.yaml, shown as it runs.

Runs the configured pipeline (simulator -> conversion -> rules -> SQLite) for
a bounded wall-clock time and prints readings (at most one line per probe per
``--print-every`` of simulated time) and every alert event as it happens.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from probeflow.cli.common import make_log, parse_duration, print_stats, stop_on_signals

HELP = "run the demo site (simulated probes -> pH, alarms, SQLite) and show readings and alerts"

DEFAULT_CONFIG = "configs/demo.yaml"

CAUTION = ("Caution: probeflow supports operators; it is not a safety system. Its alarms must not "
           "be the only protection against a dosing fault or a discharge-limit breach.")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--config", "-c", default=DEFAULT_CONFIG, metavar="FILE",
                        help=f"demo config (default {DEFAULT_CONFIG})")
    parser.add_argument("--duration", type=parse_duration, default=60.0,
                        help="how long to run, wall-clock (default 60s)")
    parser.add_argument("--print-every", type=parse_duration, default=600.0, metavar="DURATION",
                        help="at most one reading line per probe per this much simulated time "
                             "(default 10m)")
    parser.add_argument("--keep", action="store_true",
                        help="keep the demo store of an earlier run (default: start it afresh, "
                             "so two runs' invented data do not overlap in time)")


def run(args: argparse.Namespace) -> int:
    from probeflow.cli.console_view import ConsoleView
    from probeflow.config import load_config
    from probeflow.service.pipeline import build_service

    config = load_config(args.config)
    log = make_log(config.service.log_format)
    print(CAUTION, flush=True)
    print(f"Demo site {config.site!r}: {len(config.probes)} probes, running for "
          f"{args.duration:g} s (Ctrl-C stops early).", flush=True)
    if not args.keep:
        for store in config.stores:
            if store.type == "sqlite":
                base = Path(str(store.config.path))
                for old in (base, Path(f"{base}-wal"), Path(f"{base}-shm")):
                    old.unlink(missing_ok=True)
    view = ConsoleView(sys.stdout, args.print_every)
    service = build_service(config, extra_stores=[("console", view)], log=log)
    with stop_on_signals(service):
        stats = service.run(duration_s=args.duration)
    print_stats(log, stats)
    where = [str(getattr(s.config, "path", "")) for s in config.stores if s.type == "sqlite"]
    print(f"\n{stats.readings_converted} readings converted, {stats.alerts} alert events, "
          f"{stats.quarantined} inputs quarantined."
          + (f" Stored in {', '.join(where)}." if where else ""), flush=True)
    if where and Path(where[0]).exists():
        print("Next: every probe on one screen, then a report with a plot per probe:\n"
              f"  .venv/bin/probeflow status --config {args.config} --once\n"
              f"  .venv/bin/probeflow report --config {args.config} --since 2h --until latest "
              "--out demo-report.html\n"
              "What to look at, and which alarms fire and why: docs/README-tour.md", flush=True)
    return 0
