"""``probeflow alarms --state FILE``: list alarms; shelve, unshelve, or mark a probe in maintenance."""

from __future__ import annotations

import argparse
import json
from typing import TYPE_CHECKING

from probeflow.errors import ProbeflowError
from probeflow.events import AlertEvent, rfc3339

if TYPE_CHECKING:
    from probeflow.rules.lifecycle import AlarmBook

HELP = "list current alarms from the rule state file; shelve, unshelve, suppress for maintenance"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--state", required=True, metavar="FILE",
                        help="rule state file of a stopped service (service.rules_state_path)")
    parser.add_argument("--all", action="store_true", help="include alarms in the normal state")
    parser.add_argument("--json", action="store_true", help="print JSON records")
    act = parser.add_mutually_exclusive_group()
    act.add_argument("--shelve", metavar="ALARM_ID", help="shelve an alarm (needs --minutes)")
    act.add_argument("--unshelve", metavar="ALARM_ID", help="end the shelving of an alarm")
    act.add_argument("--maintenance", nargs=2, metavar=("PROBE", "on|off"),
                     help="suppress (on) or restore (off) every alarm of a probe")
    parser.add_argument("--minutes", type=float, help="how long to shelve")


def print_events(events: list[AlertEvent]) -> None:
    for ev in events:
        print(json.dumps(ev.to_record()))


def _list(book: AlarmBook, show_all: bool, as_json: bool) -> None:
    rows = [r.to_dict() for r in book.records()] if show_all else book.active_alarms()
    if as_json:
        print(json.dumps(rows, indent=2, allow_nan=False))
        return
    if not rows:
        print("no alarms" + ("" if show_all else " outside the normal state"))
        return
    print(f"{'alarm id':<40} {'state':<15} {'severity':<9} {'since':<28} message")
    for r in rows:
        since = rfc3339(r["changed_ts"]) if r["changed_ts"] is not None else "-"
        print(f"{r['alarm_id']:<40} {r['state']:<15} {r['severity']:<9} {since:<28} {r['message']}")
    if book.in_maintenance():
        print("in maintenance: " + ", ".join(book.in_maintenance()))


def run(args: argparse.Namespace) -> int:
    from probeflow.rules.state_file import act_on_state_file, read_alarms

    if args.shelve:
        if not args.minutes or args.minutes <= 0:
            raise ProbeflowError("--shelve needs --minutes with a positive number")
        minutes = float(args.minutes)
        print_events(act_on_state_file(
            args.state, lambda book, now: [book.shelve(args.shelve, now + 60 * minutes, now)]))
        return 0
    if args.unshelve:
        print_events(act_on_state_file(args.state, lambda book, now: [book.unshelve(args.unshelve, now)]))
        return 0
    if args.maintenance:
        probe, flag = args.maintenance
        if flag not in ("on", "off"):
            raise ProbeflowError("--maintenance PROBE takes on or off")
        print_events(act_on_state_file(
            args.state, lambda book, now: book.set_maintenance(probe, flag == "on", now)))
        return 0
    _list(read_alarms(args.state), args.all, args.json)
    return 0
