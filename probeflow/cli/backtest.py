"""``probeflow backtest RECORDING --rules A.yaml [--rules B.yaml]``: tune rules on a recording."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

from probeflow.errors import ConfigError, ProbeflowError

if TYPE_CHECKING:
    from probeflow.rules.backtest import RuleStats
    from probeflow.rules.config import RulesConfig
    from probeflow.rules.recording import Convert

DEFAULT_CHATTER_S = 60.0  # same as probeflow.rules.backtest (kept here so --help stays light)

HELP = "run rule sets over a recording and print activations, time active and chattering per rule"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recording", help="JSON Lines or Parquet file of processed records (or raw "
                        "readings with --config)")
    parser.add_argument("--rules", action="append", required=True, metavar="FILE",
                        help="YAML with a rules: section (or the section itself); give twice to compare A and B")
    parser.add_argument("--config", metavar="FILE", help="site config whose probes convert raw readings")
    parser.add_argument("--chatter-s", type=float, default=DEFAULT_CHATTER_S,
                        help="an activation within this many seconds of the previous clear is "
                        f"chattering (default {DEFAULT_CHATTER_S:g})")
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="threads evaluating rules side by side (default: up to 2; "
                        "1 for plugin rules that share state between rule objects)")
    parser.add_argument("--json", action="store_true", help="print the result as JSON")
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")


def load_rules_file(path: str) -> RulesConfig:
    import yaml

    from probeflow.rules.config import parse_rules_config

    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read the rules file: {exc.strerror}", path=path,
                          problems=[("(file)", str(exc.strerror))]) from exc
    try:
        data = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        raise ConfigError(f"{path}: not valid YAML: {exc}", path=path, problems=[("(file)", str(exc))]) from exc
    if data is None:
        data = {}
    if not isinstance(data, dict):
        raise ConfigError(f"{path}: expected a mapping with a rules: section", path=path,
                          problems=[("(file)", "expected a mapping")])
    if "rules" in data:
        return parse_rules_config(data["rules"], path=path)
    return parse_rules_config(data, path=path, prefix="")


def _converter(config_path: str | None) -> tuple[Convert | None, list[str]]:
    if config_path is None:
        return None, []
    from probeflow.config.load import load_config
    from probeflow.convert import Converter

    cfg = load_config(config_path, sections=(), require_secrets=False)
    conv = Converter(cfg.probes)
    return conv.convert, list(cfg.probe_ids)


def _estimate_rows(path: Path) -> int | None:
    if path.suffix.lower() in (".parquet", ".pq"):
        import pyarrow.parquet as pq
        return int(pq.ParquetFile(path).metadata.num_rows)
    size = path.stat().st_size
    with path.open("rb") as f:
        head = f.read(1 << 20)
    lines = head.count(b"\n")
    return int(size / (len(head) / lines)) if lines else None


def _fmt_duration(seconds: float) -> str:
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.1f} min"
    return f"{seconds / 3600:.2f} h"


def _table(title: str, stats: dict[str, RuleStats]) -> list[str]:
    header = (f"  {'rule':<24} {'kind':<15} {'activations':>11} {'time active':>12} "
              f"{'chattering':>10} {'alarms':>6}")
    lines = [title, header]
    for s in stats.values():
        lines.append(f"  {s.rule:<24} {s.kind:<15} {s.activations:>11d} {_fmt_duration(s.active_s):>12} "
                     f"{s.chattering:>10d} {s.alarms:>6d}")
    for s in stats.values():
        if s.errors:
            lines.append(f"  warning: rule {s.rule} ({s.kind}) raised an error in {s.errors} "
                         "chunk(s); it was skipped there, so its counts are incomplete")
    return lines


def run(args: argparse.Namespace) -> int:
    from probeflow.rules.backtest import DEFAULT_WORKERS, Backtest, compare
    from probeflow.rules.recording import iter_recording

    rule_sets = [load_rules_file(p) for p in args.rules]
    if len(rule_sets) > 2:
        raise ProbeflowError("give --rules once (one set) or twice (A and B)")
    convert, probe_ids = _converter(args.config)
    recording = Path(args.recording)
    if args.workers is not None and args.workers < 1:
        raise ProbeflowError(f"--workers must be 1 or more, not {args.workers}")
    workers = DEFAULT_WORKERS if args.workers is None else args.workers
    tests = [Backtest(rs, probe_ids, args.chatter_s, workers) for rs in rule_sets]
    bar: Any = None
    if not args.no_progress:
        from tqdm import tqdm
        bar = tqdm(total=_estimate_rows(recording) if recording.exists() else None, unit=" readings",
                   unit_scale=True, file=sys.stderr, disable=None, mininterval=0.5)
    try:
        for chunk in iter_recording(recording, convert, progress=bar.update if bar else None):
            for bt in tests:
                bt.feed(chunk)
    finally:
        if bar is not None:
            bar.close()
    results = [bt.finish() for bt in tests]
    if args.json:
        out: dict[str, Any] = {"readings": tests[0].readings,
                               "sets": {name: [s.as_dict() for s in res.values()]
                                        for name, res in zip("AB", results, strict=False)}}
        if len(results) == 2:
            out["difference_b_minus_a"] = compare(results[0], results[1])
        print(json.dumps(out, indent=2))
        return 0
    print(f"{tests[0].readings} readings from {recording}")
    for name, path, res in zip("AB", args.rules, results, strict=False):
        print("\n".join(_table(f"set {name} ({path}):", res)))
    if len(results) == 2:
        print("difference (B - A):")
        print(f"  {'rule':<24} {'activations':>11} {'time active':>14} {'chattering':>10}")
        for d in compare(results[0], results[1]):
            note = f"  (only in {d['only_in']})" if d["only_in"] else ""
            secs = float(d["active_s_diff"])  # type: ignore[arg-type]
            sign = "-" if secs < 0 else "+"
            print(f"  {d['rule']:<24} {int(d['activations_diff']):>+11d} "  # type: ignore[call-overload]
                  f"{sign + _fmt_duration(abs(secs)):>14} {int(d['chattering_diff']):>+10d}{note}")  # type: ignore[call-overload]
    return 0
