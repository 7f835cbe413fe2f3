"""probeflow filter: reading records on stdin -> processed records and alert events on stdout."""

from __future__ import annotations

import argparse

from probeflow.cli.common import add_config_argument, make_log, stop_on_signals

HELP = ("read JSON lines of readings from stdin, write processed readings and alert events "
        "as JSON lines to stdout")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    parser.add_argument("--quarantine", metavar="FILE",
                        help="append rejected input lines here as JSON lines "
                             "(default: standard error)")


def run(args: argparse.Namespace) -> int:
    from probeflow.collectors.stdin import StdinCollector, StdinCollectorConfig
    from probeflow.config import PluginSection, load_config
    from probeflow.plugins import COLLECTORS, STORES
    from probeflow.service.pipeline import build_service
    from probeflow.stores.jsonl import StdoutStore, StdoutStoreConfig
    config = load_config(args.config, sections=("rules",))
    log = make_log(config.service.log_format)
    source = PluginSection(COLLECTORS, "stdin", "filter", StdinCollector, StdinCollectorConfig())
    out = PluginSection(STORES, "stdout", "filter", StdoutStore,
                        StdoutStoreConfig(quarantine_path=args.quarantine))
    service = build_service(config, collectors=[source], stores=[out], log=log, tick_clock="data")
    with stop_on_signals(service):
        service.run()
    return 0
