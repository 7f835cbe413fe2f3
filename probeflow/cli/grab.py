"""``probeflow grab``: record a lab (grab-sample) pH, compare it with the online value, optionally correct.

    probeflow grab --config FILE --probe ID --lab-ph 7.12 [--at TIME] [--lab-temp-c 25] [--apply]

The online value is the probe's stored pH at the sample time, interpolated
between the readings around it (see :mod:`probeflow.calibration.grab`).  The
sample is always recorded; with ``--apply`` a one-point offset correction
(slope kept, offset moved so the online pH at that time equals the lab pH) is
judged against the acceptance limits and stored as a calibration of kind
``grab_offset``, applying to readings from now on.  difference = online - lab.

Exit status: 0 recorded (and applied when asked); 1 the correction was
rejected by the limits or no online value was found; 2 configuration error.

Caution: a correction changes every pH the service reports for the probe; check
the lab result before applying it.  probeflow is not a safety system.
"""

from __future__ import annotations

import argparse
import json
import math
import time
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from probeflow.calibration.acceptance import judge
from probeflow.calibration.grab import DEFAULT_MAX_GAP_S, online_value_at, standardise
from probeflow.calibration.model import Calibration
from probeflow.calibration.site import calibration_in_effect, load_limits, probe_config, store_path
from probeflow.calibration.store import CalibrationStore
from probeflow.cli.common import add_config_argument
from probeflow.config import load_config
from probeflow.errors import ProbeflowError
from probeflow.events import rfc3339

HELP = "record a lab pH for a probe, compare it with the online value, optionally correct the offset"


def parse_moment(text: str) -> float:
    """'now', epoch seconds, or an RFC 3339 time (UTC when no offset is given)."""
    t = text.strip()
    if t == "now":
        return time.time()
    try:
        return float(t)
    except ValueError:
        pass
    try:
        moment = datetime.fromisoformat(t)
    except ValueError:
        raise ProbeflowError(f"--at: expected a time like 2026-03-02T06:00:00Z, epoch seconds or now; "
                             f"got {text!r}") from None
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=UTC)
    return moment.timestamp()


def _ph(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a pH number, got {text!r}") from None
    if not (math.isfinite(v) and -2.0 <= v <= 16.0):
        raise argparse.ArgumentTypeError(f"{text} is not a plausible pH value")
    return v


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    parser.add_argument("--probe", required=True, metavar="ID")
    parser.add_argument("--lab-ph", required=True, type=_ph, help="the laboratory pH of the sample")
    parser.add_argument("--at", default="now", metavar="TIME",
                        help="when the sample was taken: RFC 3339 time, epoch seconds or now (default)")
    parser.add_argument("--lab-temp-c", type=float, help="temperature of the lab measurement [°C]")
    parser.add_argument("--apply", action="store_true",
                        help="store a one-point offset correction as a new calibration")
    parser.add_argument("--max-gap-s", type=float, default=DEFAULT_MAX_GAP_S,
                        help="use readings at most this far from the sample time (default %(default)s)")
    parser.add_argument("--limits", metavar="FILE", help="acceptance limits YAML (flat or per probe)")
    parser.add_argument("--db", metavar="FILE", help="SQLite file (default: the config's sqlite store)")
    parser.add_argument("--who", help="who took or applied the sample")
    parser.add_argument("--note", help="free text kept with the sample")
    parser.add_argument("--json", action="store_true", help="print the result as one JSON object")


def run(args: argparse.Namespace) -> int:
    config = load_config(args.config, sections=("stores",), require_secrets=False)
    probe = probe_config(config, args.probe)
    at = parse_moment(args.at)
    now = time.time()
    path = Path(args.db) if args.db else store_path(config)
    result: dict[str, Any] = {"probe": args.probe, "ts": at, "lab_ph": args.lab_ph,
                              "lab_temp_c": args.lab_temp_c}
    status = 0
    with CalibrationStore(path) as store:
        rows = store.readings(args.probe, at - args.max_gap_s, at + args.max_gap_s)
        online = online_value_at(rows, at, args.max_gap_s)
        result["online_ph"] = None if online is None else online.ph
        result["difference"] = None if online is None else online.ph - args.lab_ph
        result["interpolated"] = None if online is None else online.interpolated
        correction_id = None
        if args.apply and online is None:
            result["correction"] = None
            result["message"] = (f"no reading of {args.probe} within {args.max_gap_s:g} s of "
                                 f"{rfc3339(at)}: the sample is recorded, no correction is possible")
            status = 1
        elif args.apply and online is not None:
            current = calibration_in_effect(store, probe, at=at) or Calibration(0.0, 100.0, 7.0)
            corrected = standardise(current, online, args.lab_ph)
            verdict = judge(corrected, load_limits(args.limits, probe))
            correction_id = store.record_calibration(
                args.probe, corrected, verdict, kind="grab_offset", ts=now, applies_from=now,
                who=args.who, note=args.note or f"grab sample at {rfc3339(at)}, lab pH {args.lab_ph:g}")
            result["correction"] = {"id": correction_id, "verdict": verdict.status,
                                    "reasons": list(verdict.reasons),
                                    "offset_mv": corrected.offset_mv,
                                    "previous_offset_mv": current.offset_mv,
                                    "slope_pct": corrected.slope_pct, "zero_ph": corrected.zero_ph,
                                    "applies_from": now}
            status = 0 if verdict.accepted else 1
        applied = correction_id is not None and status == 0
        result["applied"] = applied
        result["id"] = store.record_grab(args.probe, at, args.lab_ph, lab_temp_c=args.lab_temp_c,
                                         online_ph=None if online is None else online.ph,
                                         applied=applied, note=args.note)
    _print(result, args.json)
    return status


def _print(result: dict[str, Any], as_json: bool) -> None:
    if as_json:
        print(json.dumps(result))
        return
    print(f"grab sample #{result['id']} of {result['probe']} at {rfc3339(result['ts'])}: "
          f"lab pH {result['lab_ph']:.3f}")
    if result["online_ph"] is None:
        print("  no online reading near that time")
    else:
        print(f"  online pH {result['online_ph']:.3f} ({'interpolated' if result['interpolated'] else 'nearest'}), "
              f"online - lab = {result['difference']:+.3f} pH")
    corr = result.get("correction")
    if corr:
        print(f"  offset correction #{corr['id']}: {corr['previous_offset_mv']:+.2f} -> "
              f"{corr['offset_mv']:+.2f} mV, slope {corr['slope_pct']:.2f} % kept: {corr['verdict']}")
        for r in corr["reasons"]:
            print(f"    - {r}")
    if result.get("message"):
        print(f"  {result['message']}")
