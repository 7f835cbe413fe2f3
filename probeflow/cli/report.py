"""``probeflow report --config FILE --since 24h [--until ...] [--probe ID] --out report.html [--png DIR]``."""

from __future__ import annotations

import argparse
import sqlite3
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

from probeflow.calibration.acceptance import AcceptanceLimits
from probeflow.cli.common import add_config_argument, parse_duration
from probeflow.config import load_config
from probeflow.errors import ProbeflowError, StoreError
from probeflow.views.queries import store_probes
from probeflow.views.report import ReportSettings, build_report
from probeflow.views.source import open_store_readonly, sqlite_store_path
from probeflow.views.text import utc_text

HELP = "write an HTML report (plots and summary per probe) for a period from the SQLite store"

LONG_PERIOD_S = 86400.0  # a progress bar for reports over more than a day


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    parser.add_argument("--since", required=True, metavar="WHEN",
                        help="start: a duration before --until (24h, 7d) or a UTC time "
                             "(2026-03-02T06:00:00Z)")
    parser.add_argument("--until", default="now", metavar="WHEN",
                        help="end: a UTC time, 'now' (default) or 'latest' (the newest reading "
                             "in the store, for replayed or copied stores)")
    parser.add_argument("--probe", action="append", metavar="ID",
                        help="only this probe (repeat for several); default every probe")
    parser.add_argument("--out", required=True, metavar="FILE", help="the HTML file to write")
    parser.add_argument("--png", metavar="DIR", help="also write one PNG per probe into DIR")
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")


def parse_time(text: str, what: str) -> float:
    """An RFC 3339 / ISO 8601 time (UTC when no offset is given) as epoch seconds."""
    try:
        moment = datetime.fromisoformat(text.strip())
    except ValueError:
        raise ProbeflowError(f"{what}: expected a time like 2026-03-02T06:00:00Z, a duration "
                             f"like 24h, or now/latest; got {text!r}") from None
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=UTC)
    return moment.timestamp()


def _until(text: str, con: object) -> float:
    if text == "now":
        return time.time()
    if text == "latest":
        row = con.execute("SELECT MAX(ts) FROM readings").fetchone()  # type: ignore[attr-defined]
        if row[0] is None:
            raise ProbeflowError("--until latest: the store has no readings yet")
        return float(row[0])
    return parse_time(text, "--until")


def _since(text: str, until: float) -> float:
    try:
        return until - parse_duration(text)
    except argparse.ArgumentTypeError:
        return parse_time(text, "--since")


def run(args: argparse.Namespace) -> int:
    config = load_config(args.config, sections=("stores", "rules"), require_secrets=False)
    path = sqlite_store_path(config)
    con = open_store_readonly(path)
    try:
        until = _until(args.until, con)
        since = _since(args.since, until)
        if not since < until:
            raise ProbeflowError(f"--since ({args.since}) must be before --until ({args.until})")
        known = list(config.probe_ids) + [p for p in store_probes(con) if p not in config.probe_ids]
        probes = args.probe or known
        unknown = [p for p in probes if p not in known]
        if unknown:
            raise ProbeflowError(f"--probe {', '.join(unknown)}: not in the config nor in the store; "
                                 f"known probes: {', '.join(known)}")
        newest = con.execute("SELECT MAX(ts) FROM readings").fetchone()[0]
        if newest is not None and float(newest) < since:
            print(f"probeflow report: note: no readings in this period; the newest reading is from "
                  f"{utc_text(float(newest))} (try --until latest)",
                  file=sys.stderr)
        settings = ReportSettings(
            site=config.site, since=since, until=until, probes=probes, rules=config.rules,
            slope_limit_pct=AcceptanceLimits().slope_min_pct,
            png_dir=Path(args.png) if args.png else None,
            progress=(until - since > LONG_PERIOD_S and not args.no_progress),
            config_calibrations={p.id: (float(p.calibration.slope_pct), float(p.calibration.offset_mv))
                                 for p in config.probes if p.calibration is not None},
        )
        text, datas = build_report(con, settings)
    except sqlite3.Error as exc:
        raise StoreError(f"reading the SQLite store {path} failed: {exc}") from exc
    finally:
        con.close()
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(text, encoding="utf-8")
    print(f"wrote {out} ({len(datas)} probe(s), {sum(len(d.readings) for d in datas)} readings)"
          + (f" and PNGs in {args.png}" if args.png else ""))
    return 0
