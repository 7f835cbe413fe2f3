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
}


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="probeflow",
        description="pH from electrode mV and temperature: conversion, alarms and a lossless record.",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for name, module_name in COMMANDS.items():
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
    parser = build_parser()
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
