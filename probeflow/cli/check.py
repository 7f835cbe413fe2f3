"""probeflow check: validate a config file and summarise it (exit 0, or 2 with the problems)."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from probeflow.cli.common import add_config_argument

HELP = "check a config file: every problem with file, line and key; a summary when it is fine"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)


def _summary(config: Any) -> list[str]:
    lines = [f"{config.path}: OK", f"site: {config.site}", f"probes: {len(config.probes)}"]
    for p in config.probes:
        if p.calibration is not None:
            cal = (f"offset {p.calibration.offset_mv:+g} mV, slope {p.calibration.slope_pct:g} %, "
                   f"zero pH {p.calibration.zero_ph:g}")
        elif p.calibration_from_store:
            cal = "calibration from the store"
        else:
            cal = "UNCALIBRATED (readings will be flagged)"
        if p.fixed_temp_c is not None:
            temp = f"fixed {p.fixed_temp_c:g} °C"
        elif p.rtd is not None:
            temp = f"Pt{p.rtd.r0} RTD"
        else:
            temp = "temperature from readings"
        lines.append(f"  {p.id}: {cal}; {temp}; {p.pressure_kpa:g} kPa")
    lines.append(f"collectors: {len(config.collectors)}")
    lines.extend(f"  {s.key_path}: {s.type}" for s in config.collectors)
    lines.append(f"stores: {len(config.stores)}")
    lines.extend(f"  {s.key_path}: {s.type}" for s in config.stores)
    if config.rules is None:
        lines.append("rules: none")
    else:
        parts = []
        for group in ("bands", "rate_of_change", "redundancy", "drift"):
            items = getattr(config.rules, group, None)
            if items:
                parts.append(f"{len(items)} {group.replace('_', ' ')}")
        if getattr(config.rules, "diagnostics", None) is not None:
            parts.append("diagnostics")
        for name, entries in getattr(config.rules, "plugin_sections", {}).items():
            count = len(entries) if isinstance(entries, list) else 1
            parts.append(f"{count} {name} (plugin)")
        lines.append(f"rules: {', '.join(parts) or 'none'}")
    for warning in config.warnings:
        lines.append(f"warning: {warning}")
    return lines


def run(args: argparse.Namespace) -> int:
    from probeflow.config import load_config
    from probeflow.errors import ConfigError

    try:
        config = load_config(args.config, require_secrets=False)
    except ConfigError as exc:
        print(f"probeflow check: {exc}", file=sys.stderr)
        return 2
    print("\n".join(_summary(config)))
    return 0
