"""``probeflow calibrate``: calibrate a probe in buffers, at the probe or from recorded points.

Scripted (points measured already)::

    probeflow calibrate --config FILE --probe ID --point VALUE,MV,TEMP_C [--point ...] --yes --json
    probeflow calibrate --config FILE --probe ID --from-file POINTS.yaml --yes

VALUE is a pH number, a buffer name (its pH at TEMP_C from its table) or
``auto`` (recognised within --buffer-set).  ``--yes`` accepts the calibration
when the acceptance limits allow it; without ``--yes`` a terminal asks, and
anything else stores it as rejected.

Interactive (no points given): asks for the buffer set, puts the probe in
maintenance, shows the live mV, temperature and drift until the reading is
stable, recognises the buffer, takes the point, asks for more, shows offset,
slope, residuals and the verdict, asks to accept, and ends maintenance.

Exit status: 0 accepted and applied; 1 rejected (by the limits or the
technician) or the points could not be fitted; 2 configuration error.

Caution: a calibration changes every pH the service reports for the probe and
the alarms that follow from it.  probeflow supports operators; it is not a
safety system.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from probeflow.buffers import BUFFER_SETS, BufferSet, identify_buffer
from probeflow.calibration.acceptance import AcceptanceLimits, judge
from probeflow.calibration.fitting import fit_calibration
from probeflow.calibration.live import LiveSource, open_live_source
from probeflow.calibration.model import Calibration, CalibrationPoint
from probeflow.calibration.procedure import (
    CalibrationOutcome,
    PointSpec,
    buffer_set_named,
    calibrate,
    load_points_file,
    parse_point_spec,
    resolve_point,
)
from probeflow.calibration.site import calibration_in_effect, load_limits, probe_config, store_path
from probeflow.calibration.stability import StabilityChecker, StabilityCriterion
from probeflow.calibration.store import CalibrationStore, PointDetail
from probeflow.cli.common import add_config_argument
from probeflow.config import load_config
from probeflow.config.load import LoadedConfig
from probeflow.errors import CalibrationError, ProbeflowError

HELP = "calibrate a probe in buffers (interactive, or scripted with --point / --from-file)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    parser.add_argument("--probe", required=True, metavar="ID", help="probe id from the config")
    parser.add_argument("--point", action="append", default=[], metavar="VALUE,MV,TEMP_C",
                        help="a measured point: VALUE a pH number, a buffer name or auto (repeat)")
    parser.add_argument("--from-file", metavar="POINTS.yaml", help="read the points from a YAML file")
    parser.add_argument("--buffer-set", metavar="NAME|FILE",
                        help=f"buffers to recognise and choose from: {', '.join(BUFFER_SETS)}, all, "
                             "or a YAML file of your own set (default primary_wide)")
    parser.add_argument("--limits", metavar="FILE", help="acceptance limits YAML (flat or per probe)")
    parser.add_argument("--db", metavar="FILE", help="SQLite file (default: the config's sqlite store)")
    parser.add_argument("--who", help="who calibrated")
    parser.add_argument("--serial", help="electrode serial number")
    parser.add_argument("--note", help="free text kept with the calibration")
    parser.add_argument("--yes", action="store_true", help="accept when the limits allow, without asking")
    parser.add_argument("--json", action="store_true", help="print the result as one JSON object")
    live = parser.add_argument_group("interactive calibration")
    live.add_argument("--source", choices=("auto", "service", "collector", "typed"), default="auto",
                      help="where readings come from: the running service's store, the config's "
                           "collectors, or typed in (default auto)")
    live.add_argument("--drift-mv-per-min", type=float, default=StabilityCriterion.max_drift_mv_per_min,
                      help="stable when |mV drift| stays below this (default %(default)s)")
    live.add_argument("--window-s", type=float, default=StabilityCriterion.window_s,
                      help="over this window in seconds (default %(default)s)")
    live.add_argument("--temp-drift-c-per-min", type=float,
                      default=StabilityCriterion.max_temp_drift_c_per_min,
                      help="and |temperature drift| below this (default %(default)s)")
    live.add_argument("--stable-timeout-s", type=float, default=600.0,
                      help="give up waiting for a stable reading after this (default %(default)s)")


def _open(args: argparse.Namespace, sections: tuple[str, ...]) -> tuple[LoadedConfig, CalibrationStore]:
    config = load_config(args.config, sections=sections, require_secrets="collectors" in sections)
    probe_config(config, args.probe)  # the probe must be in the config
    path = Path(args.db) if args.db else store_path(config)
    return config, CalibrationStore(path)


def run(args: argparse.Namespace) -> int:
    if args.point or args.from_file:
        return _scripted(args)
    return _interactive(args, Terminal())


# -- scripted ----------------------------------------------------------------------------
def _scripted(args: argparse.Namespace) -> int:
    specs: list[PointSpec] = [parse_point_spec(p) for p in args.point]
    meta: dict[str, str | None] = {"who": args.who, "serial": args.serial, "note": args.note}
    set_name = args.buffer_set
    if args.from_file:
        points_file = load_points_file(args.from_file)
        specs.extend(points_file.points)
        meta = {"who": args.who or points_file.who, "serial": args.serial or points_file.electrode_serial,
                "note": args.note or points_file.note}
        set_name = set_name or points_file.buffer_set
    config, store = _open(args, ("stores",))
    with store:
        probe = probe_config(config, args.probe)
        limits = load_limits(args.limits, probe)
        buffers = buffer_set_named(set_name)
        previous = calibration_in_effect(store, probe)
        details = [PointDetail(resolve_point(s, buffers, previous), s.stable, s.drift_mv_per_min)
                   for s in specs]
        accepts = args.yes or (_is_terminal() and _preview_and_ask(
            details, previous, limits))
        outcome = calibrate(store, args.probe, details, limits=limits, previous=previous,
                            technician_accepts=accepts, ts=time.time(), who=meta["who"],
                            electrode_serial=meta["serial"], note=meta["note"])
    _report(outcome, args.json, sys.stdout)
    return 0 if outcome.accepted else 1


def _is_terminal() -> bool:
    return sys.stdin.isatty() and sys.stdout.isatty()


def _preview_and_ask(details: list[PointDetail], previous: Calibration | None,
                     limits: AcceptanceLimits) -> bool:
    """Show the result; True when the limits allow it and the technician accepts."""
    if not _fit_preview(details, previous, limits):
        return False
    return Terminal().yes_no("Accept and apply this calibration?", default=False)


# -- output --------------------------------------------------------------------------------
def _summary(cal: Calibration, status: str, reasons: tuple[str, ...] | list[str],
             notes: tuple[str, ...] | list[str]) -> str:
    lines = [f"offset {cal.offset_mv:+.2f} mV at pH {cal.zero_ph:g}   slope {cal.slope_pct:.2f} %"]
    for i, p in enumerate(cal.points):
        r = cal.residuals_ph[i] if i < len(cal.residuals_ph) else math.nan
        name = p.buffer or "(pH typed in)"
        lines.append(f"  point {i + 1}: {name:<28} pH {p.ph:7.3f}  {p.mv:+8.2f} mV  {p.temp_c:5.1f} °C  "
                     f"residual {r:+.3f} pH")
    lines.append(f"verdict: {status}")
    lines.extend(f"  - {r}" for r in reasons)
    lines.extend(f"  note: {n}" for n in notes)
    return "\n".join(lines)


def _report(outcome: CalibrationOutcome, as_json: bool, out: Any) -> None:
    if as_json:
        print(json.dumps(outcome.to_record()), file=out)
        return
    v = outcome.verdict
    print(_summary(outcome.calibration, v.status, v.reasons, v.notes), file=out)
    if outcome.accepted:
        print(f"stored as calibration #{outcome.id}; applies from now on", file=out)
    else:
        print(f"stored as calibration #{outcome.id} (rejected, not applied)", file=out)


# -- interactive ---------------------------------------------------------------------------
class Terminal:
    """Questions and a live status line; input() and print() so a pty or a pipe both work."""

    def __init__(self, read: Callable[[], str] = input, out: Any = None) -> None:
        self._read = read
        self._out = out or sys.stdout

    def say(self, text: str = "") -> None:
        print(text, file=self._out, flush=True)

    def status(self, text: str) -> None:
        print(text, file=self._out, flush=True)

    def ask(self, question: str, default: str = "") -> str:
        hint = f" [{default}]" if default else ""
        print(f"{question}{hint}: ", end="", file=self._out, flush=True)  # stdout, not input()'s stderr
        try:
            answer = self._read().strip()
        except EOFError:
            raise ProbeflowError("calibration abandoned: input ended") from None
        return answer or default

    def yes_no(self, question: str, default: bool) -> bool:
        answer = self.ask(question + (" (Y/n)" if default else " (y/N)")).lower()
        return default if not answer else answer in ("y", "yes")


def _choose_buffer_set(term: Terminal, given: str | None) -> BufferSet:
    if given:
        return buffer_set_named(given)
    term.say("Buffer sets: " + ", ".join(BUFFER_SETS) + ", all, or the path of a YAML file")
    while True:
        name = term.ask("Which buffer set", "primary_4_7_9")
        try:
            chosen = buffer_set_named(name)
        except ProbeflowError as exc:
            term.say(str(exc))
            continue
        term.say(f"Buffer set {chosen.name}: {', '.join(chosen.names)}")
        return chosen


def _wait_stable(term: Terminal, source: LiveSource, criterion: StabilityCriterion,
                 timeout_s: float) -> tuple[float, float, bool, float] | None:
    """(mV, temp °C, stable, drift) once stable; None if the technician gives up."""
    checker = StabilityChecker(criterion)
    started = time.monotonic()
    last_print = 0.0
    while True:
        status = None
        for sample in source.samples(timeout=1.0):
            status = checker.add(sample.ts, sample.mv, sample.temp_c)
        if status is not None and time.monotonic() - last_print >= 1.0:
            last_print = time.monotonic()
            term.status(f"  {status.mv:+8.2f} mV  {status.temp_c:5.1f} °C  drift "
                        f"{status.drift_mv_per_min:+6.2f} mV/min  "
                        f"{'STABLE' if status.stable else status.reason}")
        if status is not None and status.stable:
            return status.mv, status.temp_c, True, status.drift_mv_per_min
        if time.monotonic() - started > timeout_s:
            last = checker.status()
            term.say(f"No stable reading after {timeout_s:g} s ({last.reason}).")
            answer = term.ask("Take it anyway (t), keep waiting (w) or skip this buffer (s)", "s")
            if answer.startswith("t") and math.isfinite(last.mv):
                return last.mv, last.temp_c, False, last.drift_mv_per_min
            if answer.startswith("w"):
                started = time.monotonic()
                continue
            return None


def _typed_reading(term: Terminal) -> tuple[float, float, bool | None, float | None] | None:
    while True:
        text = term.ask("Reading as MV,TEMP_C (empty to skip)")
        if not text:
            return None
        parts = [p.strip() for p in text.split(",")]
        try:
            mv, temp = float(parts[0]), float(parts[1])
        except (ValueError, IndexError):
            term.say("Type the mV and the temperature separated by a comma, e.g. 171.3,21.5")
            continue
        if math.isfinite(mv) and math.isfinite(temp):
            return mv, temp, None, None


def _name_point(term: Terminal, buffers: BufferSet, rough: Calibration | None, mv: float,
                temp_c: float) -> CalibrationPoint | None:
    guess: Any = rough if rough is not None else (0.0, 100.0, 7.0)
    match = identify_buffer(mv, temp_c, guess, buffers)
    default = match.name or ""
    term.say(("Recognised " if match.name else "Not recognised: ") + match.reason)
    while True:
        answer = term.ask("Buffer name or its pH (empty to skip this point)", default)
        if not answer:
            return None
        try:
            return resolve_point(PointSpec(answer, mv, temp_c), buffers, rough)
        except ProbeflowError as exc:
            term.say(str(exc))


def _interactive(args: argparse.Namespace, term: Terminal) -> int:
    sections = ("stores",) if args.source in ("typed", "service") else ("stores", "collectors")
    config, store = _open(args, sections)
    with store:
        probe = probe_config(config, args.probe)
        limits = load_limits(args.limits, probe)
        previous = calibration_in_effect(store, probe)
        buffers = _choose_buffer_set(term, args.buffer_set)
        criterion = StabilityCriterion(args.drift_mv_per_min, args.window_s,
                                       args.temp_drift_c_per_min)
        source: LiveSource | None = None
        if args.source != "typed":
            source = open_live_source(config, args.probe, store, mode=args.source)
            term.say(f"Reading {source.description}.")
        period = store.start_maintenance(args.probe, time.time(), reason="calibration")
        term.say(f"{args.probe} is in maintenance: its readings are flagged and its alarms suppressed.")
        try:
            details = _collect_points(term, source, buffers, previous, criterion, args.stable_timeout_s)
            if not details:
                term.say("No points taken; nothing stored.")
                return 1
            try:
                cal_preview = _fit_preview(details, previous, limits)
            except CalibrationError as exc:
                term.say(f"Cannot calibrate: {exc}")
                return 1
            accepts = cal_preview and (args.yes or term.yes_no("Accept and apply this calibration?",
                                                               False))
            who = args.who or term.ask("Your name (kept with the calibration)", "") or None
            outcome = calibrate(store, args.probe, details, limits=limits, previous=previous,
                                technician_accepts=bool(accepts), ts=time.time(), who=who,
                                electrode_serial=args.serial, note=args.note)
        finally:
            if source is not None:
                source.close()
            store.stop_maintenance(args.probe, time.time(), period)
            term.say(f"{args.probe} has left maintenance.")
    if args.json:
        _report(outcome, True, sys.stdout)
    else:
        term.say("accepted and applied" if outcome.accepted else "stored as rejected, not applied")
    return 0 if outcome.accepted else 1


def _fit_preview(details: list[PointDetail], previous: Calibration | None,
                 limits: AcceptanceLimits) -> bool:
    """Print offset, slope, residuals and the limits' verdict; True when the limits allow it."""
    cal = fit_calibration([d.point for d in details], previous=previous)
    verdict = judge(cal, limits)
    print(_summary(cal, verdict.status, verdict.reasons, verdict.notes), flush=True)
    return verdict.accepted


def _collect_points(term: Terminal, source: LiveSource | None, buffers: BufferSet,
                    previous: Calibration | None, criterion: StabilityCriterion,
                    timeout_s: float) -> list[PointDetail]:
    details: list[PointDetail] = []
    while True:
        n = len(details) + 1
        if source is None:
            term.say(f"Point {n}: put the probe in a buffer and type the reading.")
            reading = _typed_reading(term)
        else:
            term.ask(f"Point {n}: rinse the probe, put it in a buffer, then press Enter")
            term.say(f"Waiting for a stable reading (|drift| < {criterion.max_drift_mv_per_min:g} "
                     f"mV/min over {criterion.window_s:g} s)...")
            reading = _wait_stable(term, source, criterion, timeout_s)
        if reading is not None:
            mv, temp, stable, drift = reading
            point = _name_point(term, buffers, previous, mv, temp)
            if point is not None:
                details.append(PointDetail(point, stable, drift))
                term.say(f"Point {n} taken: {point.buffer or 'pH'} {point.ph:.3f} at {temp:.1f} °C, "
                         f"{mv:+.2f} mV")
        if not term.yes_no("Another point?", default=len(details) < 2):
            return details
