"""``probeflow ack ALARM_ID --config FILE`` (running service) or ``--state FILE`` (stopped one)."""

from __future__ import annotations

import argparse

from probeflow.cli.alarms import add_target_arguments, print_events, send_command

HELP = "acknowledge an alarm (ALARM_ID as shown by probeflow alarms)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("alarm_id", help="rule/probe/limit, e.g. outfall-ph/out-1/high")
    add_target_arguments(parser)


def run(args: argparse.Namespace) -> int:
    if args.config:
        return send_command(args, "ack", args.alarm_id)
    from probeflow.rules.state_file import act_on_state_file

    print_events(act_on_state_file(args.state, lambda book, now: [book.ack(args.alarm_id, now)]))
    return 0
