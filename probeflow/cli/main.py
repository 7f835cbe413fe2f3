"""The ``probeflow`` command: one sub-command per module in this package.

Each sub-command module defines ``HELP`` (one line), ``add_arguments(parser)``
and ``run(args) -> int`` (the exit status).  Modules are imported only when
their sub-command runs, so ``probeflow --help`` stays fast.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence

from probeflow.errors import ConfigError, ProbeflowError

# sub-command name -> module under probeflow.cli
COMMANDS: dict[str, str] = {
    "run": "run",
    "filter": "filter",
    "replay": "replay",
    "check": "check",
    "demo": "demo",
    "simulate": "simulate",
    "backtest": "backtest",
    "alarms": "alarms",
    "ack": "ack",
    "calibrate": "calibrate",
    "calibrations": "calibrations",
    "maintenance": "maintenance",
    "grab": "grab",
    "status": "status",
    "report": "report",
}


def _wanted(argv: Sequence[str]) -> list[str]:
    """The sub-command named on the command line, or every one (for --help)."""
    for token in argv:
        if token in COMMANDS:
            return [token]
        if not token.startswith("-"):
            break
    return list(COMMANDS)


def build_parser(argv: Sequence[str] | None = None) -> argparse.ArgumentParser:
    """The argument parser; only the chosen sub-command's module is imported."""
    parser = argparse.ArgumentParser(
        prog="probeflow",
        description="pH from electrode mV and temperature: conversion, alarms and a lossless record.",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    names = _wanted(sys.argv[1:] if argv is None else argv)
    for name in COMMANDS:
        if name not in names:
            sub.add_parser(name)  # listed, not loaded
            continue
        module_name = COMMANDS[name]
        try:
            module = importlib.import_module(f"probeflow.cli.{module_name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"probeflow.cli.{module_name}":
                continue  # sub-command not built yet
            raise
        p = sub.add_parser(name, help=module.HELP, description=module.HELP)
        module.add_arguments(p)
        p.set_defaults(_run=module.run)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser(argv)
    args = parser.parse_args(argv)
    try:
        return int(args._run(args))
    except ConfigError as exc:
        print(f"probeflow: configuration error: {exc}", file=sys.stderr)
        return 2
    except ProbeflowError as exc:
        print(f"probeflow: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":
    raise SystemExit(main())
