"""``probeflow status --config FILE [--once]``: every probe at a glance, from the SQLite store."""

from __future__ import annotations

import argparse
import sqlite3
import sys
import time

from probeflow.cli.common import add_config_argument
from probeflow.config import load_config
from probeflow.errors import StoreError
from probeflow.views.queries import quarantine_count
from probeflow.views.source import open_store_readonly, sqlite_store_path
from probeflow.views.status import gather_status, render_status

HELP = "show every probe's pH, temperature, alarms, calibration and grab samples (live in a terminal)"

CLEAR_SCREEN = "\x1b[H\x1b[2J"  # cursor home, erase display (ECMA-48)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    parser.add_argument("--once", action="store_true",
                        help="print the table once and exit (the default when not on a terminal)")
    parser.add_argument("--every", type=float, default=2.0, metavar="SECONDS",
                        help="refresh interval of the live view (default 2 s)")


def _snapshot(args: argparse.Namespace) -> str:
    config = load_config(args.config, sections=("stores",), require_secrets=False)
    path = sqlite_store_path(config)
    con = open_store_readonly(path)
    try:
        statuses = gather_status(con, config.probes)
        quarantined = quarantine_count(con)
    except sqlite3.Error as exc:
        raise StoreError(f"reading the SQLite store {path} failed: {exc}") from exc
    finally:
        con.close()
    return render_status(statuses, time.time(), config.site, str(path), quarantined)


def run(args: argparse.Namespace) -> int:
    if not args.every > 0:
        raise SystemExit("probeflow status: --every must be a positive number of seconds")
    if args.once or not sys.stdout.isatty():
        sys.stdout.write(_snapshot(args))
        return 0
    try:
        while True:
            text = _snapshot(args)
            sys.stdout.write(CLEAR_SCREEN + text + "\n(refreshing every "
                             f"{args.every:g} s; Ctrl-C to leave)\n")
            sys.stdout.flush()
            time.sleep(args.every)
    except KeyboardInterrupt:
        sys.stdout.write("\n")
        return 0
