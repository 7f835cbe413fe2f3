"""probeflow run: the service, until SIGTERM or SIGINT."""

from __future__ import annotations

import argparse

from probeflow.cli.common import add_config_argument, make_log, print_stats, stop_on_signals

HELP = "run the service: read the configured collectors, convert, alarm and store until stopped"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)


def run(args: argparse.Namespace) -> int:
    from probeflow.config import load_config
    from probeflow.service.metrics import MetricsExporter
    from probeflow.service.pipeline import build_service
    config = load_config(args.config)
    log = make_log(config.service.log_format)
    for warning in config.warnings:
        log.warning("config_warning", detail=warning)
    if not config.collectors:
        log.warning("no_collectors", hint="the config has no collectors, nothing will be read")
    service = build_service(config, log=log, retry_collectors=True, live=True)
    metrics = MetricsExporter(service, host=config.service.metrics.host,
                              port=config.service.metrics.port, log=log)
    try:
        metrics.start()
    except BaseException:
        service.shutdown()  # close the stores that build_service opened
        raise
    try:
        with stop_on_signals(service):
            stats = service.run()
    finally:
        metrics.stop()
    print_stats(log, stats)
    return 0
