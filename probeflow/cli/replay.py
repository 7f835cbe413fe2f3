"""probeflow replay: feed a recording through the pipeline into the configured stores."""

from __future__ import annotations

import argparse

from probeflow.cli.common import add_config_argument, make_log, print_stats, stop_on_signals

HELP = "replay a recording (JSON Lines, CSV or Parquet) through conversion, rules and stores"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recording", metavar="RECORDING", help="file of reading records")
    add_config_argument(parser)
    parser.add_argument("--speed", type=float, default=0.0,
                        help="1 = real time, 60 = a minute per second, 0 = as fast as possible "
                             "(default)")
    parser.add_argument("--format", choices=("auto", "jsonl", "csv", "parquet"), default="auto")
    parser.add_argument("--print", action="store_true", dest="print_records",
                        help="also write processed records and alert events to stdout")


def run(args: argparse.Namespace) -> int:
    from probeflow.collectors.file import FileCollector, FileCollectorConfig
    from probeflow.config import PluginSection, load_config
    from probeflow.plugins import COLLECTORS, STORES
    from probeflow.service.pipeline import build_service
    from probeflow.stores.jsonl import StdoutStore, StdoutStoreConfig
    if args.speed < 0:
        raise SystemExit("probeflow replay: --speed must be 0 or more")
    config = load_config(args.config, sections=("stores", "rules"))
    log = make_log(config.service.log_format)
    source = PluginSection(COLLECTORS, "file", "replay", FileCollector,
                           FileCollectorConfig(path=args.recording, format=args.format,
                                               speed=args.speed))
    stores = list(config.stores)
    if args.print_records or not stores:
        stores.append(PluginSection(STORES, "stdout", "replay", StdoutStore, StdoutStoreConfig()))
    service = build_service(config, collectors=[source], stores=stores, log=log, tick_clock="data")
    with stop_on_signals(service):
        stats = service.run()
    print_stats(log, stats)
    return 0
