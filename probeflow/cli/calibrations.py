"""``probeflow calibrations --probe ID [--json]``: a probe's calibration history and trends.

Shows every calibration (accepted and rejected) with offset, slope, their
change since the previous accepted one, the least-squares trend per month over
the accepted ones, and when the slope trend reaches the lower slope limit.
``--json`` prints everything as one object (the export format).
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path
from typing import Any

from probeflow.calibration.history import calibration_trend, forecast_slope_limit_date, history_rows
from probeflow.calibration.site import load_limits, probe_config, store_path
from probeflow.calibration.store import CalibrationStore
from probeflow.cli.common import add_config_argument
from probeflow.config import load_config
from probeflow.events import rfc3339

HELP = "show a probe's calibration history with offset and slope trends (or export it as JSON)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    parser.add_argument("--probe", required=True, metavar="ID")
    parser.add_argument("--limits", metavar="FILE", help="acceptance limits YAML (for the forecast)")
    parser.add_argument("--db", metavar="FILE", help="SQLite file (default: the config's sqlite store)")
    parser.add_argument("--json", action="store_true", help="print the history as one JSON object")


def _num(v: float | None, fmt: str) -> str:
    return "-" if v is None or not math.isfinite(v) else format(v, fmt)


def run(args: argparse.Namespace) -> int:
    config = load_config(args.config, sections=("stores",), require_secrets=False)
    limits = load_limits(args.limits, probe_config(config, args.probe))
    path = Path(args.db) if args.db else store_path(config)
    with CalibrationStore(path) as store:
        records = store.history(args.probe)
        grabs = store.grab_samples(args.probe)
    rows = history_rows(records)
    trend = calibration_trend(rows)
    forecast = forecast_slope_limit_date(rows, limits.slope_min_pct)
    if args.json:
        doc: dict[str, Any] = {
            "probe": args.probe,
            "calibrations": [r.to_record() for r in records],
            "trend": trend.to_record(),
            "slope_limit_pct": limits.slope_min_pct,
            "slope_limit_forecast": forecast,
            "grab_samples": [g.to_record() for g in grabs],
        }
        print(json.dumps(doc, indent=2))
        return 0
    if not records:
        print(f"{args.probe}: no calibrations on record")
        return 0
    steps = {s.ts: s for s in trend.steps}
    print(f"{'#':>4}  {'time (UTC)':<28} {'kind':<11} {'verdict':<8} {'offset mV':>9} {'slope %':>8} "
          f"{'Δoffset':>8} {'Δslope':>7}  who / serial")
    for r in records:
        step = steps.get(r.applies_from) if r.accepted else None
        print(f"{r.id:>4}  {rfc3339(r.ts):<28} {r.kind:<11} {r.verdict:<8} "
              f"{_num(r.offset_mv, '+9.2f'):>9} {_num(r.slope_pct, '8.2f'):>8} "
              f"{_num(step.offset_change_mv if step else None, '+8.2f'):>8} "
              f"{_num(step.slope_change_pct if step else None, '+7.2f'):>7}  "
              f"{r.who or ''}{' / ' + r.electrode_serial if r.electrode_serial else ''}")
    print(f"trend over {len(rows)} accepted: offset {_num(trend.offset_mv_per_month, '+.2f')} mV/month, "
          f"slope {_num(trend.slope_pct_per_month, '+.2f')} %/month")
    if forecast is not None:
        print(f"slope trend reaches the {limits.slope_min_pct:g} % limit around {rfc3339(forecast)[:10]}")
    if grabs:
        last = grabs[-1]
        print(f"{len(grabs)} grab sample(s); latest {rfc3339(last.ts)}: lab {last.lab_ph:.3f}, "
              f"online - lab {_num(last.difference, '+.3f')} pH")
    return 0
