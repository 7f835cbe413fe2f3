"""Helpers shared by the service sub-commands (run, filter, replay, demo)."""

from __future__ import annotations

import argparse
import signal
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from probeflow.service.log import Log

__all__ = ["add_config_argument", "parse_duration", "print_stats", "stop_on_signals"]


def add_config_argument(parser: argparse.ArgumentParser, required: bool = True) -> None:
    parser.add_argument("--config", "-c", required=required, metavar="FILE",
                        help="YAML config file (see configs/)")


def parse_duration(text: str) -> float:
    """'90', '90s', '5m', '2h' -> seconds."""
    units = {"s": 1.0, "m": 60.0, "h": 3600.0, "d": 86400.0}
    text = text.strip().lower()
    try:
        if text and text[-1] in units:
            value = float(text[:-1]) * units[text[-1]]
        else:
            value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a duration like 60s, 5m or 1h, got {text!r}") from None
    if not value > 0:
        raise argparse.ArgumentTypeError(f"the duration must be positive, got {text!r}")
    return value


@contextmanager
def stop_on_signals(service: Any) -> Iterator[None]:
    """SIGTERM and SIGINT ask ``service`` to stop (it then flushes and returns)."""
    previous = {}
    for sig in (signal.SIGTERM, signal.SIGINT):
        previous[sig] = signal.signal(sig, lambda _s, _f: service.request_stop())
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def print_stats(log: Log, stats: Any) -> None:
    for name, counters in stats.per_collector.items():
        log.info("collector_summary", collector=name, **counters)
    for name, counters in stats.per_store.items():
        log.info("store_summary", store=name, **counters)


def make_log(fmt: str) -> Log:
    return Log(sys.stderr, fmt=fmt)  # type: ignore[arg-type]
