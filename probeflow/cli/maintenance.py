"""``probeflow maintenance start|stop|status --probe ID [--for 30m]``.

While a probe is in maintenance the running service flags its readings
``maintenance`` and suppresses its alarms (it polls the store, no restart).
``--for`` ends the period by itself; ``stop`` ends it at once.

Caution: alarms of a probe in maintenance are not raised.  Stop maintenance
when the work is done; probeflow is not a safety system.
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

from probeflow.calibration.site import probe_config, store_path
from probeflow.calibration.store import CalibrationStore
from probeflow.cli.common import add_config_argument, parse_duration
from probeflow.config import load_config
from probeflow.errors import ProbeflowError
from probeflow.events import rfc3339

HELP = "put a probe in maintenance (readings flagged, alarms suppressed) or take it out"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("action", choices=("start", "stop", "status"))
    add_config_argument(parser)
    parser.add_argument("--probe", metavar="ID", help="probe id (status: all probes when left out)")
    parser.add_argument("--for", dest="duration", type=parse_duration, metavar="DURATION",
                        help="start: end by itself after this long (e.g. 30m, 2h)")
    parser.add_argument("--reason", help="start: why (kept with the period)")
    parser.add_argument("--db", metavar="FILE", help="SQLite file (default: the config's sqlite store)")
    parser.add_argument("--json", action="store_true", help="print JSON")


def run(args: argparse.Namespace) -> int:
    config = load_config(args.config, sections=("stores",), require_secrets=False)
    if args.action != "status" and not args.probe:
        raise ProbeflowError(f"maintenance {args.action}: --probe ID is required")
    if args.probe:
        probe_config(config, args.probe)
    path = Path(args.db) if args.db else store_path(config)
    now = time.time()
    with CalibrationStore(path) as store:
        if args.action == "start":
            until = None if args.duration is None else now + args.duration
            pid = store.start_maintenance(args.probe, now, until, args.reason)
            out = {"probe": args.probe, "id": pid, "start": now, "until": until, "maintenance": True}
            text = (f"{args.probe} in maintenance from {rfc3339(now)}"
                    + (f" until {rfc3339(until)}" if until else " until stopped"))
        elif args.action == "stop":
            ended = store.stop_maintenance(args.probe, now)
            out = {"probe": args.probe, "ended_periods": ended, "maintenance": False}
            text = (f"{args.probe} out of maintenance" if ended
                    else f"{args.probe} was not in maintenance")
        else:
            probes = [args.probe] if args.probe else list(config.probe_ids)
            state = store.maintenance_state(now, probes)
            periods = {p.probe: p for p in store.open_periods() if p.active(now)}
            out = {"maintenance": {p: state.get(p, False) for p in probes},
                   "until": {p: periods[p].until for p in periods if p in probes}}
            lines = []
            for p in probes:
                period = periods.get(p)
                if period is None:
                    lines.append(f"{p}: normal")
                else:
                    lines.append(f"{p}: maintenance since {rfc3339(period.start)}"
                                 + (f" until {rfc3339(period.until)}" if period.until else "")
                                 + (f" ({period.reason})" if period.reason else ""))
            text = "\n".join(lines)
    print(json.dumps(out) if args.json else text)
    return 0
