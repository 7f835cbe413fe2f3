"""``probeflow ack ALARM_ID --state FILE``: acknowledge an alarm."""

from __future__ import annotations

import argparse

from probeflow.cli.alarms import print_events

HELP = "acknowledge an alarm (ALARM_ID as shown by probeflow alarms) in the rule state file"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("alarm_id", help="rule/probe/limit, e.g. outfall-ph/out-1/high")
    parser.add_argument("--state", required=True, metavar="FILE",
                        help="rule state file of a stopped service")


def run(args: argparse.Namespace) -> int:
    from probeflow.rules.state_file import act_on_state_file

    print_events(act_on_state_file(args.state, lambda book, now: [book.ack(args.alarm_id, now)]))
    return 0
