"""``probeflow alarms``: list alarms; shelve or unshelve one.

Two ways to reach the alarms:

* ``--config FILE``: the running service.  Alarms are listed from its SQLite
  store (the latest event of each alarm); shelve and unshelve are queued in the
  store's ``alarm_commands`` table, applied by the service within about a
  second, and the result is printed (``probeflow.service.alarm_commands``).
* ``--state FILE``: the rule state file of a *stopped* service, edited directly
  (also ``--maintenance PROBE on|off``).  Do not use it while the service runs:
  the service overwrites the file when it stops.
"""

from __future__ import annotations

import argparse
import json
from typing import TYPE_CHECKING, Any

from probeflow.errors import ProbeflowError
from probeflow.events import AlertEvent, rfc3339

if TYPE_CHECKING:
    from probeflow.rules.lifecycle import AlarmBook

HELP = ("list alarms of the running service (--config) or a stopped one's state file (--state); "
        "shelve or unshelve one")


COMMAND_WAIT_S = 10.0


def add_target_arguments(parser: argparse.ArgumentParser) -> None:
    where = parser.add_mutually_exclusive_group(required=True)
    where.add_argument("--config", "-c", metavar="FILE",
                       help="config of the running service (commands go through its SQLite store)")
    where.add_argument("--state", metavar="FILE",
                       help="rule state file of a stopped service (service.state_path)")
    parser.add_argument("--who", help="who gives the command (default: the login name)")


def send_command(args: argparse.Namespace, command: str, alarm_id: str,
                 minutes: float | None = None) -> int:
    """Queue a command for the running service and print its result (exit 1 if refused)."""
    from probeflow.service.alarm_commands import COMMAND_EXPIRY_S, queue_command, wait_for_result

    path = _store_file(args.config)
    cid = queue_command(path, command, alarm_id, minutes=minutes, who=args.who)
    result = wait_for_result(path, cid, COMMAND_WAIT_S)
    if result is None:
        print(f"command #{cid} ({command} {alarm_id}) is queued, but the service did not take it "
              f"within {COMMAND_WAIT_S:g} s: is it running with {args.config}? The command "
              f"expires {COMMAND_EXPIRY_S:g} s after it was queued.")
        return 1
    print(f"command #{cid} {command} {alarm_id}: {result}")
    return 0 if result.startswith("ok") else 1


def _store_file(config_path: str) -> Any:
    from probeflow.calibration.site import store_path
    from probeflow.config import load_config

    return store_path(load_config(config_path, sections=("stores",), require_secrets=False))


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_target_arguments(parser)
    parser.add_argument("--all", action="store_true", help="include alarms in the normal state")
    parser.add_argument("--json", action="store_true", help="print JSON records")
    act = parser.add_mutually_exclusive_group()
    act.add_argument("--shelve", metavar="ALARM_ID", help="shelve an alarm (needs --minutes)")
    act.add_argument("--unshelve", metavar="ALARM_ID", help="end the shelving of an alarm")
    act.add_argument("--maintenance", nargs=2, metavar=("PROBE", "on|off"),
                     help="with --state: suppress (on) or restore (off) every alarm of a probe "
                          "(a running service: probeflow maintenance start|stop)")
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


def _list_rows(rows: list[dict[str, Any]], show_all: bool, as_json: bool) -> None:
    if as_json:
        print(json.dumps(rows, indent=2, allow_nan=False))
        return
    if not rows:
        print("no alarms" + ("" if show_all else " outside the normal state"))
        return
    print(f"{'alarm id':<40} {'state':<15} {'severity':<9} {'since':<28} message")
    for r in rows:
        since = rfc3339(r["changed_ts"]) if r["changed_ts"] is not None else "-"
        print(f"{r['alarm_id']:<40} {r['state']:<15} {r['severity'] or '-':<9} {since:<28} "
              f"{r['message'] or ''}")


def _run_on_service(args: argparse.Namespace) -> int:
    if args.maintenance:
        raise ProbeflowError("--maintenance works on a --state file; for a running service use "
                             "probeflow maintenance start|stop --probe ID")
    if args.shelve:
        return send_command(args, "shelve", args.shelve, minutes=_minutes(args))
    if args.unshelve:
        return send_command(args, "unshelve", args.unshelve)
    from probeflow.service.alarm_commands import alarms_from_store

    _list_rows(alarms_from_store(_store_file(args.config), include_normal=args.all),
               args.all, args.json)
    return 0


def _minutes(args: argparse.Namespace) -> float:
    if not args.minutes or args.minutes <= 0:
        raise ProbeflowError("--shelve needs --minutes with a positive number")
    return float(args.minutes)


def run(args: argparse.Namespace) -> int:
    if args.config:
        return _run_on_service(args)
    from probeflow.rules.state_file import act_on_state_file, read_alarms

    if args.shelve:
        minutes = _minutes(args)
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
